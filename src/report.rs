//! Writers of solved snapshots: a readable table, JSON and CSV, all in the model's own units.

use ringmain_core::model::{Valve, ValveType};
use ringmain_core::solve::Warning;
use ringmain_core::units::HORSEPOWER;
use ringmain_core::{Model, NodeKind, Solution};
use serde_json::{json, Value};
use std::fmt::Write as _;

/// A solution converted into the model's units, ready for any writer.
pub struct Report<'a> {
    model: &'a Model,
    solution: &'a Solution,
    density: f64,
}

fn finite_or_null(v: f64) -> Value {
    if v.is_finite() {
        json!(v)
    } else {
        Value::Null
    }
}

impl<'a> Report<'a> {
    pub fn new(model: &'a Model, solution: &'a Solution) -> Self {
        Report { model, solution, density: model.options.water_properties().density }
    }

    fn len(&self, v: f64) -> f64 {
        self.model.units.length.from_si(v)
    }
    fn flow(&self, v: f64) -> f64 {
        self.model.units.flow.from_si(v)
    }
    fn pressure(&self, head: f64) -> f64 {
        self.model.units.pressure.from_head(head, self.density)
    }
    /// Power in kW (SI models) or hp (US-customary models).
    fn power(&self, watts: f64) -> f64 {
        if self.model.units.is_us_customary() {
            watts / HORSEPOWER
        } else {
            watts / 1e3
        }
    }
    fn power_label(&self) -> &'static str {
        if self.model.units.is_us_customary() {
            "hp"
        } else {
            "kW"
        }
    }
    /// A valve's setting in the model's units.
    fn setting(&self, v: &Valve) -> f64 {
        match v.valve {
            ValveType::PressureReducing | ValveType::PressureSustaining => self.pressure(v.setting),
            ValveType::FlowControl => self.flow(v.setting),
            ValveType::Throttle => v.setting,
        }
    }
    fn setting_unit(&self, v: &Valve) -> String {
        match v.valve {
            ValveType::PressureReducing | ValveType::PressureSustaining => self.model.units.pressure.label().into(),
            ValveType::FlowControl => self.model.units.flow.label().into(),
            ValveType::Throttle => "K".into(),
        }
    }

    /// Supply of every fixed-head node (positive: into the network), in flow units.
    fn sources(&self) -> Vec<(usize, f64)> {
        self.model
            .nodes()
            .iter()
            .enumerate()
            .filter(|(_, n)| n.fixed_head().is_some())
            .map(|(i, _)| (i, self.flow(self.solution.net_outflow(self.model, i))))
            .collect()
    }

    fn total_demand(&self) -> f64 {
        self.flow(self.model.nodes().iter().map(|n| n.demand()).sum())
    }

    pub fn to_json(&self) -> Value {
        let m = self.model;
        let s = self.solution;
        let u = &m.units;
        let nodes: Vec<Value> = m
            .nodes()
            .iter()
            .enumerate()
            .map(|(i, n)| {
                json!({
                    "id": n.id,
                    "kind": n.kind.label(),
                    "elevation": self.len(n.elevation),
                    "head": finite_or_null(self.len(s.head[i])),
                    "pressure": finite_or_null(self.pressure(s.pressure[i])),
                    "demand": self.flow(s.demand[i]),
                    "connected": s.connected[i],
                })
            })
            .collect();
        let links: Vec<Value> = m
            .links()
            .iter()
            .enumerate()
            .map(|(k, l)| {
                let mut v = json!({
                    "id": l.id,
                    "kind": l.kind.label(),
                    "from": m.nodes()[l.from].id,
                    "to": m.nodes()[l.to].id,
                    "flow": self.flow(s.flow[k]),
                    "velocity": self.len(s.velocity[k]),
                    "headloss": finite_or_null(self.len(s.headloss[k])),
                    "status": s.link_state[k].status_label(),
                });
                if let Some(reason) = s.link_state[k].reason() {
                    v["reason"] = json!(reason);
                }
                if let Some(p) = s.pumps.iter().find(|p| p.link == k) {
                    v["head_gain"] = finite_or_null(self.len(p.head));
                    v["speed"] = json!(p.speed);
                    v["efficiency"] = json!(p.efficiency * 100.0);
                    v["hydraulic_power"] = finite_or_null(self.power(p.hydraulic_power));
                    v["shaft_power"] = finite_or_null(self.power(p.shaft_power));
                    v["beyond_curve"] = json!(p.beyond_curve);
                }
                if let Some(valve) = l.as_valve() {
                    v["valve"] = json!(valve.valve.label());
                    v["setting"] = json!(self.setting(valve));
                }
                v
            })
            .collect();
        let sources: Vec<Value> = self
            .sources()
            .into_iter()
            .map(|(i, q)| json!({"id": m.nodes()[i].id, "kind": m.nodes()[i].kind.label(), "supply": q}))
            .collect();
        json!({
            "title": m.title,
            "converged": s.converged,
            "iterations": s.iterations,
            "status_changes": s.status_changes,
            "status_ending": s.ending.describe(),
            "units": {
                "length": u.length.label(), "flow": u.flow.label(), "pressure": u.pressure.label(),
                "velocity": u.velocity_label(), "diameter": u.diameter.label(), "power": self.power_label(),
            },
            "summary": {
                "max_mass_residual": self.flow(s.max_mass_residual),
                "max_energy_residual": self.len(s.max_energy_residual),
                "total_demand": self.total_demand(),
                "sources": sources,
            },
            "nodes": nodes,
            "links": links,
            "warnings": s.warnings.iter().map(warning_text).collect::<Vec<_>>(),
        })
    }

    pub fn to_csv(&self) -> String {
        let m = self.model;
        let s = self.solution;
        let u = &m.units;
        let cell = |v: f64| if v.is_finite() { format!("{v}") } else { String::new() };
        let mut out = String::new();
        let _ = writeln!(
            out,
            "node,kind,elevation_{l},head_{l},pressure_{p},demand_{q}",
            l = u.length,
            p = u.pressure,
            q = u.flow
        );
        for (i, n) in m.nodes().iter().enumerate() {
            let _ = writeln!(
                out,
                "{},{},{},{},{},{}",
                csv_field(&n.id),
                n.kind.label(),
                cell(self.len(n.elevation)),
                cell(self.len(s.head[i])),
                cell(self.pressure(s.pressure[i])),
                cell(self.flow(s.demand[i]))
            );
        }
        out.push('\n');
        let _ = writeln!(
            out,
            "link,kind,from,to,flow_{q},velocity_{v},headloss_{l},status",
            q = u.flow,
            v = u.velocity_label(),
            l = u.length
        );
        for (k, l) in m.links().iter().enumerate() {
            let _ = writeln!(
                out,
                "{},{},{},{},{},{},{},{}",
                csv_field(&l.id),
                l.kind.label(),
                csv_field(&m.nodes()[l.from].id),
                csv_field(&m.nodes()[l.to].id),
                cell(self.flow(s.flow[k])),
                cell(self.len(s.velocity[k])),
                cell(self.len(s.headloss[k])),
                s.link_state[k].status_label()
            );
        }
        out
    }

    pub fn to_table(&self) -> String {
        let m = self.model;
        let s = self.solution;
        let u = &m.units;
        let num = |v: f64, width: usize, prec: usize| {
            if v.is_finite() {
                format!("{v:>width$.prec$}")
            } else {
                format!("{:>width$}", "-")
            }
        };
        let idw = m
            .nodes()
            .iter()
            .map(|n| n.id.chars().count())
            .chain(m.links().iter().map(|l| l.id.chars().count()))
            .max()
            .unwrap_or(4)
            .clamp(4, 24);
        let mut out = String::new();
        if let Some(t) = &m.title {
            let _ = writeln!(out, "{t}\n");
        }
        let _ = writeln!(out, "Nodes");
        let _ = writeln!(
            out,
            "{:<idw$}  {:<9}  {:>10}  {:>10}  {:>10}  {:>10}",
            "id",
            "kind",
            format!("elev {}", u.length),
            format!("head {}", u.length),
            format!("pres {}", u.pressure),
            format!("dem {}", u.flow)
        );
        for (i, n) in m.nodes().iter().enumerate() {
            let _ = writeln!(
                out,
                "{:<idw$}  {:<9}  {}  {}  {}  {}",
                n.id,
                n.kind.label(),
                num(self.len(n.elevation), 10, 2),
                num(self.len(s.head[i]), 10, 2),
                num(self.pressure(s.pressure[i]), 10, 2),
                num(self.flow(s.demand[i]), 10, 3)
            );
        }
        let _ = writeln!(out, "\nLinks");
        let _ = writeln!(
            out,
            "{:<idw$}  {:<6}  {:>11}  {:>10}  {:>11}  status",
            "id",
            "kind",
            format!("flow {}", u.flow),
            format!("vel {}", u.velocity_label()),
            format!("loss {}", u.length),
        );
        for (k, l) in m.links().iter().enumerate() {
            let state = s.link_state[k];
            let status = match state.reason() {
                Some(r) => format!("{} ({r})", state.status_label()),
                None => state.status_label().to_owned(),
            };
            let _ = writeln!(
                out,
                "{:<idw$}  {:<6}  {}  {}  {}  {}",
                l.id,
                l.kind.label(),
                num(self.flow(s.flow[k]), 11, 3),
                num(self.len(s.velocity[k]), 10, 3),
                num(self.len(s.headloss[k]), 11, 3),
                status
            );
        }
        if !s.pumps.is_empty() {
            let _ = writeln!(out, "\nPumps");
            let _ = writeln!(
                out,
                "{:<idw$}  {:>11}  {:>10}  {:>6}  {:>7}  {:>10}  state",
                "id",
                format!("flow {}", u.flow),
                format!("head {}", u.length),
                "speed",
                "eff %",
                format!("shaft {}", self.power_label()),
            );
            for p in &s.pumps {
                let l = &m.links()[p.link];
                let state = s.link_state[p.link];
                let status = match state.reason() {
                    Some(r) => format!("{}: {r}", state.status_label()),
                    None if p.beyond_curve => "open: beyond the end of its curve".to_owned(),
                    None => state.status_label().to_owned(),
                };
                let _ = writeln!(
                    out,
                    "{:<idw$}  {}  {}  {:>6.3}  {:>7.1}  {}  {}",
                    l.id,
                    num(self.flow(s.flow[p.link]), 11, 3),
                    num(self.len(p.head), 10, 2),
                    p.speed,
                    p.efficiency * 100.0,
                    num(self.power(p.shaft_power), 10, 2),
                    status
                );
            }
        }
        let valves: Vec<(usize, &Valve)> =
            m.links().iter().enumerate().filter_map(|(k, l)| Some((k, l.as_valve()?))).collect();
        if !valves.is_empty() {
            let _ = writeln!(out, "\nValves");
            let _ = writeln!(
                out,
                "{:<idw$}  {:<19}  {:>12}  {:>11}  {:>10}  state",
                "id",
                "type",
                "setting",
                format!("flow {}", u.flow),
                format!("loss {}", u.length),
            );
            for (k, v) in valves {
                let state = s.link_state[k];
                let status = match state.reason() {
                    Some(r) => format!("{}: {r}", state.status_label()),
                    None => state.status_label().to_owned(),
                };
                let _ = writeln!(
                    out,
                    "{:<idw$}  {:<19}  {:>12}  {}  {}  {}",
                    m.links()[k].id,
                    v.valve.label(),
                    format!("{:.2} {}", self.setting(v), self.setting_unit(v)),
                    num(self.flow(s.flow[k]), 11, 3),
                    num(self.len(s.headloss[k]), 10, 3),
                    status
                );
            }
        }
        let _ = writeln!(out, "\nSummary");
        let _ = writeln!(out, "  iterations                {}", s.iterations);
        if s.status_changes > 0 {
            let _ = writeln!(out, "  device state changes      {} ({})", s.status_changes, s.ending.describe());
        }
        let _ = writeln!(out, "  largest mass residual     {:.3e} {}", self.flow(s.max_mass_residual), u.flow);
        let _ = writeln!(out, "  largest energy residual   {:.3e} {}", self.len(s.max_energy_residual), u.length);
        let _ = writeln!(out, "  total demand              {:.3} {}", self.total_demand(), u.flow);
        for (i, q) in self.sources() {
            let n = &m.nodes()[i];
            let what = match (&n.kind, q >= 0.0) {
                (NodeKind::Tank(_), false) => "filling",
                (_, true) => "supplying",
                (_, false) => "taking",
            };
            let _ = writeln!(out, "  {:<9} {:<idw$}  {what} {:.3} {}", n.kind.label(), n.id, q.abs(), u.flow);
        }
        let lowest = m
            .nodes()
            .iter()
            .enumerate()
            .filter(|(i, n)| n.fixed_head().is_none() && s.pressure[*i].is_finite())
            .min_by(|a, b| s.pressure[a.0].total_cmp(&s.pressure[b.0]));
        if let Some((i, n)) = lowest {
            let _ = writeln!(
                out,
                "  lowest pressure           {:.2} {} at {}",
                self.pressure(s.pressure[i]),
                u.pressure,
                n.id
            );
        }
        if !s.warnings.is_empty() {
            let _ = writeln!(out, "\nWarnings");
            for w in &s.warnings {
                let _ = writeln!(out, "  {}", warning_text(w));
            }
        }
        let _ = writeln!(
            out,
            "\nResults are only as good as the model and its data; designs must be checked by a licensed engineer\n\
             against local codes and the utility's standards."
        );
        out
    }
}

fn warning_text(w: &Warning) -> String {
    match &w.element {
        Some(e) => format!("{e}: {}", w.message),
        None => w.message.clone(),
    }
}

fn csv_field(text: &str) -> String {
    if text.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", text.replace('"', "\"\""))
    } else {
        text.to_owned()
    }
}
