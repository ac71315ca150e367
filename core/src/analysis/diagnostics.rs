//! Model diagnostics: things in a valid model that an engineer should look at.
//!
//! None of these stops a solve; each is a warning, or a failure when the criteria list its code in
//! `fail_on_warnings`. The plausible ranges are common practice for drinking-water distribution,
//! not limits of the method:
//!
//! - Hazen–Williams C between 40 and 160: handbook tables run from about 40 for badly
//!   tuberculated old cast iron to about 150–160 for new plastic pipe (common practice; the range
//!   as remembered from several handbooks, no single source).
//! - Diameters between 10 mm and 3000 mm: service pipes start near 10 mm and the largest trunk
//!   mains are about 3 m across (common practice); values outside usually mean a unit mistake
//!   (metres written as millimetres or the reverse).
//! - Velocities up to 3 m/s: design guides keep distribution mains well below this to limit head
//!   loss, surge and scour (common practice); faster water usually means an undersized pipe or a
//!   wrong demand.
//! - Elevations within 100 m of the median of a junction's neighbours: our own rule of thumb for
//!   catching a mistyped digit (1200 written for 120); two joined nodes can legitimately differ by
//!   more on a steep rising main, which is why this is only a warning.
//!
//! - Darcy–Weisbach relative roughness ε/D up to 0.05: the Moody diagram (Moody 1944, "Friction
//!   factors for pipe flow", Trans. ASME 66) ends there, and the roughest pipes in the usual
//!   tables (riveted steel, up to about 9 mm) stay below it at any main's diameter (common
//!   practice). A roughness comparable to the diameter is almost always a Hazen–Williams C left
//!   in after switching the friction law (C = 100 read as 100 mm).
//! - Relative pump speed up to 2: variable-speed drives run pumps from about half to a little
//!   above their rated speed, and the affinity laws are used only near it (common practice); a
//!   speed above 2 is almost always a speed in rpm typed where the relative speed belongs.
//! - Head tolerance up to 1 m: heads and pressures are reported to 0.01 m and the default
//!   tolerance is 1e-4 m; a tolerance above 1 m lets the iteration stop with errors larger than
//!   the pressure margins a design is judged by (common practice).
//!
//! A link whose both ends are the same node is not a warning: the reader rejects it as an error.

use crate::error::Element;
use crate::model::{HeadLossLaw, LinkKind, LinkStatus, Model, NodeKind};
use crate::solve::topology::{mark_connected, Adjacency};
use crate::solve::Solution;
use std::collections::HashMap;
use std::ops::RangeInclusive;

/// Plausible Hazen–Williams C (common practice, see the module docs).
pub const PLAUSIBLE_HAZEN_WILLIAMS_C: RangeInclusive<f64> = 40.0..=160.0;
/// Plausible pipe and valve diameters, m (common practice).
pub const PLAUSIBLE_DIAMETER: RangeInclusive<f64> = 0.010..=3.0;
/// Highest plausible velocity, m/s (common practice).
pub const PLAUSIBLE_VELOCITY: f64 = 3.0;
/// Largest plausible Darcy–Weisbach relative roughness ε/D (the end of the Moody diagram).
pub const PLAUSIBLE_RELATIVE_ROUGHNESS: f64 = 0.05;
/// Largest plausible relative pump speed (common practice, see the module docs).
pub const PLAUSIBLE_PUMP_SPEED: f64 = 2.0;
/// Largest plausible head tolerance, m (common practice, see the module docs).
pub const PLAUSIBLE_HEAD_TOLERANCE: f64 = 1.0;
/// Largest difference from the median elevation of a junction's neighbours, m (our own rule).
pub const ELEVATION_OUTLIER: f64 = 100.0;

pub use crate::model::criteria::DiagnosticKind;
use crate::warning::{Warning, WarningKind};

/// Warnings about the model's data and structure (no solve needed).
pub fn diagnose_model(model: &Model) -> Vec<Warning> {
    let mut out = Vec::new();
    reachability(model, &mut out);
    parallel_pipes(model, &mut out);
    ranges(model, &mut out);
    elevations(model, &mut out);
    out.extend(plausibility(model));
    out
}

/// Values that are valid but almost certainly typing mistakes, which `solve` and `simulate`
/// report too (beside `check`'s full list): a Darcy–Weisbach roughness comparable to the
/// diameter, a relative pump speed above 2 (in the model, a control or a speed pattern), a head
/// tolerance above 1 m. The ranges and their sources are in the module docs.
pub fn plausibility(model: &Model) -> Vec<Warning> {
    use crate::model::show;
    let u = &model.units;
    let mut out = Vec::new();
    if model.options.headloss == HeadLossLaw::DarcyWeisbach {
        for l in model.links() {
            let Some(p) = l.as_pipe() else { continue };
            let relative = p.roughness / p.diameter;
            if relative > PLAUSIBLE_RELATIVE_ROUGHNESS {
                out.push(Warning {
                    kind: WarningKind::Model(DiagnosticKind::RoughnessRange),
                    element: Some(Element::Link(l.id.to_string())),
                    key: Some("roughness"),
                    message: format!(
                        "Darcy-Weisbach roughness {} {} is {:.3} of the diameter; the Moody diagram ends at 0.05 \
                         (common practice): a Hazen-Williams C left in after switching the friction law?",
                        show(u.roughness.from_si(p.roughness)),
                        u.roughness.label(),
                        relative
                    ),
                });
            }
        }
    }
    let speed_warning = |id: &str, where_: String, speed: f64| Warning {
        kind: WarningKind::Model(DiagnosticKind::PumpSpeed),
        element: Some(Element::Link(id.to_owned())),
        key: Some("speed"),
        message: format!(
            "relative speed {} {where_}is above {PLAUSIBLE_PUMP_SPEED} (common practice: drives run pumps near \
             their rated speed, 1): a speed in rpm typed as a relative speed?",
            show(speed)
        ),
    };
    for (k, l) in model.links().iter().enumerate() {
        let Some(p) = l.as_pump() else { continue };
        if p.speed > PLAUSIBLE_PUMP_SPEED {
            out.push(speed_warning(&l.id, String::new(), p.speed));
        }
        if let Some(&pattern) = model.time.speed_patterns.get(&k) {
            let peak = model.time.patterns[pattern].multipliers.iter().copied().fold(0.0, f64::max) * p.speed;
            if peak > PLAUSIBLE_PUMP_SPEED && p.speed <= PLAUSIBLE_PUMP_SPEED {
                out.push(speed_warning(
                    &l.id,
                    format!("(at the peak of pattern '{}') ", model.time.patterns[pattern].id),
                    peak,
                ));
            }
        }
    }
    for c in &model.time.controls {
        if let crate::model::time::Action::Speed(v) = c.action {
            if v > PLAUSIBLE_PUMP_SPEED {
                if let Some(l) = model.links().get(c.link) {
                    out.push(speed_warning(&l.id, format!("(set by control '{}') ", c.id), v));
                }
            }
        }
    }
    let tolerance = model.options.head_tolerance;
    if tolerance > PLAUSIBLE_HEAD_TOLERANCE {
        out.push(Warning {
            kind: WarningKind::Model(DiagnosticKind::HeadTolerance),
            element: Some(Element::Table("hydraulics".into())),
            key: Some("head_tolerance"),
            message: format!(
                "a head tolerance of {} {} lets the iteration stop with head errors above {} {} (common practice: \
                 heads are judged to 0.01 m; the default is 1e-4 m)",
                show(u.length.from_si(tolerance)),
                u.length.label(),
                show(u.length.from_si(PLAUSIBLE_HEAD_TOLERANCE)),
                u.length.label()
            ),
        });
    }
    out
}

/// Warnings about a solved scenario of the model (velocities). Only the velocities the solution
/// carries are read: none is taken for zero where it has none.
pub fn diagnose_solution(model: &Model, solution: &Solution) -> Vec<Warning> {
    let u = &model.units;
    let mut out = Vec::new();
    for (l, &v) in model.links().iter().zip(&solution.velocity) {
        if matches!(l.kind, LinkKind::Pump(_)) {
            continue;
        }
        let v = v.abs();
        if v > PLAUSIBLE_VELOCITY {
            out.push(Warning {
                kind: WarningKind::Model(DiagnosticKind::HighVelocity),
                element: Some(Element::Link(l.id.to_string())),
                key: Some("diameter"),
                message: format!(
                    "velocity {:.2} {} is above {:.1} {} (common practice): is the pipe undersized or a demand wrong?",
                    u.length.from_si(v),
                    u.velocity_label(),
                    u.length.from_si(PLAUSIBLE_VELOCITY),
                    u.velocity_label()
                ),
            });
        }
    }
    out
}

fn reachability(model: &Model, out: &mut Vec<Warning>) {
    let ends = crate::solve::topology::link_ends(model);
    let n = model.nodes().len();
    let mut scratch = Vec::new();
    let mut any = vec![false; n];
    let mut open = vec![false; n];
    let all_links = vec![true; model.links().len()];
    mark_connected(model, &ends, &all_links, &mut any, &mut scratch);
    let open_links: Vec<bool> = model.links().iter().map(|l| l.status != LinkStatus::Closed).collect();
    mark_connected(model, &ends, &open_links, &mut open, &mut scratch);
    for (i, node) in model.nodes().iter().enumerate() {
        if !matches!(node.kind, NodeKind::Junction { .. }) {
            continue;
        }
        if !any[i] {
            out.push(Warning {
                kind: WarningKind::Model(DiagnosticKind::IsolatedJunction),
                element: Some(Element::Node(node.id.to_string())),
                key: None,
                message: "no reservoir or tank can reach it through any link, open or closed".into(),
            });
        } else if !open[i] && node.demand() != 0.0 {
            out.push(Warning {
                kind: WarningKind::Model(DiagnosticKind::ClosedOffDemand),
                element: Some(Element::Node(node.id.to_string())),
                key: Some("demand"),
                message: format!(
                    "has a demand of {:.3} {} but only closed links join it to a source",
                    model.units.flow.from_si(node.demand()),
                    model.units.flow.label()
                ),
            });
        }
    }
}

fn parallel_pipes(model: &Model, out: &mut Vec<Warning>) {
    let mut first: HashMap<(usize, usize), usize> = HashMap::new();
    for (k, l) in model.links().iter().enumerate() {
        let Some(p) = l.as_pipe() else { continue };
        let ends = (l.from.min(l.to), l.from.max(l.to));
        match first.get(&ends) {
            None => {
                first.insert(ends, k);
            }
            Some(&j) => {
                let other = &model.links()[j];
                let same = other.as_pipe().is_some_and(|q| {
                    let close = |a: f64, b: f64| (a - b).abs() <= 1e-9 * a.abs().max(b.abs());
                    close(p.length, q.length) && close(p.diameter, q.diameter) && close(p.roughness, q.roughness)
                });
                let nodes = model.nodes();
                out.push(Warning {
                    kind: WarningKind::Model(DiagnosticKind::ParallelPipes),
                    element: Some(Element::Link(l.id.to_string())),
                    key: Some("to"),
                    message: if same {
                        format!(
                            "joins '{}' and '{}' like pipe '{}', with the same length, diameter and roughness: \
                             a duplicate entry?",
                            nodes[ends.0].id, nodes[ends.1].id, other.id
                        )
                    } else {
                        format!(
                            "joins '{}' and '{}' like pipe '{}' (fine for a twin main; check it is not a duplicate)",
                            nodes[ends.0].id, nodes[ends.1].id, other.id
                        )
                    },
                });
            }
        }
    }
}

fn ranges(model: &Model, out: &mut Vec<Warning>) {
    let u = &model.units;
    let d_text = |d: f64| format!("{} {}", u.diameter.from_si(d), u.diameter.label());
    for l in model.links() {
        if let Some(d) = l.diameter() {
            if !PLAUSIBLE_DIAMETER.contains(&d) {
                out.push(Warning {
                    kind: WarningKind::Model(DiagnosticKind::DiameterRange),
                    element: Some(Element::Link(l.id.to_string())),
                    key: Some("diameter"),
                    message: format!(
                        "diameter {} is outside {} to {} (common practice): is the unit right?",
                        d_text(d),
                        d_text(*PLAUSIBLE_DIAMETER.start()),
                        d_text(*PLAUSIBLE_DIAMETER.end())
                    ),
                });
            }
        }
        if let Some(p) = l.as_pipe() {
            if model.options.headloss == HeadLossLaw::HazenWilliams
                && !PLAUSIBLE_HAZEN_WILLIAMS_C.contains(&p.roughness)
            {
                out.push(Warning {
                    kind: WarningKind::Model(DiagnosticKind::RoughnessRange),
                    element: Some(Element::Link(l.id.to_string())),
                    key: Some("roughness"),
                    message: format!(
                        "Hazen-Williams C {} is outside {} to {} (common practice)",
                        p.roughness,
                        PLAUSIBLE_HAZEN_WILLIAMS_C.start(),
                        PLAUSIBLE_HAZEN_WILLIAMS_C.end()
                    ),
                });
            }
        }
    }
}

fn elevations(model: &Model, out: &mut Vec<Warning>) {
    let nodes = model.nodes();
    let adjacency = Adjacency::new(model);
    let mut around = Vec::new();
    for (i, node) in nodes.iter().enumerate() {
        if !matches!(node.kind, NodeKind::Junction { .. }) {
            continue;
        }
        around.clear();
        for &k in adjacency.of(i) {
            let l = &model.links()[k as usize];
            let other = if l.from == i { l.to } else { l.from };
            around.push(nodes[other].elevation);
        }
        if around.is_empty() {
            continue;
        }
        around.sort_by(f64::total_cmp);
        let m = around.len();
        let median = if m % 2 == 1 { around[m / 2] } else { 0.5 * (around[m / 2 - 1] + around[m / 2]) };
        if (node.elevation - median).abs() > ELEVATION_OUTLIER {
            let len = |v: f64| model.units.length.from_si(v);
            let unit = model.units.length.label();
            out.push(Warning {
                kind: WarningKind::Model(DiagnosticKind::ElevationOutlier),
                element: Some(Element::Node(node.id.to_string())),
                key: Some("elevation"),
                message: format!(
                    "elevation {:.1} {unit} is {:.1} {unit} from the median of its neighbours ({:.1} {unit}): a \
                     mistyped digit?",
                    len(node.elevation),
                    len((node.elevation - median).abs()),
                    len(median)
                ),
            });
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{Link, Node, Pipe};

    fn pipe(id: &str, from: usize, to: usize, d: f64, c: f64) -> Link {
        Link {
            id: id.into(),
            from,
            to,
            status: LinkStatus::Open,
            kind: LinkKind::Pipe(Pipe {
                length: 100.0,
                diameter: d,
                roughness: c,
                minor_loss: 0.0,
                check_valve: false,
            }),
        }
    }

    #[test]
    fn each_kind_is_found() {
        let mut m = Model::default();
        m.add_node(Node::reservoir("R", 50.0)).unwrap();
        m.add_node(Node::junction("A", 10.0, 0.001)).unwrap();
        m.add_node(Node::junction("B", 12.0, 0.001)).unwrap();
        m.add_node(Node::junction("C", 11.0, 0.002)).unwrap();
        m.add_node(Node::junction("Lone", 11.0, 0.0)).unwrap();
        m.add_node(Node::junction("High", 900.0, 0.0)).unwrap();
        m.add_link(pipe("P1", 0, 1, 0.2, 120.0)).unwrap();
        m.add_link(pipe("P2", 1, 2, 0.2, 120.0)).unwrap();
        m.add_link(pipe("P2b", 2, 1, 0.2, 120.0)).unwrap();
        let mut closed = pipe("P3", 2, 3, 5.0, 20.0);
        closed.status = LinkStatus::Closed;
        m.add_link(closed).unwrap();
        m.add_link(pipe("P4", 2, 5, 0.1, 120.0)).unwrap();
        // Every model warning names its element.
        let found: Vec<(DiagnosticKind, String)> = diagnose_model(&m)
            .into_iter()
            .map(|d| (d.model_kind().unwrap(), d.element.as_ref().unwrap().to_string()))
            .collect();
        let has = |k: DiagnosticKind, e: &str| found.iter().any(|(fk, fe)| *fk == k && fe == e);
        assert!(has(DiagnosticKind::IsolatedJunction, "node 'Lone'"), "{found:?}");
        assert!(has(DiagnosticKind::ClosedOffDemand, "node 'C'"), "{found:?}");
        assert!(has(DiagnosticKind::ParallelPipes, "link 'P2b'"), "{found:?}");
        assert!(has(DiagnosticKind::DiameterRange, "link 'P3'"), "{found:?}");
        assert!(has(DiagnosticKind::RoughnessRange, "link 'P3'"), "{found:?}");
        assert!(has(DiagnosticKind::ElevationOutlier, "node 'High'"), "{found:?}");
        assert_eq!(found.len(), 6, "{found:?}");
    }
}
