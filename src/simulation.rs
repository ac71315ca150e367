//! Writers of simulation results: a readable summary, JSON (summary, events and the reported
//! time series) and CSV (the time series, one value a row), all in the model's own units.

use ringmain_core::analysis::CheckResult;
use ringmain_core::model::time::{format_clock, format_duration, DAY};
use ringmain_core::quality::QualityRun;
use ringmain_core::simulate::Run;
use ringmain_core::Model;
use serde_json::{json, Value};
use std::fmt::Write as _;

/// A run with its model, converting to the model's units for any writer.
pub struct RunReport<'a> {
    pub model: &'a Model,
    pub run: &'a Run,
    density: f64,
    /// The water-quality results, when the model has constituents.
    pub quality: Option<&'a QualityRun>,
    /// Criteria checked over the run (water quality).
    pub checks: Vec<CheckResult>,
}

pub(crate) fn finite_or_null(v: f64) -> Value {
    if v.is_finite() {
        json!(v)
    } else {
        Value::Null
    }
}

pub(crate) fn csv_field(text: &str) -> String {
    if text.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", text.replace('"', "\"\""))
    } else {
        text.to_owned()
    }
}

impl<'a> RunReport<'a> {
    pub fn new(model: &'a Model, run: &'a Run) -> Self {
        RunReport { model, run, density: model.options.water_properties().density, quality: None, checks: Vec::new() }
    }

    pub fn len(&self, v: f64) -> f64 {
        self.model.units.length.from_si(v)
    }
    pub fn flow(&self, v: f64) -> f64 {
        self.model.units.flow.from_si(v)
    }
    pub fn pressure(&self, head: f64) -> f64 {
        self.model.units.pressure.from_head(head, self.density)
    }
    /// Volume in the length unit cubed.
    pub fn volume(&self, v: f64) -> f64 {
        v / self.model.units.length.to_si(1.0).powi(3)
    }
    pub fn hours(&self) -> f64 {
        self.run.duration / 3600.0
    }
    pub fn volume_label(&self) -> String {
        format!("{}3", self.model.units.length.label())
    }
    pub fn currency(&self) -> &str {
        self.model.time.energy.currency.as_deref().unwrap_or("cost units")
    }

    /// "day 1 07:45" for an elapsed time.
    pub fn when(&self, t: f64) -> String {
        let clock = self.run.start_clock + t;
        format!("day {} {}", (clock / DAY).floor() as i64 + 1, format_clock(clock))
    }

    fn tank_id(&self, j: usize) -> &str {
        &self.model.nodes()[self.run.tanks[j]].id
    }
    fn pump_id(&self, i: usize) -> &str {
        &self.model.links()[self.run.pumps[i]].id
    }

    pub fn to_table(&self) -> String {
        let m = self.model;
        let r = self.run;
        let u = &m.units;
        let mut out = String::new();
        if let Some(t) = &m.title {
            let _ = writeln!(out, "{t}\n");
        }
        let st = &r.statistics;
        let _ = writeln!(
            out,
            "Simulated {} from {} (day 1); {} steps ({} rejected, {} while locating events), {} hydraulic solves",
            format_duration(r.duration),
            format_clock(r.start_clock),
            st.steps,
            st.rejected,
            st.locating,
            st.solves
        );
        if !r.tanks.is_empty() {
            let w = (0..r.tanks.len()).map(|j| self.tank_id(j).chars().count()).max().unwrap_or(4).max(4);
            let _ = writeln!(out, "\nTanks (levels in {})", u.length);
            let _ = writeln!(
                out,
                "{:<w$}  {:>7}  {:<12}  {:>7}  {:<12}  {:>7}  {:>7}  {:>8}  {:>8}",
                "id", "min", "when", "max", "when", "start", "end", "full h", "empty h"
            );
            for (j, s) in r.tank_summary.iter().enumerate() {
                let _ = writeln!(
                    out,
                    "{:<w$}  {:>7.3}  {:<12}  {:>7.3}  {:<12}  {:>7.3}  {:>7.3}  {:>8.2}  {:>8.2}",
                    self.tank_id(j),
                    self.len(s.min_level.0),
                    self.when(s.min_level.1),
                    self.len(s.max_level.0),
                    self.when(s.max_level.1),
                    self.len(s.start_level),
                    self.len(s.end_level),
                    s.time_full / 3600.0,
                    s.time_empty / 3600.0
                );
            }
        }
        if !r.pumps.is_empty() {
            let w = (0..r.pumps.len()).map(|i| self.pump_id(i).chars().count()).max().unwrap_or(4).max(4);
            let _ = writeln!(out, "\nPumps (energy at the shaft; cost in {})", self.currency());
            let _ = writeln!(
                out,
                "{:<w$}  {:>7}  {:>6}  {:>10}  {:>10}  {:>9}  {:>9}  {:>8}  {:>8}",
                "id",
                "hours",
                "starts",
                format!("vol {}", self.volume_label()),
                "energy kWh",
                "cost",
                "peak kW",
                "mean eff",
                "kWh/m3"
            );
            for (i, p) in r.pump_summary.iter().enumerate() {
                let pct = |v: f64| if v.is_finite() { format!("{:.1} %", v * 100.0) } else { "-".into() };
                let per = |v: f64| if v.is_finite() { format!("{v:.3}") } else { "-".into() };
                let _ = writeln!(
                    out,
                    "{:<w$}  {:>7.2}  {:>6}  {:>10.1}  {:>10.2}  {:>9.2}  {:>9.2}  {:>8}  {:>8}",
                    self.pump_id(i),
                    p.hours(),
                    p.starts,
                    self.volume(p.volume),
                    p.kwh(),
                    p.cost,
                    p.peak_power / 1e3,
                    pct(p.mean_efficiency()),
                    per(p.kwh_per_m3())
                );
            }
            let total: f64 = r.pump_summary.iter().map(|p| p.cost).sum();
            let kwh: f64 = r.pump_summary.iter().map(|p| p.kwh()).sum();
            let _ = writeln!(out, "{:<w$}  total {kwh:.2} kWh, {total:.2} {}", "", self.currency());
        }
        if let Some((node, p, t)) = r.lowest_pressure {
            let _ = writeln!(
                out,
                "\nLowest pressure: {:.2} {} at '{}', {}",
                self.pressure(p),
                u.pressure,
                m.nodes()[node].id,
                self.when(t)
            );
        }
        let b = &r.balance;
        let v = self.volume_label();
        let _ = writeln!(
            out,
            "\nVolume balance ({v}): supplied {:.3} = delivered {:.3} + change in storage {:.3}; \
             discrepancy {:.3e} (relative {:.1e})",
            self.volume(b.supplied),
            self.volume(b.delivered),
            self.volume(b.storage_change),
            self.volume(b.discrepancy()),
            b.relative_discrepancy()
        );
        if b.unsupplied > 0.0 {
            let _ = writeln!(
                out,
                "Not delivered: {:.3} {v} of demand at junctions cut off from every source",
                self.volume(b.unsupplied)
            );
        }
        let _ = writeln!(out, "\nEvents ({})", r.events.len());
        for e in &r.events {
            let _ = writeln!(out, "  {}  {}", self.when(e.time), e.describe(m));
        }
        crate::quality_report::table(self, &mut out);
        let _ = writeln!(
            out,
            "\nResults are only as good as the model and its data; designs must be checked by a licensed engineer \
             against local codes and the utility's standards."
        );
        out
    }

    pub fn to_json(&self) -> Value {
        let m = self.model;
        let r = self.run;
        let u = &m.units;
        let tanks: Vec<Value> = r
            .tank_summary
            .iter()
            .enumerate()
            .map(|(j, s)| {
                json!({
                    "id": self.tank_id(j),
                    "min_level": self.len(s.min_level.0), "min_level_time_s": s.min_level.1,
                    "max_level": self.len(s.max_level.0), "max_level_time_s": s.max_level.1,
                    "start_level": self.len(s.start_level), "end_level": self.len(s.end_level),
                    "hours_full": s.time_full / 3600.0, "hours_empty": s.time_empty / 3600.0,
                })
            })
            .collect();
        let pumps: Vec<Value> = r
            .pump_summary
            .iter()
            .enumerate()
            .map(|(i, p)| {
                json!({
                    "id": self.pump_id(i), "hours": p.hours(), "starts": p.starts,
                    "volume": self.volume(p.volume), "energy_kwh": p.kwh(), "cost": p.cost,
                    "peak_power_kw": p.peak_power / 1e3,
                    "mean_efficiency": finite_or_null(p.mean_efficiency() * 100.0),
                    "kwh_per_m3": finite_or_null(p.kwh_per_m3()),
                })
            })
            .collect();
        let b = &r.balance;
        let series: Vec<Value> = r
            .series
            .iter()
            .map(|s| {
                let rec = self.quality.and_then(|q| q.at(s.time));
                let mut entry = json!({
                    "time_s": s.time,
                    "clock": format_clock(r.start_clock + s.time),
                    "price": s.price,
                    "tanks": (0..r.tanks.len()).map(|j| json!({
                        "id": self.tank_id(j), "level": self.len(s.level[j]),
                        "volume": self.volume(s.volume[j]), "state": s.tank_state[j],
                    })).collect::<Vec<_>>(),
                    "pumps": (0..r.pumps.len()).map(|i| json!({
                        "id": self.pump_id(i), "flow": self.flow(s.flow[r.pumps[i]]),
                        "speed": s.pump_speed[i], "shaft_power_kw": s.pump_power[i] / 1e3,
                        "status": s.status[r.pumps[i]],
                    })).collect::<Vec<_>>(),
                    "nodes": m.nodes().iter().enumerate().map(|(i, n)| json!({
                        "id": n.id, "head": finite_or_null(self.len(s.head[i])),
                        "pressure": finite_or_null(self.pressure(s.pressure[i])), "demand": self.flow(s.demand[i]),
                    })).collect::<Vec<_>>(),
                    "links": m.links().iter().enumerate().map(|(k, l)| json!({
                        "id": l.id, "flow": self.flow(s.flow[k]), "status": s.status[k],
                    })).collect::<Vec<_>>(),
                });
                if let (Some(q), Some(rec)) = (self.quality, rec) {
                    crate::quality_report::add_to_series(q, rec, &mut entry);
                }
                entry
            })
            .collect();
        let mut doc = json!({
            "title": m.title,
            "units": {
                "length": u.length.label(), "flow": u.flow.label(), "pressure": u.pressure.label(),
                "volume": self.volume_label(), "energy": "kWh", "currency": self.currency(),
            },
            "start_clock": format_clock(r.start_clock),
            "duration_s": r.duration,
            "summary": {
                "tanks": tanks,
                "pumps": pumps,
                "lowest_pressure": r.lowest_pressure.map(|(n, p, t)| json!({
                    "node": m.nodes()[n].id, "pressure": self.pressure(p), "time_s": t,
                })),
                "volume_balance": {
                    "supplied": self.volume(b.supplied), "delivered": self.volume(b.delivered),
                    "storage_change": self.volume(b.storage_change), "discrepancy": self.volume(b.discrepancy()),
                    "relative_discrepancy": b.relative_discrepancy(), "not_delivered": self.volume(b.unsupplied),
                },
                "statistics": {
                    "steps": r.statistics.steps, "rejected": r.statistics.rejected,
                    "locating": r.statistics.locating, "hydraulic_solves": r.statistics.solves,
                },
            },
            "events": r.events.iter().map(|e| json!({
                "time_s": e.time, "clock": format_clock(r.start_clock + e.time), "what": e.describe(m),
            })).collect::<Vec<_>>(),
            "series": series,
        });
        crate::quality_report::add_to_json(self, &mut doc);
        doc
    }

    /// The time series, one value a row: `time_h,clock,kind,id,quantity,value,unit`.
    pub fn to_csv(&self) -> String {
        let m = self.model;
        let r = self.run;
        let u = &m.units;
        let mut out = String::from("time_h,clock,kind,id,quantity,value,unit\n");
        let cell = |v: f64| if v.is_finite() { format!("{v}") } else { String::new() };
        for s in &r.series {
            let head = format!("{},{}", s.time / 3600.0, format_clock(r.start_clock + s.time));
            let mut row = |kind: &str, id: &str, q: &str, v: String, unit: &str| {
                let _ = writeln!(out, "{head},{kind},{},{q},{v},{unit}", csv_field(id));
            };
            for j in 0..r.tanks.len() {
                row("tank", self.tank_id(j), "level", cell(self.len(s.level[j])), u.length.label());
                row("tank", self.tank_id(j), "volume", cell(self.volume(s.volume[j])), &self.volume_label());
            }
            for i in 0..r.pumps.len() {
                row("pump", self.pump_id(i), "speed", cell(s.pump_speed[i]), "");
                row("pump", self.pump_id(i), "shaft_power", cell(s.pump_power[i] / 1e3), "kW");
            }
            for (i, n) in m.nodes().iter().enumerate() {
                row("node", &n.id, "head", cell(self.len(s.head[i])), u.length.label());
                row("node", &n.id, "pressure", cell(self.pressure(s.pressure[i])), u.pressure.label());
                row("node", &n.id, "demand", cell(self.flow(s.demand[i])), u.flow.label());
            }
            for (k, l) in m.links().iter().enumerate() {
                row("link", &l.id, "flow", cell(self.flow(s.flow[k])), u.flow.label());
                row("link", &l.id, "status", s.status[k].to_owned(), "");
            }
            if let Some((q, rec)) = self.quality.and_then(|q| q.at(s.time).map(|r| (q, r))) {
                for (c, con) in q.constituents.iter().enumerate() {
                    let scale = con.report_scale();
                    for (i, n) in m.nodes().iter().enumerate() {
                        row(
                            "node",
                            &n.id,
                            &csv_field(&con.id),
                            cell(rec.node[c][i] * scale),
                            &csv_field(con.report_unit()),
                        );
                    }
                    for (k, l) in m.links().iter().enumerate() {
                        row(
                            "link",
                            &l.id,
                            &csv_field(&con.id),
                            cell(rec.link[c][k] * scale),
                            &csv_field(con.report_unit()),
                        );
                    }
                }
            }
            row("energy", "", "price", cell(s.price), &format!("{}/kWh", self.currency()));
        }
        out
    }
}
