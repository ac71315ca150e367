//! Writers of simulation results: a readable summary, JSON (summary, events and the reported
//! time series) and CSV (the time series, one value a row), all in the model's own units. The
//! series writers ([`SeriesWriter`]) take the reported states one by one as the run makes them,
//! with the water-quality values of each reported time beside them when the model has
//! constituents.

use crate::columnar::{self, Column, Table};
use crate::csv;
use ringmain_core::analysis::CheckResult;
use ringmain_core::model::time::{format_clock, format_duration, DAY};
use ringmain_core::quality::{Constituent, QualityRecord, QualityRun};
use ringmain_core::simulate::{Run, Snapshot};
use ringmain_core::units::{Converter, Quantity};
use ringmain_core::{HeadLossLaw, Model, NodeKind};
use serde::{Serialize, Serializer};
use serde_json::{json, Value};
use std::fmt::Write as _;
use std::io::{self, Write};
use std::path::{Path, PathBuf};

/// A run with its model, converting to the model's units for any writer.
pub struct RunReport<'a> {
    pub model: &'a Model,
    pub run: &'a Run,
    density: f64,
    /// The water-quality results, when the model has constituents.
    pub quality: Option<&'a QualityRun>,
    /// Criteria checked over the run (water quality).
    pub checks: Vec<CheckResult>,
    /// The criteria the run was checked against, when any (the charts draw their limits).
    pub criteria: Option<&'a ringmain_core::analysis::Criteria>,
}

pub(crate) fn finite_or_null(v: f64) -> Value {
    if v.is_finite() {
        json!(v)
    } else {
        Value::Null
    }
}

impl<'a> RunReport<'a> {
    pub fn new(model: &'a Model, run: &'a Run) -> Self {
        RunReport {
            model,
            run,
            density: model.options.water_properties().density,
            quality: None,
            checks: Vec::new(),
            criteria: None,
        }
    }

    pub fn len(&self, v: f64) -> f64 {
        self.converter().from_si(Quantity::Length, v)
    }
    pub fn flow(&self, v: f64) -> f64 {
        self.converter().from_si(Quantity::Flow, v)
    }
    pub fn pressure(&self, head: f64) -> f64 {
        self.converter().from_si(Quantity::Pressure, head)
    }
    /// Volume in the length unit cubed.
    pub fn volume(&self, v: f64) -> f64 {
        self.converter().from_si(Quantity::Volume, v)
    }
    /// The converter to the model's units (with the density this report was made with).
    fn converter(&self) -> Converter {
        Converter::new(self.model.units, self.density, self.model.options.headloss == HeadLossLaw::HazenWilliams)
    }
    pub fn hours(&self) -> f64 {
        self.run.duration / 3600.0
    }
    pub fn volume_label(&self) -> String {
        self.converter().label(Quantity::Volume).to_owned()
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
                "\nLowest pressure: {:.2} {} at '{}', {} (over every solved instant, not only report times)",
                self.pressure(p),
                u.pressure,
                m.nodes()[node].id,
                self.when(t)
            );
        }
        if !r.without_water.is_empty() {
            let n = r.without_water.len();
            let _ = writeln!(
                out,
                "Without water (cut off from every source; below any pressure): {n} junction{}",
                if n == 1 { "" } else { "s" }
            );
            for d in &r.without_water {
                let _ = writeln!(
                    out,
                    "  '{}' from {}, {:.2} h in all",
                    m.nodes()[d.node].id,
                    self.when(d.first),
                    d.time / 3600.0
                );
            }
        }
        let b = &r.balance;
        let v = self.volume_label();
        // Leakage and outlets appear in the equation only where the model has them (every other
        // report stays as it was).
        let leaving = if b.leaked > 0.0 || b.outlets > 0.0 {
            format!(" + leakage {:.3} + outlets {:.3}", self.volume(b.leaked), self.volume(b.outlets))
        } else {
            String::new()
        };
        let _ = writeln!(
            out,
            "\nVolume balance ({v}): supplied {:.3} = delivered {:.3}{leaving} + change in storage {:.3}; \
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
                "Not delivered: {:.3} {v} of demand asked (junctions cut off from every source, or short of pressure)",
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

    /// The per-tank summary in JSON (every JSON writer of a run uses it).
    fn tanks_json(&self) -> Vec<Value> {
        let r = self.run;
        r.tank_summary
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
            .collect()
    }

    /// The per-pump summary in JSON (every JSON writer of a run uses it).
    fn pumps_json(&self) -> Vec<Value> {
        let r = self.run;
        r.pump_summary
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
            .collect()
    }

    /// Everything of the JSON results but the series: the summary and the event log, as the
    /// members that follow `"series"` in [`JsonSeries`].
    fn json_tail(&self) -> Value {
        let m = self.model;
        let r = self.run;
        let tanks = self.tanks_json();
        let pumps = self.pumps_json();
        let b = &r.balance;
        let mut doc = json!({
            "summary": {
                "tanks": tanks,
                "pumps": pumps,
                "lowest_pressure": r.lowest_pressure.map(|(n, p, t)| json!({
                    "node": m.nodes()[n].id, "pressure": self.pressure(p), "time_s": t,
                    "over": "every solved instant",
                })),
                "without_water": r.without_water.iter().map(|d| json!({
                    "node": m.nodes()[d.node].id, "first_time_s": d.first, "hours": d.time / 3600.0,
                })).collect::<Vec<_>>(),
                "volume_balance": {
                    "supplied": self.volume(b.supplied), "delivered": self.volume(b.delivered),
                    "storage_change": self.volume(b.storage_change), "discrepancy": self.volume(b.discrepancy()),
                    "relative_discrepancy": b.relative_discrepancy(), "not_delivered": self.volume(b.unsupplied),
                    "leaked": self.volume(b.leaked), "outlets": self.volume(b.outlets),
                },
                "statistics": {
                    "steps": r.statistics.steps, "rejected": r.statistics.rejected,
                    "locating": r.statistics.locating, "hydraulic_solves": r.statistics.solves,
                },
            },
            "events": r.events.iter().map(|e| json!({
                "time_s": e.time, "clock": format_clock(r.start_clock + e.time), "what": e.describe(m),
            })).collect::<Vec<_>>(),
        });
        crate::quality_report::add_to_json(self, &mut doc);
        doc
    }
}

/// The model's units for the writers of a series, known before the run starts.
#[derive(Clone, Copy)]
pub struct Units<'a> {
    model: &'a Model,
    units: Converter,
}

impl<'a> Units<'a> {
    pub fn new(model: &'a Model) -> Self {
        Units { model, units: model.converter() }
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
    fn volume(&self, v: f64) -> f64 {
        self.units.from_si(Quantity::Volume, v)
    }
    fn volume_label(&self) -> String {
        self.units.label(Quantity::Volume).to_owned()
    }
    fn currency(&self) -> &'a str {
        self.model.time.energy.currency.as_deref().unwrap_or("cost units")
    }
    /// The tanks and the pumps of the model, in the order of a run's per-tank and per-pump
    /// series ([`Run::tanks`], [`Run::pumps`]).
    fn tanks_and_pumps(&self) -> (Vec<usize>, Vec<usize>) {
        let m = self.model;
        let tanks = m.nodes().iter().enumerate().filter(|(_, n)| matches!(n.kind, NodeKind::Tank(_)));
        let pumps = m.links().iter().enumerate().filter(|(_, l)| l.as_pump().is_some());
        (tanks.map(|(i, _)| i).collect(), pumps.map(|(k, _)| k).collect())
    }
}

/// A writer of a run's series, fed one reported state at a time as the run makes them (see
/// `ringmain_core::simulate::simulate_streaming`) and closed with the run's summary.
///
/// Each format is one implementation; a new quantity in [`Snapshot`] is one more member or
/// column in each. Nothing the size of the series is held.
pub trait SeriesWriter {
    /// Writes one reported state, with its water-quality values when the run has constituents.
    fn snapshot(&mut self, s: &Snapshot, q: Option<&QualityRecord>) -> io::Result<()>;
    /// Writes what follows the series (the summary and events, where the format has them) and
    /// flushes.
    fn finish(&mut self, report: &RunReport) -> io::Result<()>;
}

/// A series writer working on a thread of its own, so that formatting and writing the series
/// overlap the run that makes it (the run's solver works on one core at the sizes a series is
/// written for, and a writer's formatting took a third of a 7-day run of a 10⁴-junction
/// network when it was done in turn).
///
/// Each reported state is copied (a few hundred kilobytes at 10⁴ junctions) and handed over
/// through a channel that holds at most [`Background::QUEUE`] states, so memory stays bounded
/// whatever the run's length. The writer's first error stops it; the run learns of it at its
/// next reported state, or at [`SeriesWriter::finish`], and gets that same error back. The
/// states are written in the order they were reported, by the same writer as on one thread:
/// the output is the same byte for byte.
pub struct Background<'scope, 'env> {
    to: Option<std::sync::mpsc::SyncSender<Reported>>,
    worker: Option<std::thread::ScopedJoinHandle<'scope, io::Result<Box<dyn SeriesWriter + Send + 'env>>>>,
    /// The writer, back from its thread once that has ended.
    back: Option<Box<dyn SeriesWriter + Send + 'env>>,
    /// The writer's error, once its thread has ended on one (given back at every later call).
    failed: Option<(io::ErrorKind, String)>,
}

/// A reported state and its water-quality values, as handed to a [`Background`] writer.
type Reported = (Snapshot, Option<QualityRecord>);

impl<'scope, 'env> Background<'scope, 'env> {
    /// Reported states waiting for the writer at most.
    pub const QUEUE: usize = 2;

    /// Starts `inner` on a thread of `scope`.
    pub fn start(scope: &'scope std::thread::Scope<'scope, 'env>, inner: Box<dyn SeriesWriter + Send + 'env>) -> Self {
        let (to, from) = std::sync::mpsc::sync_channel::<Reported>(Self::QUEUE);
        let worker = scope.spawn(move || {
            let mut inner = inner;
            for (s, q) in from {
                inner.snapshot(&s, q.as_ref())?;
            }
            Ok(inner)
        });
        Background { to: Some(to), worker: Some(worker), back: None, failed: None }
    }

    /// Ends the writer's thread (all states handed over are written first) and keeps its
    /// writer, or its error.
    fn join(&mut self) -> io::Result<()> {
        self.to = None;
        if let Some(worker) = self.worker.take() {
            match worker.join() {
                Ok(Ok(inner)) => self.back = Some(inner),
                Ok(Err(e)) => self.failed = Some((e.kind(), e.to_string())),
                Err(_) => self.failed = Some((io::ErrorKind::Other, "the series writer stopped unexpectedly".into())),
            }
        }
        match &self.failed {
            Some((kind, message)) => Err(io::Error::new(*kind, message.clone())),
            None => Ok(()),
        }
    }
}

impl SeriesWriter for Background<'_, '_> {
    fn snapshot(&mut self, s: &Snapshot, q: Option<&QualityRecord>) -> io::Result<()> {
        if let Some(to) = &self.to {
            let sent = to.send((s.clone(), q.cloned())).is_ok();
            // Not sent: the thread gave up, and its error is the answer.
            return if sent { Ok(()) } else { self.join() };
        }
        // Finished already: the states go to the writer on this thread.
        match self.back.as_mut() {
            Some(inner) => inner.snapshot(s, q),
            None => self.join(),
        }
    }

    fn finish(&mut self, report: &RunReport) -> io::Result<()> {
        self.join()?;
        self.back.as_mut().map_or(Ok(()), |inner| inner.finish(report))
    }
}

/// JSON: `{"title", "units", "start_clock", "duration_s", "series": [...], "summary", "events"}`,
/// one reported state a line.
pub struct JsonSeries<'a, W: Write> {
    out: W,
    units: Units<'a>,
    tanks: Vec<usize>,
    pumps: Vec<usize>,
    first: bool,
}

/// The model's water-quality constituents, as the series writers report them.
fn constituents(model: &Model) -> &[Constituent] {
    &model.time.quality.constituents
}

/// `{"<id>": value, ...}` of one node or link at one reported time, in the reported units.
struct QualityValues<'r> {
    constituents: &'r [Constituent],
    values: &'r [Vec<f64>],
    index: usize,
}

impl Serialize for QualityValues<'_> {
    fn serialize<S: Serializer>(&self, ser: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeMap;
        let mut map = ser.serialize_map(Some(self.constituents.len()))?;
        for (c, con) in self.constituents.iter().enumerate() {
            let v = self.values.get(c).and_then(|v| v.get(self.index)).copied().unwrap_or(f64::NAN);
            map.serialize_entry(&con.id, &Num(v * con.report_scale()))?;
        }
        map.end()
    }
}

impl<'a, W: Write> JsonSeries<'a, W> {
    /// Writes the members before the series.
    pub fn new(model: &'a Model, mut out: W) -> io::Result<Self> {
        let units = Units::new(model);
        let u = &model.units;
        let (start_clock, duration) = model.time.simulation.map_or((0.0, 0.0), |s| (s.start_clock, s.duration));
        let head = json!({
            "title": model.title,
            "units": {
                "length": u.length.label(), "flow": u.flow.label(), "pressure": u.pressure.label(),
                "volume": units.volume_label(), "energy": "kWh", "currency": units.currency(),
            },
            "start_clock": format_clock(start_clock),
            "duration_s": duration,
        });
        let text = serde_json::to_string(&head)?;
        // The object without its closing brace, then the series.
        out.write_all(&text.as_bytes()[..text.len() - 1])?;
        out.write_all(b",\"series\":[")?;
        let (tanks, pumps) = units.tanks_and_pumps();
        Ok(JsonSeries { out, units, tanks, pumps, first: true })
    }
}

/// One reported state as a JSON object, serialized member by member.
struct JsonSnapshot<'r, 'a> {
    units: &'r Units<'a>,
    tanks: &'r [usize],
    pumps: &'r [usize],
    s: &'r Snapshot,
    start_clock: f64,
    quality: Option<&'r QualityRecord>,
}

/// A number, or null where it is not finite (a node cut off from every source).
struct Num(f64);

impl Serialize for Num {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        if self.0.is_finite() {
            s.serialize_f64(self.0)
        } else {
            s.serialize_none()
        }
    }
}

impl Serialize for JsonSnapshot<'_, '_> {
    fn serialize<S: Serializer>(&self, ser: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeMap;
        let (u, s) = (self.units, self.s);
        let m = u.model;
        #[derive(Serialize)]
        struct Tank<'x> {
            id: &'x str,
            level: Num,
            volume: Num,
            state: &'static str,
        }
        #[derive(Serialize)]
        struct Pump<'x> {
            id: &'x str,
            flow: Num,
            speed: Num,
            shaft_power_kw: Num,
            status: &'static str,
        }
        #[derive(Serialize)]
        struct Node<'x> {
            id: &'x str,
            head: Num,
            pressure: Num,
            demand: Num,
            #[serde(skip_serializing_if = "Option::is_none")]
            quality: Option<QualityValues<'x>>,
        }
        #[derive(Serialize)]
        struct Link<'x> {
            id: &'x str,
            flow: Num,
            status: &'static str,
            #[serde(skip_serializing_if = "Option::is_none")]
            quality: Option<QualityValues<'x>>,
        }
        let cons = constituents(m);
        let quality = |values: fn(&QualityRecord) -> &[Vec<f64>], index: usize| {
            self.quality.map(|q| QualityValues { constituents: cons, values: values(q), index })
        };
        let mut map = ser.serialize_map(None)?;
        map.serialize_entry("time_s", &s.time)?;
        map.serialize_entry("clock", &format_clock(self.start_clock + s.time))?;
        map.serialize_entry("price", &s.price)?;
        map.serialize_entry(
            "tanks",
            &Seq(self.tanks.iter().enumerate().map(|(j, &i)| Tank {
                id: &m.nodes()[i].id,
                level: Num(u.len(s.level[j])),
                volume: Num(u.volume(s.volume[j])),
                state: s.tank_state[j],
            })),
        )?;
        map.serialize_entry(
            "pumps",
            &Seq(self.pumps.iter().enumerate().map(|(j, &k)| Pump {
                id: &m.links()[k].id,
                flow: Num(u.flow(s.flow[k])),
                speed: Num(s.pump_speed[j]),
                shaft_power_kw: Num(s.pump_power[j] / 1e3),
                status: s.status[k],
            })),
        )?;
        map.serialize_entry(
            "nodes",
            &Seq(m.nodes().iter().enumerate().map(|(i, n)| Node {
                id: &n.id,
                head: Num(u.len(s.head[i])),
                pressure: Num(u.pressure(s.pressure[i])),
                demand: Num(u.flow(s.demand[i])),
                quality: quality(|q| &q.node, i),
            })),
        )?;
        map.serialize_entry(
            "links",
            &Seq(m.links().iter().enumerate().map(|(k, l)| Link {
                id: &l.id,
                flow: Num(u.flow(s.flow[k])),
                status: s.status[k],
                quality: quality(|q| &q.link, k),
            })),
        )?;
        map.end()
    }
}

/// A sequence serialized from an iterator, once.
struct Seq<I>(I);

impl<I: Iterator<Item = T> + Clone, T: Serialize> Serialize for Seq<I> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_seq(self.0.clone())
    }
}

impl<W: Write> SeriesWriter for JsonSeries<'_, W> {
    fn snapshot(&mut self, s: &Snapshot, quality: Option<&QualityRecord>) -> io::Result<()> {
        self.out.write_all(if self.first { b"\n" } else { b",\n" })?;
        self.first = false;
        let start_clock = self.units.model.time.simulation.map_or(0.0, |sim| sim.start_clock);
        let entry =
            JsonSnapshot { units: &self.units, tanks: &self.tanks, pumps: &self.pumps, s, start_clock, quality };
        serde_json::to_writer(&mut self.out, &entry)?;
        Ok(())
    }

    fn finish(&mut self, report: &RunReport) -> io::Result<()> {
        let tail = serde_json::to_string(&report.json_tail())?;
        self.out.write_all(b"\n],")?;
        // The tail object's members, without its braces.
        self.out.write_all(&tail.as_bytes()[1..])?;
        self.out.write_all(b"\n")?;
        self.out.flush()
    }
}

/// CSV: the series one value a row, `time_h,clock,kind,id,quantity,value,unit`.
pub struct CsvSeries<'a, W: Write> {
    out: W,
    units: Units<'a>,
    tanks: Vec<usize>,
    pumps: Vec<usize>,
    labels: [String; 5],
    line: String,
}

impl<'a, W: Write> CsvSeries<'a, W> {
    /// Writes the header line.
    pub fn new(model: &'a Model, mut out: W) -> io::Result<Self> {
        out.write_all(b"time_h,clock,kind,id,quantity,value,unit\n")?;
        let units = Units::new(model);
        let (tanks, pumps) = units.tanks_and_pumps();
        let u = &model.units;
        let labels = [
            u.length.label().to_owned(),
            units.volume_label(),
            u.pressure.label().to_owned(),
            u.flow.label().to_owned(),
            format!("{}/kWh", csv::text(units.currency())),
        ];
        Ok(CsvSeries { out, units, tanks, pumps, labels, line: String::with_capacity(1 << 16) })
    }
}

impl<W: Write> SeriesWriter for CsvSeries<'_, W> {
    fn snapshot(&mut self, s: &Snapshot, quality: Option<&QualityRecord>) -> io::Result<()> {
        let u = self.units;
        let m = u.model;
        let start_clock = m.time.simulation.map_or(0.0, |sim| sim.start_clock);
        let mut head = csv::number(s.time / 3600.0);
        head.push(',');
        head.push_str(&format_clock(start_clock + s.time));
        let line = &mut self.line;
        let [length, volume, pressure, flow, price] = &self.labels;
        let mut row = |out: &mut W, kind: &str, id: &str, q: &str, v: Option<f64>, text: &str, unit: &str| {
            line.clear();
            line.push_str(&head);
            line.push(',');
            line.push_str(kind);
            line.push(',');
            line.push_str(&csv::text(id));
            line.push(',');
            line.push_str(q);
            line.push(',');
            match v {
                Some(v) => csv::push_number(line, v),
                None => line.push_str(text),
            }
            line.push(',');
            line.push_str(unit);
            line.push('\n');
            out.write_all(line.as_bytes())
        };
        let out = &mut self.out;
        for (j, &i) in self.tanks.iter().enumerate() {
            let id = &m.nodes()[i].id;
            row(out, "tank", id, "level", Some(u.len(s.level[j])), "", length)?;
            row(out, "tank", id, "volume", Some(u.volume(s.volume[j])), "", volume)?;
        }
        for (j, &k) in self.pumps.iter().enumerate() {
            let id = &m.links()[k].id;
            row(out, "pump", id, "speed", Some(s.pump_speed[j]), "", "")?;
            row(out, "pump", id, "shaft_power", Some(s.pump_power[j] / 1e3), "", "kW")?;
        }
        for (i, n) in m.nodes().iter().enumerate() {
            row(out, "node", &n.id, "head", Some(u.len(s.head[i])), "", length)?;
            row(out, "node", &n.id, "pressure", Some(u.pressure(s.pressure[i])), "", pressure)?;
            row(out, "node", &n.id, "demand", Some(u.flow(s.demand[i])), "", flow)?;
        }
        for (k, l) in m.links().iter().enumerate() {
            row(out, "link", &l.id, "flow", Some(u.flow(s.flow[k])), "", flow)?;
            row(out, "link", &l.id, "status", None, s.status[k], "")?;
        }
        if let Some(q) = quality {
            for (c, con) in constituents(m).iter().enumerate() {
                let (id, unit, scale) = (csv::text(&con.id), csv::text(con.report_unit()), con.report_scale());
                for (i, n) in m.nodes().iter().enumerate() {
                    row(out, "node", &n.id, &id, Some(q.node[c][i] * scale), "", &unit)?;
                }
                for (k, l) in m.links().iter().enumerate() {
                    let v = q.link.get(c).map_or(f64::NAN, |v| v[k]);
                    row(out, "link", &l.id, &id, Some(v * scale), "", &unit)?;
                }
            }
        }
        row(out, "energy", "", "price", Some(s.price), "", price)
    }

    fn finish(&mut self, _: &RunReport) -> io::Result<()> {
        self.out.flush()
    }
}

/// Parquet: long tables with a time column, one file each in a directory: `nodes.parquet`
/// (`time_s, id, head, pressure, demand`, then `quality.<id>` per water-quality constituent),
/// `links.parquet` (`time_s, id, flow, status`, then the same),
/// `tanks.parquet` (`time_s, id, level, volume, state`), `pumps.parquet`
/// (`time_s, id, flow, speed, shaft_power`), and `series.parquet` (`time_s, clock, price`).
pub struct ParquetSeries<'a> {
    units: Units<'a>,
    tanks: Vec<usize>,
    pumps: Vec<usize>,
    start_clock: f64,
    tables: [Table; 5],
}

impl<'a> ParquetSeries<'a> {
    /// Creates the five tables in `dir` (which must exist).
    pub fn new(model: &'a Model, dir: &Path) -> io::Result<Self> {
        use columnar::Kind::{Text, F64};
        let units = Units::new(model);
        let (tanks, pumps) = units.tanks_and_pumps();
        let u = &model.units;
        let (l, p, q, v) = (u.length.label(), u.pressure.label(), u.flow.label(), units.volume_label());
        let sim = model.time.simulation;
        let start_clock = sim.map_or(0.0, |s| s.start_clock);
        let meta = [
            ("title", model.title.clone().unwrap_or_default()),
            ("start_clock", format_clock(start_clock)),
            ("duration_s", sim.map_or(0.0, |s| s.duration).to_string()),
        ];
        let time = || Column::new("time_s", F64, "s");
        let id = || Column::new("id", Text, "");
        let tables = [
            Table::create(
                dir,
                "nodes",
                &[
                    vec![
                        time(),
                        id(),
                        Column::new("head", F64, l),
                        Column::new("pressure", F64, p),
                        Column::new("demand", F64, q),
                    ],
                    quality_columns(model),
                ]
                .concat(),
                &meta,
            )?,
            Table::create(
                dir,
                "links",
                &[
                    vec![time(), id(), Column::new("flow", F64, q), Column::new("status", Text, "")],
                    quality_columns(model),
                ]
                .concat(),
                &meta,
            )?,
            Table::create(
                dir,
                "tanks",
                &[
                    time(),
                    id(),
                    Column::new("level", F64, l),
                    Column::new("volume", F64, v),
                    Column::new("state", Text, ""),
                ],
                &meta,
            )?,
            Table::create(
                dir,
                "pumps",
                &[
                    time(),
                    id(),
                    Column::new("flow", F64, q),
                    Column::new("speed", F64, ""),
                    Column::new("shaft_power", F64, "kW"),
                ],
                &meta,
            )?,
            Table::create(
                dir,
                "series",
                &[
                    time(),
                    Column::new("clock", Text, ""),
                    Column::new("price", F64, format!("{}/kWh", units.currency())),
                ],
                &meta,
            )?,
        ];
        Ok(ParquetSeries { units, tanks, pumps, start_clock, tables })
    }

    /// The files written (once finished).
    pub fn paths(&self) -> Vec<PathBuf> {
        self.tables.iter().map(|t| t.path().to_owned()).collect()
    }
}

/// The water-quality columns of the node and link tables: `quality.<id>`, one per constituent,
/// in its reported unit.
fn quality_columns(model: &Model) -> Vec<Column> {
    constituents(model)
        .iter()
        .map(|c| Column::new(format!("quality.{}", c.id), columnar::Kind::F64, c.report_unit()))
        .collect()
}

impl SeriesWriter for ParquetSeries<'_> {
    fn snapshot(&mut self, s: &Snapshot, quality: Option<&QualityRecord>) -> io::Result<()> {
        let u = self.units;
        let m = u.model;
        let cons = constituents(m);
        let [nodes, links, tanks, pumps, series] = &mut self.tables;
        // A constituent's value, or null where the record lacks it.
        let value = |values: Option<&Vec<Vec<f64>>>, c: usize, i: usize| {
            values.and_then(|v| v.get(c)).map_or(f64::NAN, |v| v[i] * cons[c].report_scale())
        };
        for (i, n) in m.nodes().iter().enumerate() {
            nodes.f64(0, s.time);
            nodes.text(1, Some(&n.id));
            nodes.f64(2, u.len(s.head[i]));
            nodes.f64(3, u.pressure(s.pressure[i]));
            nodes.f64(4, u.flow(s.demand[i]));
            for c in 0..cons.len() {
                nodes.f64(5 + c, value(quality.map(|q| &q.node), c, i));
            }
            nodes.end_row()?;
        }
        for (k, l) in m.links().iter().enumerate() {
            links.f64(0, s.time);
            links.text(1, Some(&l.id));
            links.f64(2, u.flow(s.flow[k]));
            links.text(3, Some(s.status[k]));
            for c in 0..cons.len() {
                links.f64(4 + c, value(quality.map(|q| &q.link), c, k));
            }
            links.end_row()?;
        }
        for (j, &i) in self.tanks.iter().enumerate() {
            tanks.f64(0, s.time);
            tanks.text(1, Some(&m.nodes()[i].id));
            tanks.f64(2, u.len(s.level[j]));
            tanks.f64(3, u.volume(s.volume[j]));
            tanks.text(4, Some(s.tank_state[j]));
            tanks.end_row()?;
        }
        for (j, &k) in self.pumps.iter().enumerate() {
            pumps.f64(0, s.time);
            pumps.text(1, Some(&m.links()[k].id));
            pumps.f64(2, u.flow(s.flow[k]));
            pumps.f64(3, s.pump_speed[j]);
            pumps.f64(4, s.pump_power[j] / 1e3);
            pumps.end_row()?;
        }
        series.f64(0, s.time);
        series.text(1, Some(&format_clock(self.start_clock + s.time)));
        series.f64(2, s.price);
        series.end_row()
    }

    fn finish(&mut self, _: &RunReport) -> io::Result<()> {
        for t in &mut self.tables {
            t.finish()?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::{Arc, Mutex};

    /// A writer that records the times it is given and gives up at the `fail_at`-th state.
    struct Recorder {
        times: Arc<Mutex<Vec<f64>>>,
        finished: Arc<Mutex<usize>>,
        fail_at: Option<usize>,
    }

    impl SeriesWriter for Recorder {
        fn snapshot(&mut self, s: &Snapshot, _: Option<&QualityRecord>) -> io::Result<()> {
            let mut times = self.times.lock().unwrap();
            if Some(times.len()) == self.fail_at {
                return Err(io::Error::new(io::ErrorKind::StorageFull, "no space left for the series"));
            }
            times.push(s.time);
            Ok(())
        }
        fn finish(&mut self, _: &RunReport) -> io::Result<()> {
            *self.finished.lock().unwrap() += 1;
            Ok(())
        }
    }

    fn demo_run() -> (Model, Run) {
        let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("examples/hillside-day.toml");
        let model = crate::load(&path).unwrap();
        let run = ringmain_core::simulate(&model).unwrap();
        assert!(run.series.len() > 10, "the demo run reports too few states for the test");
        (model, run)
    }

    /// The states reach the writer on its thread in the order reported, every one, and the
    /// writer is finished once, after the last.
    #[test]
    fn background_writer_gets_every_state_in_order() {
        let (model, run) = demo_run();
        let (times, finished) = (Arc::new(Mutex::new(Vec::new())), Arc::new(Mutex::new(0)));
        let inner = Recorder { times: times.clone(), finished: finished.clone(), fail_at: None };
        std::thread::scope(|scope| {
            let mut w = Background::start(scope, Box::new(inner));
            for s in &run.series {
                w.snapshot(s, None).unwrap();
            }
            w.finish(&RunReport::new(&model, &run)).unwrap();
        });
        let reported: Vec<f64> = run.series.iter().map(|s| s.time).collect();
        assert_eq!(*times.lock().unwrap(), reported);
        assert_eq!(*finished.lock().unwrap(), 1);
    }

    /// Fault class: an error of the writer on its own thread must come back to the run, with its
    /// kind and message, at a later state or at the finish at the latest, wherever it happens
    /// (first state, middle, last); no state after it is written and the writer is not finished.
    #[test]
    fn background_writer_gives_back_its_error_wherever_it_happens() {
        let (model, run) = demo_run();
        let n = run.series.len();
        for fail_at in [0, 1, n / 2, n - 1] {
            let (times, finished) = (Arc::new(Mutex::new(Vec::new())), Arc::new(Mutex::new(0)));
            let inner = Recorder { times: times.clone(), finished: finished.clone(), fail_at: Some(fail_at) };
            let errors = std::thread::scope(|scope| {
                let mut w = Background::start(scope, Box::new(inner));
                let mut errors = Vec::new();
                for s in &run.series {
                    if let Err(e) = w.snapshot(s, None) {
                        errors.push(e);
                        break;
                    }
                }
                let finish = w.finish(&RunReport::new(&model, &run));
                errors.push(finish.expect_err("the finish must give the error back"));
                errors
            });
            for e in &errors {
                assert_eq!(e.kind(), io::ErrorKind::StorageFull, "at {fail_at}");
                assert_eq!(e.to_string(), "no space left for the series", "at {fail_at}");
            }
            assert_eq!(times.lock().unwrap().len(), fail_at, "states written after the error, at {fail_at}");
            assert_eq!(*finished.lock().unwrap(), 0, "finished after an error, at {fail_at}");
        }
    }
}
