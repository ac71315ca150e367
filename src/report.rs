//! Writers of solved snapshots: a readable table, JSON and CSV, all in the model's own units.
//!
//! Each writer streams to an [`std::io::Write`], element by element.

use crate::columnar::{Column, Kind, Table};
use crate::csv;
use ringmain_core::format::write::write_element_per_line;
use ringmain_core::json_text;
use ringmain_core::model::{LinkKind, Valve};
use ringmain_core::physics::WaterProperties;
use ringmain_core::solve::links::{minor_losses, LinkLaw};
use ringmain_core::solve::{PumpResult, Warning};
use ringmain_core::units::{Converter, Quantity};
use ringmain_core::{Model, NodeKind, Solution};
use serde::Serialize;
use serde_json::{json, Value};
use std::io::{self, Write};
use std::path::{Path, PathBuf};

/// How many junctions of largest shortfall the summaries list.
pub const LARGEST_SHORTFALLS: usize = 10;

/// The JSON report's top level after the nodes (fields in alphabetical order, as the keys are
/// written); the keys before it (`converged`, `iterations`, `links`, `nodes`) are written by
/// [`Report::write_json`].
#[derive(Serialize)]
struct JsonTail<'a> {
    status_changes: u32,
    status_ending: &'static str,
    summary: Value,
    title: Option<&'a str>,
    units: Value,
    warnings: Vec<String>,
}

/// One node of the JSON report; numbers that are not finite are written as null. `delivered`,
/// `leakage` and `outlet` only for models whose outflows depend on pressure.
#[derive(Serialize)]
struct JsonNode<'a> {
    connected: bool,
    demand: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    delivered: Option<f64>,
    elevation: f64,
    head: f64,
    id: &'a str,
    kind: &'static str,
    #[serde(skip_serializing_if = "Option::is_none")]
    leakage: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    outlet: Option<f64>,
    pressure: f64,
}

impl JsonNode<'_> {
    /// Appends the node as serde_json writes it on one line (see [`ringmain_core::json_text`]).
    fn push_to(&self, buf: &mut Vec<u8>) {
        let mut l = json_text::Line::open(buf);
        l.flag("connected", self.connected);
        l.num("demand", self.demand);
        l.opt_num("delivered", self.delivered);
        l.num("elevation", self.elevation);
        l.num("head", self.head);
        l.text("id", self.id);
        l.text("kind", self.kind);
        l.opt_num("leakage", self.leakage);
        l.opt_num("outlet", self.outlet);
        l.num("pressure", self.pressure);
        l.close();
    }
}

/// One link of the JSON report; pump and valve fields only for pumps and valves.
#[derive(Serialize)]
struct JsonLink<'a> {
    #[serde(skip_serializing_if = "Option::is_none")]
    beyond_curve: Option<bool>,
    #[serde(skip_serializing_if = "Option::is_none")]
    efficiency: Option<f64>,
    flow: f64,
    from: &'a str,
    #[serde(skip_serializing_if = "Option::is_none")]
    head_gain: Option<f64>,
    headloss: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    hydraulic_power: Option<f64>,
    id: &'a str,
    /// Pipes and valves: the total K of `minor_loss` and the named fittings at the link's flow
    /// (null at zero flow).
    #[serde(skip_serializing_if = "Option::is_none")]
    k_total: Option<Option<f64>>,
    kind: &'static str,
    /// Pipes and valves: the fraction of the head loss due to minor losses (null at zero flow).
    #[serde(skip_serializing_if = "Option::is_none")]
    minor_share: Option<Option<f64>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    reason: Option<&'static str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    setting: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    shaft_power: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    speed: Option<f64>,
    status: &'static str,
    to: &'a str,
    #[serde(skip_serializing_if = "Option::is_none")]
    valve: Option<&'static str>,
    velocity: f64,
}

impl JsonLink<'_> {
    /// Appends the link as serde_json writes it on one line (see [`ringmain_core::json_text`]).
    fn push_to(&self, buf: &mut Vec<u8>) {
        let mut l = json_text::Line::open(buf);
        l.opt_flag("beyond_curve", self.beyond_curve);
        l.opt_num("efficiency", self.efficiency);
        l.num("flow", self.flow);
        l.text("from", self.from);
        l.opt_num("head_gain", self.head_gain);
        l.num("headloss", self.headloss);
        l.opt_num("hydraulic_power", self.hydraulic_power);
        l.text("id", self.id);
        l.opt_nullable("k_total", self.k_total);
        l.text("kind", self.kind);
        l.opt_nullable("minor_share", self.minor_share);
        l.opt_text("reason", self.reason);
        l.opt_num("setting", self.setting);
        l.opt_num("shaft_power", self.shaft_power);
        l.opt_num("speed", self.speed);
        l.text("status", self.status);
        l.text("to", self.to);
        l.opt_text("valve", self.valve);
        l.num("velocity", self.velocity);
        l.close();
    }
}

/// A solution converted into the model's units, ready for any writer.
pub struct Report<'a> {
    model: &'a Model,
    solution: &'a Solution,
    water: WaterProperties,
    /// The converter to the model's units.
    units: Converter,
}

impl<'a> Report<'a> {
    pub fn new(model: &'a Model, solution: &'a Solution) -> Self {
        let water = model.options.water_properties();
        Report { model, solution, water, units: model.converter() }
    }

    fn len(&self, v: f64) -> f64 {
        self.units.from_si(Quantity::Length, v)
    }
    fn flow(&self, v: f64) -> f64 {
        self.units.from_si(Quantity::Flow, v)
    }
    fn pressure(&self, head: f64) -> f64 {
        self.units.from_si(Quantity::Pressure, head)
    }
    /// Power in kW (SI models) or hp (US-customary models).
    fn power(&self, watts: f64) -> f64 {
        self.units.from_si(Quantity::Power, watts)
    }
    fn power_label(&self) -> &'static str {
        self.units.label(Quantity::Power)
    }
    /// A valve's setting in the model's units.
    fn setting(&self, v: &Valve) -> f64 {
        self.units.from_si(v.valve.setting_quantity(), v.setting)
    }
    fn setting_unit(&self, v: &Valve) -> String {
        self.units.label(v.valve.setting_quantity()).into()
    }

    /// Supply of every fixed-head node (positive: into the network), in flow units.
    ///
    /// One pass over the links for all of them (each node's flows are added in link order, as
    /// [`Solution::net_outflow`] adds them), instead of one pass per source.
    fn sources(&self) -> Vec<(usize, f64)> {
        let m = self.model;
        let mut net = vec![0.0; m.nodes().len()];
        for (l, &q) in m.links().iter().zip(&self.solution.flow) {
            net[l.from] += q;
            net[l.to] -= q;
        }
        m.nodes()
            .iter()
            .enumerate()
            .filter(|(_, n)| n.fixed_head().is_some())
            .map(|(i, _)| (i, self.flow(net[i])))
            .collect()
    }

    /// Whether the model's outflows depend on pressure (then delivered, leakage and outlet flows
    /// are reported).
    fn pressure_dependent(&self) -> bool {
        self.model.outflow.is_active()
    }

    /// The JSON summary's entries of a pressure-dependent solve.
    fn outflow_json(&self, summary: &mut serde_json::Map<String, Value>) {
        if !self.pressure_dependent() {
            return;
        }
        let o = self.solution.outflow_summary(LARGEST_SHORTFALLS);
        let m = self.model;
        summary.insert("demand_asked".into(), json!(self.flow(o.asked)));
        summary.insert("demand_delivered".into(), json!(self.flow(o.delivered)));
        summary.insert("shortfall".into(), json!(self.flow(o.shortfall)));
        summary.insert("shortfall_percent".into(), json!(o.shortfall_percent()));
        summary.insert("leakage_total".into(), json!(self.flow(o.leakage)));
        summary.insert("outlet_total".into(), json!(self.flow(o.outlet)));
        let largest: Vec<Value> = o
            .largest
            .iter()
            .map(|&(i, lack)| {
                json!({
                    "id": m.nodes()[i].id,
                    "demand": self.flow(self.solution.demand[i]),
                    "delivered": self.flow(self.solution.delivered(i)),
                    "shortfall": self.flow(lack),
                })
            })
            .collect();
        summary.insert("largest_shortfalls".into(), Value::Array(largest));
    }

    fn total_demand(&self) -> f64 {
        self.flow(self.model.nodes().iter().map(|n| n.demand()).sum())
    }

    fn json_node(&self, i: usize) -> JsonNode<'a> {
        let m = self.model;
        let s = self.solution;
        let n = &m.nodes()[i];
        let outflows = self.pressure_dependent();
        let value = |v: f64| outflows.then(|| self.flow(v));
        JsonNode {
            connected: s.connected[i],
            demand: self.flow(s.demand[i]),
            delivered: value(s.delivered(i)),
            elevation: self.len(n.elevation),
            head: self.len(s.head[i]),
            id: &n.id,
            kind: n.kind.label(),
            leakage: value(s.leakage(i)),
            outlet: value(s.outlet(i)),
            pressure: self.pressure(s.pressure[i]),
        }
    }

    /// A pipe's or valve's total K and the share of its head loss due to minor losses, at its
    /// flow (`None` inside: not defined at zero flow); `None` for a pump.
    fn minor(&self, k: usize) -> Option<(Option<f64>, Option<f64>)> {
        let m = self.model;
        let s = self.solution;
        let l = &m.links()[k];
        let user_k = match &l.kind {
            LinkKind::Pipe(p) => p.minor_loss,
            LinkKind::Valve(v) => v.minor_loss,
            _ => return None,
        };
        let q = s.flow[k];
        if q == 0.0 || !q.is_finite() {
            return Some((None, None));
        }
        if user_k == 0.0 && m.fittings(k).is_empty() && l.as_valve().is_none() {
            return Some((Some(0.0), Some(0.0)));
        }
        let Some((k_total, head)) = minor_losses(m, l, &self.water, q) else { return Some((None, None)) };
        let total = match &l.kind {
            // The pipe's whole law at its flow: exactly the part's denominator.
            LinkKind::Pipe(_) => LinkLaw::with_water(m, l, &self.water).evaluate_exact(q).0.abs(),
            // A regulating valve loses more than its open K: the head across it.
            _ => s.headloss[k].max(head.abs()),
        };
        let share = (total > 0.0).then(|| (head.abs() / total).min(1.0));
        Some((Some(k_total), share))
    }

    fn json_link(&self, k: usize, pump: Option<&PumpResult>) -> JsonLink<'a> {
        let m = self.model;
        let s = self.solution;
        let l = &m.links()[k];
        let valve = l.as_valve();
        let minor = self.minor(k);
        JsonLink {
            beyond_curve: pump.map(|p| p.beyond_curve),
            efficiency: pump.map(|p| p.efficiency * 100.0),
            flow: self.flow(s.flow[k]),
            from: &m.nodes()[l.from].id,
            head_gain: pump.map(|p| self.len(p.head)),
            headloss: self.reported_headloss(k),
            hydraulic_power: pump.map(|p| self.power(p.hydraulic_power)),
            id: &l.id,
            k_total: minor.map(|m| m.0),
            kind: l.kind.label(),
            minor_share: minor.map(|m| m.1),
            reason: s.link_state[k].reason(),
            setting: valve.map(|v| self.setting(v)),
            shaft_power: pump.map(|p| self.power(p.shaft_power)),
            speed: pump.map(|p| p.speed),
            status: s.link_state[k].status_label(),
            to: &m.nodes()[l.to].id,
            valve: valve.map(|v| v.valve.label()),
            velocity: self.len(s.velocity[k]),
        }
    }

    /// Writes the JSON report to `out`, one node or link a line; `out` is flushed at the end.
    ///
    /// The arrays of nodes and links are formatted by hand ([`ringmain_core::json_text`]), in parallel
    /// chunks on large networks, and written as they are formatted (nothing the size of the
    /// network is built first); the rest goes through serde. The text is byte for byte the one
    /// serde_json writes for [`JsonReport`] (the tests compare them).
    pub fn write_json<W: Write>(&self, mut out: W) -> io::Result<()> {
        let m = self.model;
        let s = self.solution;
        write!(out, "{{\n  \"converged\": true,\n  \"iterations\": {},\n  \"links\": ", s.iterations)?;
        // The pumps' results are in link order: found by bisection (a linear search if not).
        let sorted = s.pumps.windows(2).all(|w| w[0].link < w[1].link);
        let pump = |k: usize| {
            if sorted {
                s.pumps.binary_search_by_key(&k, |p| p.link).ok().map(|i| &s.pumps[i])
            } else {
                s.pumps.iter().find(|p| p.link == k)
            }
        };
        json_text::write_array(&mut out, m.links().len(), |k, buf| self.json_link(k, pump(k)).push_to(buf))?;
        out.write_all(b",\n  \"nodes\": ")?;
        json_text::write_array(&mut out, m.nodes().len(), |i, buf| self.json_node(i).push_to(buf))?;
        // The rest of the top level, written as its own element-per-line object whose opening
        // brace gives way to the comma after the nodes.
        let mut tail = Vec::with_capacity(4096);
        write_element_per_line(&mut tail, &self.json_tail())?;
        out.write_all(b",")?;
        out.write_all(tail.get(1..).unwrap_or_default())?;
        out.flush()
    }

    /// The JSON report's top-level keys after the nodes.
    fn json_tail(&self) -> JsonTail<'a> {
        let m = self.model;
        let s = self.solution;
        let u = &m.units;
        let sources: Vec<Value> = self
            .sources()
            .into_iter()
            .map(|(i, q)| json!({"id": m.nodes()[i].id, "kind": m.nodes()[i].kind.label(), "supply": q}))
            .collect();
        JsonTail {
            status_changes: s.status_changes,
            status_ending: s.ending.describe(),
            summary: {
                let mut summary = serde_json::Map::new();
                summary.insert("max_mass_residual".into(), json!(self.flow(s.max_mass_residual)));
                summary.insert("max_energy_residual".into(), json!(self.len(s.max_energy_residual)));
                summary.insert("total_demand".into(), json!(self.total_demand()));
                summary.insert("sources".into(), Value::Array(sources));
                self.outflow_json(&mut summary);
                Value::Object(summary)
            },
            title: m.title.as_deref(),
            units: json!({
                "length": u.length.label(), "flow": u.flow.label(), "pressure": u.pressure.label(),
                "velocity": u.velocity_label(), "diameter": u.diameter.label(), "power": self.power_label(),
            }),
            warnings: s.warnings.iter().map(warning_text).collect(),
        }
    }

    /// A link's head loss as reported: `|H_from − H_to|` in the direction of flow, except for
    /// pumps, whose value is signed, `H_from − H_to`: negative where the pump lifts the water (a
    /// head gain is a negative loss), so that a gain never reads as a loss.
    fn reported_headloss(&self, k: usize) -> f64 {
        let s = self.solution;
        let l = &self.model.links()[k];
        if l.as_pump().is_some() {
            self.len(s.head[l.from] - s.head[l.to])
        } else {
            self.len(s.headloss[k])
        }
    }

    /// The tables of the results, in order: nodes, links, pumps, valves, summary. The same
    /// tables, columns and units feed the CSV and the Parquet writers.
    pub fn tables(&self) -> [TableSpec; 5] {
        use Kind::{Bool, Text, F64};
        let u = &self.model.units;
        let (l, p, q, v) = (u.length.label(), u.pressure.label(), u.flow.label(), u.velocity_label());
        let power = self.power_label();
        let c = |name: &'static str, kind: Kind, unit: &str| ColumnSpec { name, kind, unit: unit.to_owned() };
        [
            TableSpec {
                name: "nodes",
                columns: vec![
                    c("id", Text, ""),
                    c("kind", Text, ""),
                    c("elevation", F64, l),
                    c("head", F64, l),
                    c("pressure", F64, p),
                    c("demand", F64, q),
                    c("connected", Bool, ""),
                ]
                .into_iter()
                .chain(
                    self.pressure_dependent()
                        .then(|| [c("delivered", F64, q), c("leakage", F64, q), c("outlet", F64, q)])
                        .into_iter()
                        .flatten(),
                )
                .collect(),
            },
            TableSpec {
                name: "links",
                columns: vec![
                    c("id", Text, ""),
                    c("kind", Text, ""),
                    c("from", Text, ""),
                    c("to", Text, ""),
                    c("flow", F64, q),
                    c("velocity", F64, v),
                    c("headloss", F64, l),
                    c("status", Text, ""),
                    c("reason", Text, ""),
                ],
            },
            TableSpec {
                name: "pumps",
                columns: vec![
                    c("id", Text, ""),
                    c("flow", F64, q),
                    c("head_gain", F64, l),
                    c("speed", F64, ""),
                    c("efficiency", F64, "%"),
                    c("hydraulic_power", F64, power),
                    c("shaft_power", F64, power),
                    c("beyond_curve", Bool, ""),
                    c("status", Text, ""),
                ],
            },
            TableSpec {
                name: "valves",
                columns: vec![
                    c("id", Text, ""),
                    c("valve", Text, ""),
                    c("setting", F64, ""),
                    c("setting_unit", Text, ""),
                    c("flow", F64, q),
                    c("headloss", F64, l),
                    c("status", Text, ""),
                    c("reason", Text, ""),
                ],
            },
            TableSpec {
                name: "summary",
                columns: vec![c("quantity", Text, ""), c("id", Text, ""), c("value", F64, ""), c("unit", Text, "")],
            },
        ]
    }

    /// Hands every row of table `t` (an index into [`Report::tables`]) to `row`, in order.
    pub fn rows(&self, t: usize, row: &mut dyn FnMut(&[Cell]) -> io::Result<()>) -> io::Result<()> {
        use Cell::{Flag, Num, Text};
        let m = self.model;
        let s = self.solution;
        let u = &m.units;
        let txt = |v: &'a str| Text(Some(v));
        match t {
            0 => {
                let outflows = self.pressure_dependent();
                for (i, n) in m.nodes().iter().enumerate() {
                    let cells = [
                        txt(&n.id),
                        txt(n.kind.label()),
                        Num(self.len(n.elevation)),
                        Num(self.len(s.head[i])),
                        Num(self.pressure(s.pressure[i])),
                        Num(self.flow(s.demand[i])),
                        Flag(s.connected[i]),
                        Num(self.flow(s.delivered(i))),
                        Num(self.flow(s.leakage(i))),
                        Num(self.flow(s.outlet(i))),
                    ];
                    row(if outflows { &cells } else { &cells[..7] })?;
                }
            }
            1 => {
                for (k, l) in m.links().iter().enumerate() {
                    row(&[
                        txt(&l.id),
                        txt(l.kind.label()),
                        txt(&m.nodes()[l.from].id),
                        txt(&m.nodes()[l.to].id),
                        Num(self.flow(s.flow[k])),
                        Num(self.len(s.velocity[k])),
                        Num(self.reported_headloss(k)),
                        txt(s.link_state[k].status_label()),
                        Text(s.link_state[k].reason()),
                    ])?;
                }
            }
            2 => {
                for pr in &s.pumps {
                    let state = s.link_state[pr.link];
                    row(&[
                        txt(&m.links()[pr.link].id),
                        Num(self.flow(s.flow[pr.link])),
                        Num(self.len(pr.head)),
                        Num(pr.speed),
                        Num(pr.efficiency * 100.0),
                        Num(self.power(pr.hydraulic_power)),
                        Num(self.power(pr.shaft_power)),
                        Flag(pr.beyond_curve),
                        txt(state.status_label()),
                    ])?;
                }
            }
            3 => {
                for (k, l) in m.links().iter().enumerate() {
                    let Some(v) = l.as_valve() else { continue };
                    let unit = self.setting_unit(v);
                    let state = s.link_state[k];
                    row(&[
                        txt(&l.id),
                        txt(v.valve.label()),
                        Num(self.setting(v)),
                        Text(Some(&unit)),
                        Num(self.flow(s.flow[k])),
                        Num(self.len(s.headloss[k])),
                        txt(state.status_label()),
                        Text(state.reason()),
                    ])?;
                }
            }
            _ => {
                let (lu, qu, pu) = (u.length.label(), u.flow.label(), u.pressure.label());
                let mut item = |what: &str, id: Option<&str>, value: f64, unit: &str| {
                    row(&[Text(Some(what)), Text(id), Num(value), Text(Some(unit))])
                };
                // Always 1 (see `JsonReport::converged`).
                item("converged", None, 1.0, "")?;
                item("iterations", None, s.iterations.into(), "")?;
                item("status_changes", None, s.status_changes.into(), "")?;
                item("max_mass_residual", None, self.flow(s.max_mass_residual), qu)?;
                item("max_energy_residual", None, self.len(s.max_energy_residual), lu)?;
                item("total_demand", None, self.total_demand(), qu)?;
                for (i, supply) in self.sources() {
                    item("supply", Some(&m.nodes()[i].id), supply, qu)?;
                }
                if let Some(i) = self.lowest_pressure_node() {
                    item("lowest_pressure", Some(&m.nodes()[i].id), self.pressure(s.pressure[i]), pu)?;
                }
                if self.pressure_dependent() {
                    let o = s.outflow_summary(LARGEST_SHORTFALLS);
                    item("demand_asked", None, self.flow(o.asked), qu)?;
                    item("demand_delivered", None, self.flow(o.delivered), qu)?;
                    item("shortfall", None, self.flow(o.shortfall), qu)?;
                    item("shortfall_percent", None, o.shortfall_percent(), "%")?;
                    item("leakage_total", None, self.flow(o.leakage), qu)?;
                    item("outlet_total", None, self.flow(o.outlet), qu)?;
                    for &(i, lack) in &o.largest {
                        item("largest_shortfall", Some(&m.nodes()[i].id), self.flow(lack), qu)?;
                    }
                }
            }
        }
        Ok(())
    }

    /// The junction (or tank) of lowest finite pressure, if any.
    fn lowest_pressure_node(&self) -> Option<usize> {
        let s = self.solution;
        (0..self.model.nodes().len())
            .filter(|&i| self.model.nodes()[i].fixed_head().is_none() && s.pressure[i].is_finite())
            .min_by(|&a, &b| s.pressure[a].total_cmp(&s.pressure[b]))
    }

    /// Writes every table as CSV into one stream, one value a row with the table named in each
    /// row: `table,id,quantity,value,unit` (text values in `value` are written as text). Opens in
    /// any spreadsheet and pivots back into the tables; [`Report::write_csv_tables`] writes
    /// each table as its own file instead.
    pub fn write_csv(&self, out: &mut dyn Write) -> io::Result<()> {
        out.write_all(b"table,id,quantity,value,unit\n")?;
        let mut line = String::with_capacity(256);
        for (t, spec) in self.tables().iter().enumerate() {
            let summary = spec.name == "summary";
            self.rows(t, &mut |cells| {
                // The summary's rows are already one value each.
                if summary {
                    line.clear();
                    line.push_str("summary,");
                    push_cell(&mut line, &cells[1]);
                    line.push(',');
                    push_cell(&mut line, &cells[0]);
                    line.push(',');
                    push_cell(&mut line, &cells[2]);
                    line.push(',');
                    push_cell(&mut line, &cells[3]);
                    line.push('\n');
                    return out.write_all(line.as_bytes());
                }
                for (col, cell) in spec.columns.iter().zip(cells).skip(1) {
                    line.clear();
                    line.push_str(spec.name);
                    line.push(',');
                    push_cell(&mut line, &cells[0]);
                    line.push(',');
                    line.push_str(col.name);
                    line.push(',');
                    push_cell(&mut line, cell);
                    line.push(',');
                    line.push_str(&csv::text(&col.unit));
                    line.push('\n');
                    out.write_all(line.as_bytes())?;
                }
                Ok(())
            })?;
        }
        out.flush()
    }

    /// Writes each table as its own CSV file in `dir` (`nodes.csv`, `links.csv`, `pumps.csv`,
    /// `valves.csv`, `summary.csv`), a header line first, the unit after each column's name
    /// (`head_m`); returns the files written. Each file is written whole or not at all
    /// ([`ringmain_core::output::write_file`]).
    pub fn write_csv_tables(&self, dir: &Path) -> io::Result<Vec<PathBuf>> {
        let mut written = Vec::new();
        for (t, spec) in self.tables().iter().enumerate() {
            let path = dir.join(format!("{}.csv", spec.name));
            ringmain_core::output::write_file(&path, |out| {
                let header: Vec<String> = spec
                    .columns
                    .iter()
                    .map(|c| if c.unit.is_empty() { c.name.to_owned() } else { format!("{}_{}", c.name, c.unit) })
                    .map(|h| csv::text(&h).into_owned())
                    .collect();
                writeln!(out, "{}", header.join(","))?;
                let mut line = String::with_capacity(256);
                self.rows(t, &mut |cells| {
                    line.clear();
                    for (i, cell) in cells.iter().enumerate() {
                        if i > 0 {
                            line.push(',');
                        }
                        push_cell(&mut line, cell);
                    }
                    line.push('\n');
                    out.write_all(line.as_bytes())
                })
            })?;
            written.push(path);
        }
        Ok(written)
    }

    /// Writes each table as a Parquet file in `dir` (see [`crate::columnar`]); returns the files.
    pub fn write_parquet(&self, dir: &Path) -> io::Result<Vec<PathBuf>> {
        let meta = [("title", self.model.title.clone().unwrap_or_default())];
        let mut written = Vec::new();
        for (t, spec) in self.tables().iter().enumerate() {
            let columns: Vec<Column> =
                spec.columns.iter().map(|c| Column::new(c.name, c.kind, c.unit.clone())).collect();
            let mut table = Table::create(dir, spec.name, &columns, &meta)?;
            self.rows(t, &mut |cells| {
                for (i, cell) in cells.iter().enumerate() {
                    match *cell {
                        Cell::Num(v) => table.f64(i, v),
                        Cell::Text(v) => table.text(i, v),
                        Cell::Flag(v) => table.bool(i, v),
                    }
                }
                table.end_row()
            })?;
            table.finish()?;
            written.push(table.path().to_owned());
        }
        Ok(written)
    }

    /// Writes the readable table: nodes, links, pumps, valves, a summary and the warnings.
    pub fn write_table(&self, out: &mut dyn Write) -> io::Result<()> {
        let m = self.model;
        let s = self.solution;
        let u = &m.units;
        let num = |v: f64, width: usize, prec: usize| {
            if v.is_finite() {
                // A value too wide for its column (a huge demand typed on purpose) in exponent
                // form, never hundreds of digits.
                let fixed = format!("{v:>width$.prec$}");
                if fixed.len() > width {
                    format!("{v:>width$.3e}")
                } else {
                    fixed
                }
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
        if let Some(t) = &m.title {
            writeln!(out, "{t}\n")?;
        }
        let outflows = self.pressure_dependent();
        writeln!(out, "Nodes")?;
        write!(
            out,
            "{:<idw$}  {:<9}  {:>10}  {:>10}  {:>10}  {:>10}",
            "id",
            "kind",
            format!("elev {}", u.length),
            format!("head {}", u.length),
            format!("pres {}", u.pressure),
            format!("dem {}", u.flow)
        )?;
        if outflows {
            write!(
                out,
                "  {:>10}  {:>10}  {:>10}",
                format!("got {}", u.flow),
                format!("leak {}", u.flow),
                format!("outl {}", u.flow)
            )?;
        }
        writeln!(out)?;
        for (i, n) in m.nodes().iter().enumerate() {
            write!(
                out,
                "{:<idw$}  {:<9}  {}  {}  {}  {}",
                n.id,
                n.kind.label(),
                num(self.len(n.elevation), 10, 2),
                num(self.len(s.head[i]), 10, 2),
                num(self.pressure(s.pressure[i]), 10, 2),
                num(self.flow(s.demand[i]), 10, 3)
            )?;
            if outflows {
                write!(
                    out,
                    "  {}  {}  {}",
                    num(self.flow(s.delivered(i)), 10, 3),
                    num(self.flow(s.leakage(i)), 10, 3),
                    num(self.flow(s.outlet(i)), 10, 3)
                )?;
            }
            writeln!(out)?;
        }
        writeln!(out, "\nLinks")?;
        writeln!(
            out,
            "{:<idw$}  {:<6}  {:>11}  {:>10}  {:>11}  status",
            "id",
            "kind",
            format!("flow {}", u.flow),
            format!("vel {}", u.velocity_label()),
            format!("loss {}", u.length),
        )?;
        for (k, l) in m.links().iter().enumerate() {
            let state = s.link_state[k];
            let status = match state.reason() {
                Some(r) => format!("{} ({r})", state.status_label()),
                None => state.status_label().to_owned(),
            };
            writeln!(
                out,
                "{:<idw$}  {:<6}  {}  {}  {}  {}",
                l.id,
                l.kind.label(),
                num(self.flow(s.flow[k]), 11, 3),
                num(self.len(s.velocity[k]), 10, 3),
                num(self.reported_headloss(k), 11, 3),
                status
            )?;
        }
        if !s.pumps.is_empty() {
            writeln!(out, "\nPumps")?;
            writeln!(
                out,
                "{:<idw$}  {:>11}  {:>10}  {:>6}  {:>7}  {:>10}  state",
                "id",
                format!("flow {}", u.flow),
                format!("head {}", u.length),
                "speed",
                "eff %",
                format!("shaft {}", self.power_label()),
            )?;
            for p in &s.pumps {
                let l = &m.links()[p.link];
                let state = s.link_state[p.link];
                let status = match state.reason() {
                    Some(r) => format!("{}: {r}", state.status_label()),
                    None if p.beyond_curve => "open: beyond the end of its curve".to_owned(),
                    None => state.status_label().to_owned(),
                };
                writeln!(
                    out,
                    "{:<idw$}  {}  {}  {:>6.3}  {:>7.1}  {}  {}",
                    l.id,
                    num(self.flow(s.flow[p.link]), 11, 3),
                    num(self.len(p.head), 10, 2),
                    p.speed,
                    p.efficiency * 100.0,
                    num(self.power(p.shaft_power), 10, 2),
                    status
                )?;
            }
        }
        let valves: Vec<(usize, &Valve)> =
            m.links().iter().enumerate().filter_map(|(k, l)| Some((k, l.as_valve()?))).collect();
        if !valves.is_empty() {
            writeln!(out, "\nValves")?;
            writeln!(
                out,
                "{:<idw$}  {:<19}  {:>12}  {:>11}  {:>10}  state",
                "id",
                "type",
                "setting",
                format!("flow {}", u.flow),
                format!("loss {}", u.length),
            )?;
            for (k, v) in valves {
                let state = s.link_state[k];
                let status = match state.reason() {
                    Some(r) => format!("{}: {r}", state.status_label()),
                    None => state.status_label().to_owned(),
                };
                writeln!(
                    out,
                    "{:<idw$}  {:<19}  {:>12}  {}  {}  {}",
                    m.links()[k].id,
                    v.valve.label(),
                    format!("{:.2} {}", self.setting(v), self.setting_unit(v)),
                    num(self.flow(s.flow[k]), 11, 3),
                    num(self.len(s.headloss[k]), 10, 3),
                    status
                )?;
            }
        }
        writeln!(out, "\nSummary")?;
        writeln!(out, "  iterations                {}", s.iterations)?;
        if s.status_changes > 0 {
            writeln!(out, "  device state changes      {} ({})", s.status_changes, s.ending.describe())?;
        }
        writeln!(out, "  largest mass residual     {:.3e} {}", self.flow(s.max_mass_residual), u.flow)?;
        writeln!(out, "  largest energy residual   {:.3e} {}", self.len(s.max_energy_residual), u.length)?;
        writeln!(out, "  total demand              {:.3} {}", self.total_demand(), u.flow)?;
        if outflows {
            let o = s.outflow_summary(LARGEST_SHORTFALLS);
            writeln!(out, "  demand asked              {:.3} {}", self.flow(o.asked), u.flow)?;
            writeln!(out, "  demand delivered          {:.3} {}", self.flow(o.delivered), u.flow)?;
            writeln!(
                out,
                "  shortfall                 {:.3} {} ({:.2} % of the demand asked)",
                self.flow(o.shortfall),
                u.flow,
                o.shortfall_percent()
            )?;
            writeln!(out, "  leakage                   {:.3} {}", self.flow(o.leakage), u.flow)?;
            writeln!(out, "  outlets                   {:.3} {}", self.flow(o.outlet), u.flow)?;
            if !o.largest.is_empty() {
                writeln!(out, "  largest shortfalls")?;
                for &(i, lack) in &o.largest {
                    writeln!(
                        out,
                        "    {:<idw$}  {:.3} of {:.3} {} short",
                        m.nodes()[i].id,
                        self.flow(lack),
                        self.flow(s.demand[i]),
                        u.flow
                    )?;
                }
            }
        }
        for (i, q) in self.sources() {
            let n = &m.nodes()[i];
            let what = match (&n.kind, q >= 0.0) {
                (NodeKind::Tank(_), false) => "filling",
                (_, true) => "supplying",
                (_, false) => "taking",
            };
            writeln!(out, "  {:<9} {:<idw$}  {what} {:.3} {}", n.kind.label(), n.id, q.abs(), u.flow)?;
        }
        let lowest = m
            .nodes()
            .iter()
            .enumerate()
            .filter(|(i, n)| n.fixed_head().is_none() && s.pressure[*i].is_finite())
            .min_by(|a, b| s.pressure[a.0].total_cmp(&s.pressure[b.0]));
        if let Some((i, n)) = lowest {
            writeln!(
                out,
                "  lowest pressure           {:.2} {} at {}",
                self.pressure(s.pressure[i]),
                u.pressure,
                n.id
            )?;
        }
        if !s.warnings.is_empty() {
            writeln!(out, "\nWarnings")?;
            for w in &s.warnings {
                writeln!(out, "  {}", warning_text(w))?;
            }
        }
        writeln!(
            out,
            "\nResults are only as good as the model and its data; designs must be checked by a licensed engineer\n\
             against local codes and the utility's standards."
        )?;
        Ok(())
    }
}

fn warning_text(w: &Warning) -> String {
    match &w.element {
        Some(e) => format!("{e}: {}", w.message),
        None => w.message.clone(),
    }
}

/// One column of a results table: name, type and unit (empty: none).
pub struct ColumnSpec {
    pub name: &'static str,
    pub kind: Kind,
    pub unit: String,
}

/// A results table: its name (the file's) and columns.
pub struct TableSpec {
    pub name: &'static str,
    pub columns: Vec<ColumnSpec>,
}

/// One value of a row.
pub enum Cell<'c> {
    /// A number (not finite: missing).
    Num(f64),
    /// A text, or missing.
    Text(Option<&'c str>),
    /// A flag.
    Flag(bool),
}

/// Appends a cell in CSV: numbers at [`csv::DIGITS`] digits, texts made spreadsheet-safe.
fn push_cell(line: &mut String, cell: &Cell) {
    match *cell {
        Cell::Num(v) => csv::push_number(line, v),
        Cell::Text(Some(t)) => line.push_str(&csv::text(t)),
        Cell::Text(None) => {}
        Cell::Flag(b) => line.push_str(if b { "true" } else { "false" }),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ringmain_core::Format;
    use serde::Serializer;

    /// The whole report as serde_json writes it through the element-per-line layout: the
    /// reference the hand-written [`Report::write_json`] must equal byte for byte.
    #[derive(Serialize)]
    struct Reference<'r, 'a> {
        converged: bool,
        iterations: u32,
        links: Links<'r, 'a>,
        nodes: Nodes<'r, 'a>,
        #[serde(flatten)]
        tail: JsonTail<'a>,
    }

    struct Nodes<'r, 'a>(&'r Report<'a>);

    impl Serialize for Nodes<'_, '_> {
        fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
            s.collect_seq((0..self.0.model.nodes().len()).map(|i| self.0.json_node(i)))
        }
    }

    struct Links<'r, 'a>(&'r Report<'a>);

    impl Serialize for Links<'_, '_> {
        fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
            let r = self.0;
            let mut pumps = r.solution.pumps.iter().peekable();
            s.collect_seq((0..r.model.links().len()).map(|k| {
                let pump = pumps.next_if(|p| p.link == k);
                r.json_link(k, pump)
            }))
        }
    }

    fn reference(report: &Report) -> Vec<u8> {
        let whole = Reference {
            converged: true,
            iterations: report.solution.iterations,
            links: Links(report),
            nodes: Nodes(report),
            tail: report.json_tail(),
        };
        let mut out = Vec::new();
        write_element_per_line(&mut out, &whole).unwrap_or_else(|e| panic!("{e}"));
        out
    }

    fn same_as_serde(model: &Model, what: &str) {
        let solution = ringmain_core::Solver::new(model)
            .and_then(|mut s| s.solve_model(model))
            .unwrap_or_else(|e| panic!("{what}: {e}"));
        let report = Report::new(model, &solution);
        let mut ours = Vec::new();
        report.write_json(&mut ours).unwrap_or_else(|e| panic!("{e}"));
        let expected = reference(&report);
        if ours != expected {
            let (a, b) = (String::from_utf8_lossy(&ours), String::from_utf8_lossy(&expected));
            let line = a.lines().zip(b.lines()).position(|(x, y)| x != y).unwrap_or(0);
            panic!(
                "{what}: line {}\n  ours:  {}\n  serde: {}",
                line + 1,
                a.lines().nth(line).unwrap_or("(end)"),
                b.lines().nth(line).unwrap_or("(end)")
            );
        }
    }

    /// Pumps, a pressure-reducing valve, a check valve, outflows that follow pressure (delivered,
    /// leakage and outlet columns), ids that need escapes and ids beyond ASCII: every optional
    /// key of a node and a link. An invented zone.
    const EVERY_KEY: &str = r#"
title = "Quote \" and backslash \\ in a title"
[units]
flow = "L/s"
[hydraulics]
head_tolerance = 1e-6
[pressure_demand]
full_pressure = 20.0
zero_pressure = 2.0
[background_leakage]
rate = 0.02
reference_pressure = 30.0
exponent = 1.18

[[nodes]]
id = "Low \"Well\""
kind = "reservoir"
head = 40.0
[[nodes]]
id = "A\\1"
elevation = 30.0
demand = 3.0
[[nodes]]
id = "Bé 中"
elevation = 25.0
demand = 4.0
[[nodes]]
id = "C"
elevation = 10.0
demand = 6.0
[[nodes]]
id = "D"
elevation = 12.0
demand = 2.0
outlet = { coefficient = 0.8, exponent = 0.5 }
[[nodes]]
id = "Hill Tank"
kind = "tank"
elevation = 60.0
level = 2.0
min_level = 0.0
max_level = 6.0
diameter = 12.0

[[links]]
id = "Booster / 1"
kind = "pump"
from = "Low \"Well\""
to = "A\\1"
head_curve = [[0.0, 55.0], [20.0, 45.0], [40.0, 20.0]]
[[links]]
id = "A-B"
from = "A\\1"
to = "Bé 中"
length = 600
diameter = 150
roughness = 120
minor_loss = 2.5
[[links]]
id = "B-Tank"
from = "Bé 中"
to = "Hill Tank"
length = 400
diameter = 150
roughness = 120
check_valve = true
[[links]]
id = "A-Tank"
from = "A\\1"
to = "Hill Tank"
length = 900
diameter = 100
roughness = 110
[[links]]
id = "Reducer"
kind = "valve"
valve = "pressure-reducing"
from = "Bé 中"
to = "C"
diameter = 100
setting = 28.0
[[links]]
id = "C-D"
from = "C"
to = "D"
length = 300
diameter = 100
roughness = 120
[[links]]
id = "Shut"
from = "C"
to = "D"
length = 300
diameter = 100
roughness = 120
status = "closed"
"#;

    #[test]
    fn json_report_written_by_hand_equals_serde_json_on_every_model() {
        let root = Path::new(env!("CARGO_MANIFEST_DIR"));
        let mut files: Vec<PathBuf> = ["examples", "tests/data"]
            .iter()
            .flat_map(|d| std::fs::read_dir(root.join(d)).into_iter().flatten().flatten().map(|e| e.path()))
            .filter(|p| p.extension().is_some_and(|e| e == "toml") && !p.ends_with("FIELDS.toml"))
            .collect();
        files.sort();
        assert!(files.len() >= 5, "{files:?}");
        for path in files {
            let text = std::fs::read_to_string(&path).unwrap_or_default();
            let model = ringmain_core::read_str(&text, Format::Toml, &path.display().to_string())
                .unwrap_or_else(|e| panic!("{e}"));
            same_as_serde(&model, &path.display().to_string());
        }
        let model =
            ringmain_core::read_str(EVERY_KEY, Format::Toml, "every-key.toml").unwrap_or_else(|e| panic!("{e}"));
        same_as_serde(&model, "every key");
        // Large enough for the arrays to be formatted in parallel chunks.
        let spec = ringmain_core::generate::NetworkSpec::new(6000, 3);
        let model = ringmain_core::generate::generate(&spec).unwrap_or_else(|e| panic!("{e}"));
        same_as_serde(&model, "generated 6000");
    }
}
