//! Water-quality criteria over a run: the highest age and the lowest residuals at junctions,
//! over the reported times at or after the spin-up (`after`).

use super::{ConstituentKind, QualityRun};
use crate::analysis::criteria::{Criteria, Quantity};
use crate::analysis::evaluate::{CheckResult, Finding};
use crate::error::{Element, ModelError};
use crate::model::{Model, NodeKind};

/// The worst value of one junction for one constituent over the checked times.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Worst {
    /// Node index.
    pub node: usize,
    /// The value (internal units).
    pub value: f64,
    /// When, s.
    pub time: f64,
}

/// Per junction, its highest (`highest = true`) or lowest value of constituent `c` over the
/// reported times at or after `after`.
pub fn worst_per_junction(model: &Model, run: &QualityRun, c: usize, highest: bool, after: f64) -> Vec<Worst> {
    let mut out: Vec<Worst> = Vec::new();
    for (i, n) in model.nodes().iter().enumerate() {
        if !matches!(n.kind, NodeKind::Junction { .. }) {
            continue;
        }
        let mut w: Option<Worst> = None;
        for r in run.records.iter().filter(|r| r.time >= after - 1e-6) {
            let v = r.node[c][i];
            if !v.is_finite() {
                continue;
            }
            let better = match w {
                None => true,
                Some(w) => (highest && v > w.value) || (!highest && v < w.value),
            };
            if better {
                w = Some(Worst { node: i, value: v, time: r.time });
            }
        }
        out.extend(w);
    }
    out
}

/// One result per quality limit set in `criteria`; `keep` worst findings each, their time in
/// the finding's detail. A limit on a constituent the model does not have is an error naming
/// the criterion.
pub fn evaluate(
    criteria: &Criteria,
    model: &Model,
    run: &QualityRun,
    keep: usize,
) -> Result<Vec<CheckResult>, ModelError> {
    let mut out = Vec::new();
    let clock = model.time.simulation.map_or(0.0, |s| s.start_clock);
    let detail = |t: f64| {
        let c = clock + t;
        format!("at day {} {}", (c / 86_400.0).floor() as i64 + 1, crate::model::time::format_clock(c))
    };
    if let Some(limit) = criteria.max_age {
        let ages: Vec<usize> =
            (0..run.constituents.len()).filter(|&c| run.constituents[c].kind == ConstituentKind::Age).collect();
        if ages.is_empty() {
            return Err(ModelError::at(
                Some(Element::Table("criteria".into())),
                Some("max_age"),
                "the model has no [[quality]] entry of kind \"age\" to check it against",
            ));
        }
        for &c in &ages {
            let name =
                if ages.len() == 1 { "max_age".to_owned() } else { format!("max_age.{}", run.constituents[c].id) };
            let mut check = CheckResult::new(name, Quantity::Age, limit);
            for w in worst_per_junction(model, run, c, true, criteria.after) {
                check.checked += 1;
                if w.value > limit {
                    let mut f = Finding::over(
                        Element::Node(model.nodes()[w.node].id.to_string()),
                        w.value,
                        limit,
                        w.value - limit,
                    );
                    f.detail = Some(detail(w.time));
                    check.add(f, keep);
                }
            }
            out.push(check);
        }
    }
    for &(c, limit) in &criteria.min_residual {
        if c >= run.constituents.len() {
            return Err(ModelError::at(
                Some(Element::Table("criteria".into())),
                Some("min_residual"),
                "names a constituent the run does not have",
            ));
        }
        let mut check = CheckResult::new(format!("min_residual.{}", run.constituents[c].id), Quantity::Number, limit);
        for w in worst_per_junction(model, run, c, false, criteria.after) {
            check.checked += 1;
            if w.value < limit {
                let mut f =
                    Finding::over(Element::Node(model.nodes()[w.node].id.to_string()), w.value, limit, limit - w.value);
                f.detail = Some(detail(w.time));
                check.add(f, keep);
            }
        }
        out.push(check);
    }
    Ok(out)
}
