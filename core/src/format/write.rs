//! Writing a [`Model`] back as a model file (TOML or JSON), in the model's own units.
//!
//! The output reads back into an equal model (up to floating-point rounding of unit
//! conversions); defaults are written out explicitly so that the file documents itself.
//!
//! The top-level keys come in the order a reader needs them: `title`, `units`, `hydraulics`,
//! `criteria`, `simulation`, `electricity`, `patterns`, `quality`, then `nodes`, `links` and
//! `controls`; inside an
//! element, `id` and `kind` come first and the element's data follows in the order the file
//! format documents it. JSON is written element by element, never as a whole value tree, with
//! one element a line ([`ElementPerLine`]): a 100 000-junction model is written in about 70 ms,
//! and `ringmain generate` makes and writes a million junctions in under 2 s and 270 MB
//! (benches/RESULTS.md).

use super::Format;
use crate::json_text::{self, Line};
use crate::model::time::{self as tm, Action, Condition};
use crate::model::{LinkKind, LinkStatus, Model, NodeKind, PumpDrive, ValveType, WaterSpec};
use crate::physics::fittings::Fitting;
use crate::physics::pump::Efficiency;
use crate::units::{Converter, Quantity};
use serde::ser::{SerializeMap, Serializer};
use serde::Serialize;
use std::io::{self, Write};

/// Writes the model as a JSON model file, element by element, one element a line.
///
/// Nothing of the file is held in memory: the output is buffered here, so pass the file itself.
/// `out` is flushed at the end. The arrays of nodes and links are formatted by hand
/// ([`crate::json_text`]), in parallel chunks when they are large; the text is byte for byte what
/// serde_json writes of the whole file through [`ElementPerLine`] (the tests compare them).
pub fn write_json<W: Write>(model: &Model, out: W) -> io::Result<()> {
    let c = Ctx::new(model);
    let mut out = io::BufWriter::with_capacity(1 << 16, out);
    // The entries before the nodes, as an element-per-line object whose closing `\n}` gives
    // way to the nodes.
    let mut head = Vec::with_capacity(4096);
    write_value(&mut head, &ModelFile(c, Part::Head), ElementPerLine::default())?;
    match head.strip_suffix(b"\n}") {
        Some(entries) => {
            out.write_all(entries)?;
            out.write_all(b",")?;
        }
        // No entry before the nodes: `{}`.
        None => out.write_all(b"{")?,
    }
    out.write_all(b"\n  \"nodes\": ")?;
    json_text::try_write_array(&mut out, model.nodes().len(), |i, buf| write_node(c, i, buf))?;
    out.write_all(b",\n  \"links\": ")?;
    json_text::try_write_array(&mut out, model.links().len(), |k, buf| write_link(c, k, buf))?;
    if model.time.controls.is_empty() {
        out.write_all(b"\n}")?;
    } else {
        // The entries after the links, as their own object whose opening brace gives way to the
        // comma after the links.
        let mut tail = Vec::with_capacity(4096);
        write_value(&mut tail, &ModelFile(c, Part::Tail), ElementPerLine::default())?;
        out.write_all(b",")?;
        out.write_all(tail.get(1..).unwrap_or_default())?;
    }
    out.write_all(b"\n")?;
    out.flush()
}

/// Serializes `value` into `out` with the layout `format`.
fn write_value<T: Serialize + ?Sized>(out: &mut Vec<u8>, value: &T, format: ElementPerLine) -> io::Result<()> {
    let mut serializer = serde_json::Serializer::with_formatter(out, format);
    value.serialize(&mut serializer).map_err(io::Error::from)
}

/// Appends a value nested in a node or a link (a curve, a table of demands) as serde_json writes
/// it there: on the element's line.
fn write_nested<T: Serialize>(out: &mut Vec<u8>, value: T) -> io::Result<()> {
    write_value(out, &value, ElementPerLine::inside_element())
}

/// The text of node `i` on its line, as serde_json writes its [`NodeEntry`].
fn write_node(c: Ctx<'_>, i: usize, out: &mut Vec<u8>) -> io::Result<()> {
    // Every field, in the order of the struct (a field added there and not here does not
    // compile; the order is the tests' to check).
    let NodeEntry {
        id,
        kind,
        head,
        elevation,
        demand,
        pattern,
        demands,
        full_pressure,
        zero_pressure,
        exponent,
        outlet,
        level,
        min_level,
        max_level,
        diameter,
        volume_curve,
        head_pattern,
        x,
        y,
        zone,
        quality,
        quality_pattern,
        initial_quality,
        booster,
        mixing,
        mixing_fraction,
    } = node_entry(c, i);
    let mut l = Line::open(out);
    l.text("id", id);
    l.text("kind", kind);
    l.opt_num("head", head);
    l.num("elevation", elevation);
    l.opt_num("demand", demand);
    l.opt_text("pattern", pattern);
    l.opt_with("demands", demands, write_nested)?;
    l.opt_num("full_pressure", full_pressure);
    l.opt_num("zero_pressure", zero_pressure);
    l.opt_num("exponent", exponent);
    l.opt_with("outlet", outlet, write_nested)?;
    l.opt_num("level", level);
    l.opt_num("min_level", min_level);
    l.opt_num("max_level", max_level);
    l.opt_num("diameter", diameter);
    l.opt_with("volume_curve", volume_curve, write_nested)?;
    l.opt_text("head_pattern", head_pattern);
    l.opt_num("x", x);
    l.opt_num("y", y);
    l.opt_text("zone", zone);
    l.opt_with("quality", quality, write_nested)?;
    l.opt_with("quality_pattern", quality_pattern, write_nested)?;
    l.opt_with("initial_quality", initial_quality, write_nested)?;
    l.opt_with("booster", booster, write_nested)?;
    l.opt_text("mixing", mixing);
    l.opt_num("mixing_fraction", mixing_fraction);
    l.close();
    Ok(())
}

/// The text of link `k` on its line, as serde_json writes its [`LinkEntry`].
fn write_link(c: Ctx<'_>, k: usize, out: &mut Vec<u8>) -> io::Result<()> {
    // Every field, in the order of the struct (see `write_node`).
    let LinkEntry {
        id,
        kind,
        from,
        to,
        valve,
        length,
        diameter,
        roughness,
        head_curve,
        power,
        efficiency_curve,
        efficiency,
        speed,
        speed_pattern,
        setting,
        setting_pattern,
        minor_loss,
        fittings,
        elevation,
        npsh_required_curve,
        status,
        check_valve,
        leakage_rate,
        path,
    } = link_entry(c, k);
    let mut l = Line::open(out);
    l.text("id", id);
    l.text("kind", kind);
    l.text("from", from);
    l.text("to", to);
    l.opt_text("valve", valve);
    l.opt_num("length", length);
    l.opt_num("diameter", diameter);
    l.opt_num("roughness", roughness);
    l.opt_with("head_curve", head_curve, write_nested)?;
    l.opt_num("power", power);
    l.opt_with("efficiency_curve", efficiency_curve, write_nested)?;
    l.opt_num("efficiency", efficiency);
    l.opt_num("speed", speed);
    l.opt_text("speed_pattern", speed_pattern);
    l.opt_num("setting", setting);
    l.opt_text("setting_pattern", setting_pattern);
    l.opt_num("minor_loss", minor_loss);
    l.opt_with("fittings", fittings, write_nested)?;
    l.opt_num("elevation", elevation);
    l.opt_with("npsh_required_curve", npsh_required_curve, write_nested)?;
    l.opt_text("status", status);
    l.opt_flag("check_valve", check_valve);
    l.opt_num("leakage_rate", leakage_rate);
    l.opt_with("path", path, write_nested)?;
    l.close();
    Ok(())
}

/// Writes the model in `format` to `out`: JSON streamed by [`write_json`], TOML as one text.
pub fn write_to<W: Write>(model: &Model, format: Format, mut out: W) -> io::Result<()> {
    match format {
        Format::Json => write_json(model, out),
        Format::Toml => {
            out.write_all(to_string(model, format).as_bytes())?;
            out.flush()
        }
    }
}

/// The model as model-file text in the given format.
pub fn to_string(model: &Model, format: Format) -> String {
    match format {
        Format::Json => {
            let mut out = Vec::with_capacity(128 * (model.nodes().len() + 2 * model.links().len()) + 1024);
            // Writing into memory cannot fail, and serde_json writes UTF-8.
            let _ = write_json(model, &mut out);
            String::from_utf8(out).unwrap_or_default()
        }
        // Tables, arrays of tables, strings, numbers and booleans always have a TOML form; the
        // fallback is unreachable in practice.
        Format::Toml => toml::to_string(&ModelFile(Ctx::new(model), Part::Whole)).unwrap_or_default(),
    }
}

/// Serializes `value` as JSON laid out by [`ElementPerLine`], followed by a newline, and flushes
/// `out`.
pub fn write_element_per_line<W: Write, T: Serialize + ?Sized>(out: W, value: &T) -> io::Result<()> {
    // The serializer makes several small writes per number and string. A buffer of our own
    // keeps them inlined copies whatever `out` is (a `&mut dyn Write` costs a call each); its
    // full chunks go past a caller's buffer of the same size without a second copy.
    let mut out = io::BufWriter::with_capacity(1 << 16, out);
    let mut serializer = serde_json::Serializer::with_formatter(&mut out, ElementPerLine::default());
    value.serialize(&mut serializer)?;
    out.write_all(b"\n")?;
    out.flush()
}

/// A JSON layout of one element a line: the top-level object and the objects and arrays directly
/// in it are indented, one entry a line; anything deeper (a node, a link, a pattern) is written
/// on one line, as `{"id": "J1", "kind": "junction", "elevation": 12.5}`.
///
/// Files stay readable and diff well line by line, and are about half the size of fully
/// indented ones.
#[derive(Clone, Debug, Default)]
pub struct ElementPerLine {
    /// Objects and arrays open around the next token.
    depth: usize,
    /// Whether the innermost open object or array has an entry yet.
    has_value: bool,
}

impl ElementPerLine {
    /// Objects and arrays opened at this depth or less are written one entry a line.
    const LINE_DEPTH: usize = 2;

    /// The layout inside an element of the top-level arrays: everything on the element's line.
    fn inside_element() -> Self {
        ElementPerLine { depth: Self::LINE_DEPTH + 1, has_value: false }
    }

    fn one_entry_a_line(&self) -> bool {
        self.depth <= Self::LINE_DEPTH
    }

    fn new_line<W: ?Sized + Write>(&self, out: &mut W) -> io::Result<()> {
        out.write_all(b"\n")?;
        for _ in 0..self.depth {
            out.write_all(b"  ")?;
        }
        Ok(())
    }

    fn begin(&mut self, out: &mut (impl ?Sized + Write), bracket: &[u8]) -> io::Result<()> {
        self.depth += 1;
        self.has_value = false;
        out.write_all(bracket)
    }

    fn end(&mut self, out: &mut (impl ?Sized + Write), bracket: &[u8]) -> io::Result<()> {
        let lines = self.one_entry_a_line();
        self.depth -= 1;
        if lines && self.has_value {
            self.new_line(out)?;
        }
        out.write_all(bracket)
    }

    fn begin_entry(&mut self, out: &mut (impl ?Sized + Write), first: bool) -> io::Result<()> {
        if self.one_entry_a_line() {
            if !first {
                out.write_all(b",")?;
            }
            self.new_line(out)
        } else if first {
            Ok(())
        } else {
            out.write_all(b", ")
        }
    }
}

impl serde_json::ser::Formatter for ElementPerLine {
    fn begin_array<W: ?Sized + Write>(&mut self, out: &mut W) -> io::Result<()> {
        self.begin(out, b"[")
    }
    fn end_array<W: ?Sized + Write>(&mut self, out: &mut W) -> io::Result<()> {
        self.end(out, b"]")
    }
    fn begin_array_value<W: ?Sized + Write>(&mut self, out: &mut W, first: bool) -> io::Result<()> {
        self.begin_entry(out, first)
    }
    fn end_array_value<W: ?Sized + Write>(&mut self, _out: &mut W) -> io::Result<()> {
        self.has_value = true;
        Ok(())
    }
    fn begin_object<W: ?Sized + Write>(&mut self, out: &mut W) -> io::Result<()> {
        self.begin(out, b"{")
    }
    fn end_object<W: ?Sized + Write>(&mut self, out: &mut W) -> io::Result<()> {
        self.end(out, b"}")
    }
    fn begin_object_key<W: ?Sized + Write>(&mut self, out: &mut W, first: bool) -> io::Result<()> {
        self.begin_entry(out, first)
    }
    fn begin_object_value<W: ?Sized + Write>(&mut self, out: &mut W) -> io::Result<()> {
        out.write_all(b": ")
    }
    fn end_object_value<W: ?Sized + Write>(&mut self, _out: &mut W) -> io::Result<()> {
        self.has_value = true;
        Ok(())
    }
}

/// What every part of the file needs: the model, and the converter to its units.
#[derive(Clone, Copy)]
struct Ctx<'a> {
    model: &'a Model,
    density: f64,
    units: Converter,
}

impl<'a> Ctx<'a> {
    fn new(model: &'a Model) -> Self {
        let units = model.converter();
        Ctx { model, density: units.density, units }
    }
    fn len(self, v: f64) -> f64 {
        self.units.from_si(Quantity::Length, v)
    }
    fn flow(self, v: f64) -> f64 {
        self.units.from_si(Quantity::Flow, v)
    }
    fn diameter(self, v: f64) -> f64 {
        self.units.from_si(Quantity::Diameter, v)
    }
    fn pressure(self, head: f64) -> f64 {
        self.units.from_si(Quantity::Pressure, head)
    }
    fn pattern(self, i: usize) -> &'a str {
        &self.model.time.patterns[i].id
    }
    fn node(self, i: usize) -> &'a str {
        &self.model.nodes()[i].id
    }
    /// A valve setting (or a control's new setting) in the model's units.
    fn setting(self, valve: Option<ValveType>, s: f64) -> f64 {
        valve.map_or(s, |v| self.units.from_si(v.setting_quantity(), s))
    }
    fn axis(self, axis: Axis, v: f64) -> f64 {
        match axis {
            Axis::Length => self.len(v),
            Axis::Flow => self.flow(v),
            Axis::Volume => v * self.len(1.0).powi(3),
            Axis::Percent => v * 100.0,
        }
    }
}

/// The quantity on one axis of a curve.
#[derive(Clone, Copy)]
enum Axis {
    Length,
    Flow,
    Volume,
    Percent,
}

/// A curve as `[[x, y], ...]` in the model's units.
struct Points<'a> {
    ctx: Ctx<'a>,
    points: &'a [(f64, f64)],
    x: Axis,
    y: Axis,
}

impl Serialize for Points<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let c = self.ctx;
        s.collect_seq(self.points.iter().map(|&(x, y)| [c.axis(self.x, x), c.axis(self.y, y)]))
    }
}

/// Which top-level entries of the file [`ModelFile`] serializes.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Part {
    Whole,
    /// Those before the nodes.
    Head,
    /// Those after the links.
    Tail,
}

/// The file, or a part of it.
struct ModelFile<'a>(Ctx<'a>, Part);

impl Serialize for ModelFile<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let c = self.0;
        let m = c.model;
        let time = &m.time;
        let mut top = s.serialize_map(None)?;
        if self.1 != Part::Tail {
            self.head(c, &mut top)?;
        }
        if self.1 == Part::Whole {
            top.serialize_entry("nodes", &Nodes(c))?;
            top.serialize_entry("links", &Links(c))?;
        }
        if self.1 != Part::Head && !time.controls.is_empty() {
            top.serialize_entry("controls", &Controls(c))?;
        }
        top.end()
    }
}

impl ModelFile<'_> {
    /// The top-level entries before the nodes.
    fn head<M: SerializeMap>(&self, c: Ctx<'_>, top: &mut M) -> Result<(), M::Error> {
        let m = c.model;
        let time = &m.time;
        if let Some(t) = &m.title {
            top.serialize_entry("title", t)?;
        }
        let u = &m.units;
        top.serialize_entry(
            "units",
            &UnitsTable {
                length: u.length.label(),
                diameter: u.diameter.label(),
                flow: u.flow.label(),
                pressure: u.pressure.label(),
                roughness: u.roughness.label(),
            },
        )?;
        let o = &m.options;
        let (water_temperature, kinematic_viscosity) = match o.water {
            WaterSpec::Temperature(t) => (Some(t), None),
            WaterSpec::KinematicViscosity(nu) => (None, Some(nu)),
        };
        let hydraulics = Hydraulics {
            headloss: o.headloss.label(),
            water_temperature,
            kinematic_viscosity,
            max_iterations: o.max_iterations,
            head_tolerance: c.len(o.head_tolerance),
            flow_tolerance: o.flow_tolerance,
            fittings_method: o.fittings_method.label(),
            site_elevation: o.site_elevation.map(|z| c.len(z)),
        };
        top.serialize_entry("hydraulics", &hydraulics)?;
        // Each value as written (a limit keeps its unit, "20 psi").
        if let Some(criteria) = &m.criteria {
            top.serialize_entry("criteria", &CriteriaOut(criteria))?;
        }
        let density = c.density;
        if let Some(pd) = &m.outflow.pressure_demand {
            top.serialize_entry(
                "pressure_demand",
                &PressureDemandTable {
                    full_pressure: c.pressure(pd.full_pressure),
                    zero_pressure: c.pressure(pd.zero_pressure),
                    exponent: pd.exponent,
                },
            )?;
        }
        if let Some(l) = &m.outflow.leakage {
            top.serialize_entry(
                "background_leakage",
                &LeakageTable {
                    rate: leakage_rate_from_si(c, l.rate),
                    reference_pressure: m.units.pressure.from_head(l.reference_pressure, density),
                    exponent: l.exponent,
                },
            )?;
        }
        if m.map.coordinates != crate::model::MapCoordinates::default() {
            top.serialize_entry("map", &MapTable { coordinates: m.map.coordinates.label() })?;
        }
        if let Some(sim) = &time.simulation {
            top.serialize_entry(
                "simulation",
                &Simulation {
                    duration: tm::format_duration(sim.duration),
                    hydraulic_step: tm::format_duration(sim.hydraulic_step),
                    report_interval: tm::format_duration(sim.report_interval),
                    start_clock: tm::format_clock(sim.start_clock),
                    level_tolerance: c.len(sim.level_tolerance),
                    transport_step: sim.transport_step.map(tm::format_duration),
                    quality_tolerance: sim.quality_tolerance,
                },
            )?;
        }
        let e = &time.energy;
        if e.price != 0.0 || e.tariff.is_some() || e.currency.is_some() {
            top.serialize_entry(
                "electricity",
                &Electricity {
                    price_per_kwh: e.price,
                    tariff_pattern: e.tariff.map(|p| c.pattern(p)),
                    currency: e.currency.as_deref(),
                },
            )?;
        }
        if !time.patterns.is_empty() {
            top.serialize_entry("patterns", &Patterns(c))?;
        }
        if !time.quality.constituents.is_empty() {
            top.serialize_entry("quality", &Constituents(c))?;
        }
        Ok(())
    }
}

#[derive(Serialize)]
struct UnitsTable {
    length: &'static str,
    diameter: &'static str,
    flow: &'static str,
    pressure: &'static str,
    roughness: &'static str,
}

#[derive(Serialize)]
struct Hydraulics {
    headloss: &'static str,
    #[serde(skip_serializing_if = "Option::is_none")]
    water_temperature: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    kinematic_viscosity: Option<f64>,
    max_iterations: u32,
    head_tolerance: f64,
    flow_tolerance: f64,
    fittings_method: &'static str,
    #[serde(skip_serializing_if = "Option::is_none")]
    site_elevation: Option<f64>,
}

#[derive(Serialize)]
struct PressureDemandTable {
    full_pressure: f64,
    zero_pressure: f64,
    exponent: f64,
}

#[derive(Serialize)]
struct LeakageTable {
    rate: f64,
    reference_pressure: f64,
    exponent: f64,
}

/// A leakage rate (m³/s per m) in flow units per km (per 1000 ft where lengths are in ft).
fn leakage_rate_from_si(c: Ctx<'_>, rate: f64) -> f64 {
    c.flow(rate * c.model.units.length.to_si(1000.0))
}

#[derive(Serialize)]
struct OutletEntry {
    coefficient: f64,
    exponent: f64,
}

#[derive(Serialize)]
struct MapTable {
    coordinates: &'static str,
}

#[derive(Serialize)]
struct Simulation {
    duration: String,
    hydraulic_step: String,
    report_interval: String,
    start_clock: String,
    level_tolerance: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    transport_step: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    quality_tolerance: Option<f64>,
}

/// The `[criteria]` table, each value as it was written.
struct CriteriaOut<'a>(&'a crate::model::criteria::CriteriaTable);

impl Serialize for CriteriaOut<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        use crate::model::criteria::{CriteriaEntry as E, GroupEntry as G, Limit, Written};
        /// A value as written.
        struct W<'a>(&'a Written);
        impl Serialize for W<'_> {
            fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
                match self.0 {
                    Written::Bool(b) => s.serialize_bool(*b),
                    Written::Number(x) => s.serialize_f64(*x),
                    Written::Text(t) => s.serialize_str(t),
                    Written::List(items) => s.collect_seq(items),
                }
            }
        }
        /// Strings as written: one, or a list.
        struct Strings<'a>(&'a [String], bool);
        impl Serialize for Strings<'_> {
            fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
                match self.0 {
                    [one] if !self.1 => s.serialize_str(one),
                    all => s.collect_seq(all),
                }
            }
        }
        /// A table of ids and limits.
        struct ById<'a>(&'a [(String, Limit)]);
        impl Serialize for ById<'_> {
            fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
                s.collect_map(self.0.iter().map(|(id, l)| (id, W(&l.written))))
            }
        }
        /// One group.
        struct Group<'a>(&'a [G]);
        impl Serialize for Group<'_> {
            fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
                let mut map = s.serialize_map(Some(self.0.len()))?;
                for entry in self.0 {
                    match entry {
                        G::Name(name) => map.serialize_entry(entry.key(), name)?,
                        G::Zone(list, as_list) | G::Ids(list, as_list) => {
                            map.serialize_entry(entry.key(), &Strings(list, *as_list))?
                        }
                        G::MinPressure(l) | G::MaxPressure(l) | G::MinFireFlow(l) => {
                            map.serialize_entry(entry.key(), &W(&l.written))?
                        }
                    }
                }
                map.end()
            }
        }
        let mut map = s.serialize_map(Some(self.0.entries.len()))?;
        for entry in &self.0.entries {
            let key = entry.key();
            match entry {
                E::MustConverge(b) | E::AllDemandsSupplied(b) => map.serialize_entry(key, b)?,
                E::MinPressure(l)
                | E::MaxPressure(l)
                | E::MaxVelocity(l)
                | E::MaxHeadloss(l)
                | E::MinTankReserve(l)
                | E::MinDelivered(l)
                | E::FireResidual(l)
                | E::MaxAge(l)
                | E::After(l) => map.serialize_entry(key, &W(&l.written))?,
                E::MinSupplyMargin(_, w) | E::FailOnWarnings(_, w) => map.serialize_entry(key, &W(w))?,
                E::SourceCapacity(list) | E::MinResidual(list) => map.serialize_entry(key, &ById(list))?,
                E::Groups(groups) => {
                    let groups: Vec<Group<'_>> = groups.iter().map(|g| Group(&g.entries)).collect();
                    map.serialize_entry(key, &groups)?
                }
            }
        }
        map.end()
    }
}

/// The `[[quality]]` entries.
struct Constituents<'a>(Ctx<'a>);

impl Serialize for Constituents<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        use crate::quality::ConstituentKind;
        let c = self.0;
        s.collect_seq(c.model.time.quality.constituents.iter().map(|con| {
            let mut e = ConstituentEntry { id: &con.id, kind: con.kind.label(), ..ConstituentEntry::default() };
            match con.kind {
                ConstituentKind::Age => e.initial = con.initial / tm::HOUR,
                ConstituentKind::Source { node } => {
                    e.source = Some(c.node(node));
                    e.initial = con.initial;
                }
                ConstituentKind::Substance(r) => {
                    e.unit = Some(&con.unit);
                    e.bulk_rate = Some(r.bulk_rate * tm::DAY);
                    e.wall_rate = Some(c.len(r.wall_rate * tm::DAY));
                    e.diffusivity = Some(r.diffusivity);
                    e.initial = con.initial;
                }
            }
            e
        }))
    }
}

/// One `[[quality]]` entry in the model's units (rates per day, wall rates in length per day,
/// ages in hours).
#[derive(Serialize, Default)]
struct ConstituentEntry<'a> {
    id: &'a str,
    kind: &'static str,
    #[serde(skip_serializing_if = "Option::is_none")]
    source: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    unit: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    bulk_rate: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    wall_rate: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    diffusivity: Option<f64>,
    initial: f64,
}

/// A node's table keyed by constituent id (`quality`, `initial_quality`, `booster`, and
/// `quality_pattern` with pattern ids).
struct PerConstituent<'a, T: Serialize>(Vec<(&'a str, T)>);

impl<T: Serialize> Serialize for PerConstituent<'_, T> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_map(self.0.iter().map(|(k, v)| (k, v)))
    }
}

#[derive(Serialize)]
struct Electricity<'a> {
    price_per_kwh: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    tariff_pattern: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    currency: Option<&'a str>,
}

struct Patterns<'a>(Ctx<'a>);

impl Serialize for Patterns<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_seq(self.0.model.time.patterns.iter().map(|p| PatternEntry {
            id: &p.id,
            step: tm::format_duration(p.step),
            multipliers: &p.multipliers,
        }))
    }
}

#[derive(Serialize)]
struct PatternEntry<'a> {
    id: &'a str,
    step: String,
    multipliers: &'a [f64],
}

struct Nodes<'a>(Ctx<'a>);

impl Serialize for Nodes<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let c = self.0;
        s.collect_seq((0..c.model.nodes().len()).map(|i| node_entry(c, i)))
    }
}

/// One node; the fields in the order they are written, those of other kinds left out.
#[derive(Serialize, Default)]
struct NodeEntry<'a> {
    id: &'a str,
    kind: &'static str,
    #[serde(skip_serializing_if = "Option::is_none")]
    head: Option<f64>,
    elevation: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    demand: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pattern: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    demands: Option<Demands<'a>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    full_pressure: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    zero_pressure: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    exponent: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    outlet: Option<OutletEntry>,
    #[serde(skip_serializing_if = "Option::is_none")]
    level: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    min_level: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    max_level: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    diameter: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    volume_curve: Option<Points<'a>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    head_pattern: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    x: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    y: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    zone: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    quality: Option<PerConstituent<'a, f64>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    quality_pattern: Option<PerConstituent<'a, &'a str>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    initial_quality: Option<PerConstituent<'a, f64>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    booster: Option<PerConstituent<'a, f64>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    mixing: Option<&'static str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    mixing_fraction: Option<f64>,
}

fn node_entry(c: Ctx<'_>, i: usize) -> NodeEntry<'_> {
    let n = &c.model.nodes()[i];
    let time = &c.model.time;
    let mut e = NodeEntry {
        id: &n.id,
        kind: n.kind.label(),
        elevation: c.len(n.elevation),
        x: n.coordinates.map(|(x, _)| x),
        y: n.coordinates.map(|(_, y)| y),
        zone: n.zone.as_deref(),
        ..NodeEntry::default()
    };
    if let Some(j) = c.model.outflow.junctions.get(&i) {
        e.full_pressure = j.full_pressure.map(|p| c.pressure(p));
        e.zero_pressure = j.zero_pressure.map(|p| c.pressure(p));
        e.exponent = j.exponent;
        e.outlet = j.outlet.map(|o| OutletEntry {
            coefficient: c.flow(o.coefficient) / c.model.units.pressure.from_head(1.0, c.density).powf(o.exponent),
            exponent: o.exponent,
        });
    }
    match &n.kind {
        NodeKind::Junction { demand } => match time.demands.get(&i).map(Vec::as_slice) {
            Some([one]) => {
                e.demand = Some(c.flow(one.base));
                e.pattern = one.pattern.map(|p| c.pattern(p));
            }
            Some(several) => e.demands = Some(Demands { ctx: c, list: several }),
            None => e.demand = Some(c.flow(*demand)),
        },
        NodeKind::Reservoir { head } => {
            e.head = Some(c.len(*head));
            e.head_pattern = time.head_patterns.get(&i).map(|&p| c.pattern(p));
        }
        NodeKind::Tank(t) => {
            e.level = Some(c.len(t.level));
            e.min_level = Some(c.len(t.min_level));
            e.max_level = t.max_level.map(|v| c.len(v));
            e.diameter = t.diameter.map(|v| c.len(v));
            e.volume_curve = time.volume_curves.get(&i).map(|curve| Points {
                ctx: c,
                points: &curve.points,
                x: Axis::Length,
                y: Axis::Volume,
            });
        }
    }
    node_quality(c, i, &mut e);
    e
}

/// A node's water-quality keys: sources, their patterns, starting values, boosters, a tank's
/// mixing.
fn node_quality<'a>(c: Ctx<'a>, i: usize, e: &mut NodeEntry<'a>) {
    use crate::quality::{ConstituentKind, Mixing};
    let q = &c.model.time.quality;
    let id = |k: usize| q.constituents[k].id.as_str();
    if let Some(list) = q.sources.get(&i) {
        e.quality = Some(PerConstituent(list.iter().map(|s| (id(s.constituent), s.value)).collect()));
        let patterns: Vec<_> =
            list.iter().filter_map(|s| s.pattern.map(|p| (id(s.constituent), c.pattern(p)))).collect();
        if !patterns.is_empty() {
            e.quality_pattern = Some(PerConstituent(patterns));
        }
    }
    if let Some(list) = q.initial.get(&i) {
        let value = |k: usize, v: f64| if q.constituents[k].kind == ConstituentKind::Age { v / tm::HOUR } else { v };
        e.initial_quality = Some(PerConstituent(list.iter().map(|&(k, v)| (id(k), value(k, v))).collect()));
    }
    if let Some(list) = q.boosters.get(&i) {
        e.booster = Some(PerConstituent(list.iter().map(|&(k, v)| (id(k), v)).collect()));
    }
    if let Some(m) = q.mixing.get(&i) {
        e.mixing = Some(m.label());
        if let Mixing::TwoZone(f) = m {
            e.mixing_fraction = Some(*f);
        }
    }
}

/// A junction's demand categories.
struct Demands<'a> {
    ctx: Ctx<'a>,
    list: &'a [tm::Demand],
}

#[derive(Serialize)]
struct DemandEntry<'a> {
    base: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pattern: Option<&'a str>,
}

impl Serialize for Demands<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let c = self.ctx;
        s.collect_seq(
            self.list.iter().map(|d| DemandEntry { base: c.flow(d.base), pattern: d.pattern.map(|p| c.pattern(p)) }),
        )
    }
}

struct Links<'a>(Ctx<'a>);

impl Serialize for Links<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let c = self.0;
        s.collect_seq((0..c.model.links().len()).map(|k| link_entry(c, k)))
    }
}

/// One link; the fields in the order they are written, those of other kinds left out.
#[derive(Serialize, Default)]
struct LinkEntry<'a> {
    id: &'a str,
    kind: &'static str,
    from: &'a str,
    to: &'a str,
    #[serde(skip_serializing_if = "Option::is_none")]
    valve: Option<&'static str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    length: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    diameter: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    roughness: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    head_curve: Option<Points<'a>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    power: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    efficiency_curve: Option<Points<'a>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    efficiency: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    speed: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    speed_pattern: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    setting: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    setting_pattern: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    minor_loss: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    fittings: Option<Vec<FittingEntry>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    elevation: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    npsh_required_curve: Option<Points<'a>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    status: Option<&'static str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    check_valve: Option<bool>,
    #[serde(skip_serializing_if = "Option::is_none")]
    leakage_rate: Option<f64>,
    /// Map coordinates, written as given (no unit conversion, as node `x`, `y`).
    #[serde(skip_serializing_if = "Option::is_none")]
    path: Option<&'a [(f64, f64)]>,
}

/// One named fitting; parameters only for the kinds that take them.
#[derive(Serialize)]
struct FittingEntry {
    kind: &'static str,
    count: u32,
    #[serde(skip_serializing_if = "Option::is_none")]
    radius: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    angle: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    opening: Option<f64>,
}

fn fitting_entries(fittings: &[Fitting]) -> Option<Vec<FittingEntry>> {
    (!fittings.is_empty()).then(|| {
        fittings
            .iter()
            .map(|f| {
                let takes = |key: &str| f.kind.parameters().contains(&key);
                FittingEntry {
                    kind: f.kind.label(),
                    count: f.count,
                    radius: takes("radius").then_some(f.radius),
                    angle: takes("angle").then_some(f.angle),
                    opening: takes("opening").then_some(f.opening),
                }
            })
            .collect()
    })
}

fn link_entry(c: Ctx<'_>, k: usize) -> LinkEntry<'_> {
    let m = c.model;
    let l = &m.links()[k];
    let time = &m.time;
    let mut e = LinkEntry {
        id: &l.id,
        kind: l.kind.label(),
        from: c.node(l.from),
        to: c.node(l.to),
        status: (l.status == LinkStatus::Closed).then(|| l.status.label()),
        path: m.map.paths.get(&k).map(Vec::as_slice),
        ..LinkEntry::default()
    };
    match &l.kind {
        LinkKind::Pipe(p) => {
            e.length = Some(c.len(p.length));
            e.diameter = Some(c.diameter(p.diameter));
            e.roughness = Some(c.units.from_si(Quantity::PipeRoughness, p.roughness));
            e.minor_loss = Some(p.minor_loss);
            e.fittings = fitting_entries(m.fittings(k));
            e.check_valve = Some(p.check_valve);
            e.leakage_rate = m.outflow.leakage_rates.get(&k).map(|&r| leakage_rate_from_si(c, r));
        }
        LinkKind::Pump(p) => {
            match &p.drive {
                PumpDrive::Curve { points, .. } => {
                    e.head_curve = Some(Points { ctx: c, points, x: Axis::Flow, y: Axis::Length });
                }
                PumpDrive::Power(w) => e.power = Some(c.units.from_si(Quantity::Power, *w)),
            }
            match (&p.efficiency_points, &p.efficiency) {
                (Some(points), _) => {
                    e.efficiency_curve = Some(Points { ctx: c, points, x: Axis::Flow, y: Axis::Percent });
                }
                (None, Efficiency::Constant(eff)) => e.efficiency = Some(eff * 100.0),
                (None, Efficiency::Curve { .. }) => {}
            }
            e.speed = Some(p.speed);
            e.speed_pattern = time.speed_patterns.get(&k).map(|&p| c.pattern(p));
            e.elevation = p.elevation.map(|z| c.len(z));
            e.npsh_required_curve =
                p.npsh_required.as_deref().map(|points| Points { ctx: c, points, x: Axis::Flow, y: Axis::Length });
        }
        LinkKind::Valve(v) => {
            e.valve = Some(v.valve.label());
            e.diameter = Some(c.diameter(v.diameter));
            e.setting = Some(c.setting(Some(v.valve), v.setting));
            e.setting_pattern = time.setting_patterns.get(&k).map(|&p| c.pattern(p));
            e.minor_loss = Some(v.minor_loss);
            e.fittings = fitting_entries(m.fittings(k));
            if !v.automatic && l.status == LinkStatus::Open {
                e.status = Some("open");
            }
        }
    }
    e
}

struct Controls<'a>(Ctx<'a>);

impl Serialize for Controls<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let c = self.0;
        s.collect_seq(c.model.time.controls.iter().map(|control| ControlEntry { ctx: c, control }))
    }
}

struct ControlEntry<'a> {
    ctx: Ctx<'a>,
    control: &'a tm::Control,
}

impl Serialize for ControlEntry<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let c = self.ctx;
        let control = self.control;
        let link = &c.model.links()[control.link];
        let mut m = s.serialize_map(None)?;
        m.serialize_entry("id", &control.id)?;
        m.serialize_entry("link", &link.id)?;
        match control.action {
            Action::Open => m.serialize_entry("status", "open")?,
            Action::Close => m.serialize_entry("status", "closed")?,
            Action::Automatic => m.serialize_entry("status", "automatic")?,
            Action::Speed(speed) => m.serialize_entry("speed", &speed)?,
            Action::Setting(value) => {
                m.serialize_entry("setting", &c.setting(link.as_valve().map(|v| v.valve), value))?
            }
        }
        m.serialize_entry("when", &ConditionEntry { ctx: c, condition: &control.when })?;
        m.serialize_entry("priority", &control.priority)?;
        m.end()
    }
}

struct ConditionEntry<'a> {
    ctx: Ctx<'a>,
    condition: &'a Condition,
}

impl Serialize for ConditionEntry<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let c = self.ctx;
        let mut m = s.serialize_map(None)?;
        match self.condition {
            Condition::LevelAbove { tank, level } => {
                m.serialize_entry("tank", c.node(*tank))?;
                m.serialize_entry("level_above", &c.len(*level))?;
            }
            Condition::LevelBelow { tank, level } => {
                m.serialize_entry("tank", c.node(*tank))?;
                m.serialize_entry("level_below", &c.len(*level))?;
            }
            Condition::PressureAbove { node, pressure } => {
                m.serialize_entry("node", c.node(*node))?;
                m.serialize_entry("pressure_above", &c.pressure(*pressure))?;
            }
            Condition::PressureBelow { node, pressure } => {
                m.serialize_entry("node", c.node(*node))?;
                m.serialize_entry("pressure_below", &c.pressure(*pressure))?;
            }
            Condition::Clock(t) => m.serialize_entry("clock", &tm::format_clock(*t))?,
            Condition::After(t) => m.serialize_entry("after", &tm::format_duration(*t))?,
            Condition::All(parts) => m.serialize_entry("all", &Conditions { ctx: c, parts })?,
            Condition::Any(parts) => m.serialize_entry("any", &Conditions { ctx: c, parts })?,
        }
        m.end()
    }
}

struct Conditions<'a> {
    ctx: Ctx<'a>,
    parts: &'a [Condition],
}

impl Serialize for Conditions<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_seq(self.parts.iter().map(|condition| ConditionEntry { ctx: self.ctx, condition }))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::format::read_str;
    use crate::model::{HydraulicOptions, Link, Node};
    use crate::units::UnitSystem;

    #[test]
    fn time_data_round_trips() {
        let text = r#"
            [simulation]
            duration = "2d"
            hydraulic_step = "30min"
            report_interval = "15min"
            start_clock = "06:30"
            [electricity]
            price_per_kwh = 0.2
            tariff_pattern = "night"
            currency = "EUR"
            [[patterns]]
            id = "homes"
            step = "1h"
            multipliers = [0.5, 1.5]
            [[patterns]]
            id = "night"
            step = "6h"
            multipliers = [0.5, 1, 1, 1]
            [[nodes]]
            id = "R"
            kind = "reservoir"
            head = 50
            head_pattern = "homes"
            [[nodes]]
            id = "J"
            elevation = 10
            demands = [{ base = 2.0, pattern = "homes" }, { base = 0.5 }]
            [[nodes]]
            id = "K"
            elevation = 10
            demand = 1.0
            pattern = "homes"
            [[nodes]]
            id = "T"
            kind = "tank"
            elevation = 30
            level = 2
            max_level = 5
            volume_curve = [[0, 0], [2, 100], [6, 500]]
            [[links]]
            id = "P"
            from = "R"
            to = "J"
            length = 100
            diameter = 150
            roughness = 120
            [[links]]
            id = "Q"
            from = "J"
            to = "K"
            length = 100
            diameter = 150
            roughness = 120
            [[links]]
            id = "U"
            kind = "pump"
            from = "K"
            to = "T"
            head_curve = [[0, 40], [10, 30]]
            speed_pattern = "night"
            [[controls]]
            id = "off"
            link = "U"
            status = "closed"
            when = { any = [{ tank = "T", level_above = 4.5 }, { all = [{ clock = "07:00" }, { node = "J", pressure_below = 20 }] }] }
            priority = 3
            [[controls]]
            id = "slow"
            link = "U"
            speed = 0.8
            when = { after = "90min" }
        "#;
        let model = read_str(text, Format::Toml, "t.toml").unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(model.nodes()[1].demand(), 2.5e-3);
        for format in [Format::Toml, Format::Json] {
            let out = to_string(&model, format);
            let back = read_str(&out, format, "out").unwrap_or_else(|e| panic!("{e}\n{out}"));
            assert_eq!(back.time, model.time, "{out}");
        }
    }

    /// A model that uses every key the reader accepts (each alternative in some element).
    const EVERY_KEY: &str = r#"
        title = "Every key"
        [units]
        length = "m"
        diameter = "mm"
        flow = "L/s"
        pressure = "m"
        roughness = "mm"
        [hydraulics]
        headloss = "hazen-williams"
        water_temperature = 15
        max_iterations = 120
        head_tolerance = 0.0001
        flow_tolerance = 0.000001
        fittings_method = "two-k"
        site_elevation = 220
        [criteria]
        after = "48h"
        max_age = "72 h"
        min_pressure = "20 m"
        [pressure_demand]
        full_pressure = 20
        zero_pressure = 1
        exponent = 0.5
        [background_leakage]
        rate = 0.05
        reference_pressure = 50
        exponent = 1.18
        [map]
        coordinates = "lonlat"
        [simulation]
        duration = "2d"
        hydraulic_step = "30min"
        report_interval = "1h"
        start_clock = "06:00"
        level_tolerance = 0.002
        transport_step = "5min"
        quality_tolerance = 0.002
        [electricity]
        price_per_kwh = 0.25
        tariff_pattern = "night"
        currency = "EUR"
        [[patterns]]
        id = "homes"
        step = "1h"
        multipliers = [0.5, 1.5]
        [[patterns]]
        id = "night"
        step = "6h"
        multipliers = [0.5, 1, 1, 1]
        [[quality]]
        id = "age"
        kind = "age"
        initial = 12
        [[quality]]
        id = "from-works"
        kind = "source"
        source = "Works"
        initial = 50
        [[quality]]
        id = "chlorine"
        kind = "substance"
        unit = "mg/L"
        bulk_rate = -0.5
        wall_rate = -0.125
        diffusivity = 1.25e-9
        initial = 0.25
        [[nodes]]
        id = "Works"
        kind = "reservoir"
        head = 80
        head_pattern = "homes"
        elevation = 70
        x = 7.0
        y = 46.0
        zone = "source"
        quality = { chlorine = 1.25 }
        quality_pattern = { chlorine = "homes" }
        initial_quality = { chlorine = 1.0 }
        booster = { chlorine = 0.5 }
        [[nodes]]
        id = "J1"
        elevation = 10
        demand = 2.5
        pattern = "homes"
        full_pressure = 18
        zero_pressure = 2
        exponent = 0.75
        outlet = { coefficient = 0.5, exponent = 0.5 }
        x = 7.001
        y = 46.0
        zone = "low"
        quality = { chlorine = 0.5 }
        quality_pattern = { chlorine = "night" }
        initial_quality = { age = 6, chlorine = 0.5 }
        booster = { chlorine = 0.75 }
        [[nodes]]
        id = "J2"
        elevation = 12
        demands = [{ base = 1.5, pattern = "homes" }, { base = 0.5 }]
        [[nodes]]
        id = "J3"
        elevation = 12
        demand = 1
        [[nodes]]
        id = "T1"
        kind = "tank"
        elevation = 40
        level = 3
        min_level = 0.5
        max_level = 6
        diameter = 12
        x = 7.002
        y = 46.0
        zone = "high"
        initial_quality = { chlorine = 0.75 }
        booster = { chlorine = 0.5 }
        mixing = "two-zone"
        mixing_fraction = 0.25
        [[nodes]]
        id = "T2"
        kind = "tank"
        elevation = 40
        level = 2
        volume_curve = [[0, 0], [2, 100], [6, 500]]
        mixing = "stacked"
        [[links]]
        id = "P1"
        kind = "pipe"
        from = "Works"
        to = "J1"
        length = 500
        diameter = 300
        roughness = 120
        minor_loss = 1.5
        fittings = [{ kind = "elbow-90", count = 2 }, { kind = "gate-valve", opening = 0.5 }, { kind = "bend", radius = 1.5, angle = 45 }]
        status = "open"
        check_valve = true
        leakage_rate = 0.25
        path = [[7.0005, 46.0001], [7.00075, 46.0001]]
        [[links]]
        id = "P2"
        from = "J1"
        to = "J2"
        length = 400
        diameter = 200
        roughness = 110
        [[links]]
        id = "P3"
        from = "J2"
        to = "J3"
        length = 400
        diameter = 200
        roughness = 110
        status = "closed"
        [[links]]
        id = "U1"
        kind = "pump"
        from = "J3"
        to = "T1"
        head_curve = [[0, 40], [10, 30], [20, 10]]
        efficiency_curve = [[5, 50], [10, 75], [20, 60]]
        speed = 1
        speed_pattern = "night"
        elevation = 11
        npsh_required_curve = [[0, 2], [20, 3.5]]
        status = "open"
        path = [[7.0025, 46.00005]]
        [[links]]
        id = "U2"
        kind = "pump"
        from = "J3"
        to = "T2"
        power = 5
        efficiency = 70
        status = "closed"
        [[links]]
        id = "V2"
        kind = "valve"
        valve = "throttle"
        from = "J2"
        to = "J3"
        diameter = 100
        setting = 2
        status = "open"
        [[links]]
        id = "V1"
        kind = "valve"
        valve = "pressure-reducing"
        from = "J1"
        to = "J3"
        diameter = 150
        setting = 30
        setting_pattern = "homes"
        minor_loss = 0.5
        fittings = [{ kind = "globe-valve" }]
        status = "automatic"
        path = [[7.0012, 46.0002]]
        [[controls]]
        id = "off"
        link = "U1"
        status = "closed"
        when = { any = [{ tank = "T1", level_above = 5.5 }, { all = [{ clock = "07:00" }, { node = "J1", pressure_below = 20 }] }] }
        priority = 3
        [[controls]]
        id = "on"
        link = "U1"
        status = "open"
        when = { any = [{ tank = "T1", level_below = 1.5 }, { node = "J2", pressure_above = 60 }] }
        [[controls]]
        id = "slow"
        link = "U1"
        speed = 0.75
        when = { after = "90min" }
        [[controls]]
        id = "lower"
        link = "V1"
        setting = 25
        when = { after = "3h" }
    "#;

    /// The JSON text serde_json writes of the whole file through [`ElementPerLine`]: the reference
    /// the hand-written text must equal byte for byte.
    fn serde_json_text(model: &Model) -> String {
        let mut out = Vec::new();
        write_element_per_line(&mut out, &ModelFile(Ctx::new(model), Part::Whole)).unwrap_or_else(|e| panic!("{e}"));
        String::from_utf8(out).unwrap_or_else(|e| panic!("{e}"))
    }

    fn assert_json_as_serde_writes_it(model: &Model, what: &str) {
        let ours = to_string(model, Format::Json);
        let reference = serde_json_text(model);
        if ours != reference {
            let at = ours
                .bytes()
                .zip(reference.bytes())
                .position(|(a, b)| a != b)
                .unwrap_or(ours.len().min(reference.len()));
            let from = at.saturating_sub(80);
            panic!(
                "{what}: the text differs from serde_json's at byte {at}:\n ours: {:?}\n serde: {:?}",
                ours.get(from..(at + 80).min(ours.len())),
                reference.get(from..(at + 80).min(reference.len()))
            );
        }
    }

    /// The model file written by hand is serde_json's text byte for byte: on a model with every
    /// key (two variants), the time-data model, every demo and test model of the repository, a
    /// generated network large enough for the parallel chunks, strings that need escapes, and
    /// the smallest models (no nodes, no title, no controls).
    #[test]
    fn json_written_by_hand_is_serde_json_text_byte_for_byte() {
        let viscosity = EVERY_KEY.replace("water_temperature = 15", "kinematic_viscosity = 1.25e-6");
        for (what, text) in [("every key", EVERY_KEY), ("every key, viscosity", viscosity.as_str())] {
            let model = read_str(text, Format::Toml, "every.toml").unwrap_or_else(|e| panic!("{e}"));
            assert!(!model.time.controls.is_empty() && model.title.is_some());
            assert_json_as_serde_writes_it(&model, what);
        }
        let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
        let mut files = 0;
        for dir in ["examples", "tests/data"] {
            for entry in std::fs::read_dir(root.join(dir)).unwrap_or_else(|e| panic!("{dir}: {e}")) {
                let path = entry.unwrap_or_else(|e| panic!("{e}")).path();
                let name = path.display().to_string();
                if path.extension().is_some_and(|e| e == "toml") && !name.ends_with("FIELDS.toml") {
                    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{name}: {e}"));
                    let model = read_str(&text, Format::Toml, &name).unwrap_or_else(|e| panic!("{e}"));
                    assert_json_as_serde_writes_it(&model, &name);
                    files += 1;
                }
            }
        }
        assert!(files >= 6, "{files} demo models");
        let mut big = crate::generate::generate(&crate::generate::NetworkSpec::new(5_000, 11)).unwrap();
        assert!(big.nodes().len() > 4 * 1024, "more than one batch of chunks");
        assert_json_as_serde_writes_it(&big, "generated");
        // Strings that need escapes, and the smallest models.
        let mut escapes = Model::new(UnitSystem::default(), HydraulicOptions::default());
        escapes.title = Some("tab\there \"quoted\" back\\slash é".into());
        escapes.add_node(Node::reservoir("R \"one\"", 50.0)).unwrap();
        let mut j = Node::junction("J\\2 é 中", 10.0, 1e-3);
        j.zone = Some("north\nline \u{1}".into());
        escapes.add_node(j).unwrap();
        escapes
            .add_link(Link {
                id: "P/\"1\"".into(),
                from: 0,
                to: 1,
                status: LinkStatus::Closed,
                kind: LinkKind::Pipe(crate::model::Pipe {
                    length: 100.0,
                    diameter: 0.1,
                    roughness: 120.0,
                    minor_loss: 0.0,
                    check_valve: true,
                }),
            })
            .unwrap();
        assert_json_as_serde_writes_it(&escapes, "escapes");
        escapes.title = None;
        assert_json_as_serde_writes_it(&escapes, "no title");
        big.time.controls.clear();
        assert_json_as_serde_writes_it(&big, "no controls");
        assert_json_as_serde_writes_it(&Model::default(), "empty");
    }

    /// The keys written, as `(place, kind, key)` (see `schema::accepted_keys`).
    fn written_keys(v: &serde_json::Value) -> std::collections::BTreeSet<(String, String, String)> {
        use serde_json::Value;
        let mut out = std::collections::BTreeSet::new();
        let mut add = |place: &str, kind: &str, obj: &Value| {
            for k in obj.as_object().into_iter().flat_map(|o| o.keys()) {
                out.insert((place.to_owned(), kind.to_owned(), k.clone()));
            }
        };
        add("", "", v);
        for section in
            ["units", "hydraulics", "pressure_demand", "background_leakage", "map", "simulation", "electricity"]
        {
            add(section, "", &v[section]);
        }
        let items = |key: &str| v[key].as_array().cloned().unwrap_or_default();
        let kind = |e: &Value, default: &str| e["kind"].as_str().unwrap_or(default).to_owned();
        for p in items("patterns") {
            add("patterns", "", &p);
        }
        for q in items("quality") {
            add("quality", &kind(&q, "substance"), &q);
        }
        for n in items("nodes") {
            add("nodes", &kind(&n, "junction"), &n);
            add("nodes.outlet", "", &n["outlet"]);
            for d in n["demands"].as_array().into_iter().flatten() {
                add("nodes.demands", "", d);
            }
        }
        for l in items("links") {
            add("links", &kind(&l, "pipe"), &l);
            for f in l["fittings"].as_array().into_iter().flatten() {
                add("links.fittings", "", f);
            }
        }
        let mut conditions = Vec::new();
        for c in items("controls") {
            add("controls", "", &c);
            conditions.push(c["when"].clone());
        }
        while let Some(w) = conditions.pop() {
            add("controls.when", "", &w);
            for key in ["all", "any"] {
                conditions.extend(w[key].as_array().into_iter().flatten().cloned());
            }
        }
        out
    }

    /// Every key the reader accepts is written back, and reading what was written gives the
    /// same model (both formats). The class: a key the writer drops or changes.
    #[test]
    fn every_key_the_reader_accepts_is_written_back() {
        let viscosity = EVERY_KEY.replace("water_temperature = 15", "kinematic_viscosity = 1.25e-6");
        let mut written = std::collections::BTreeSet::new();
        for text in [EVERY_KEY, viscosity.as_str()] {
            let model = read_str(text, Format::Toml, "every.toml").unwrap_or_else(|e| panic!("{e}"));
            for format in [Format::Json, Format::Toml] {
                let out = to_string(&model, format);
                let back = read_str(&out, format, "out").unwrap_or_else(|e| panic!("{e}\n{out}"));
                assert_eq!(back, model, "{out}");
                assert_eq!(to_string(&back, format), out);
            }
            let json: serde_json::Value = serde_json::from_str(&to_string(&model, Format::Json)).unwrap();
            written.extend(written_keys(&json));
            // The one-pass readers take what the writer writes.
            let out = to_string(&model, Format::Json);
            assert_eq!(crate::format::read::read_json_stream(out.as_bytes()).as_ref(), Some(&model));
            assert_eq!(crate::format::read::read_json_lines(out.as_bytes()).as_ref(), Some(&model));
        }
        // Keys the reader takes under a second name, written under the first.
        let alias = |place: &str, key: &'static str| -> &'static str {
            match (place, key) {
                ("", "leakage") => "background_leakage",
                _ => key,
            }
        };
        let mut missing = Vec::new();
        for (place, kind, keys) in crate::format::schema::accepted_keys() {
            for key in keys {
                let key = alias(place, key);
                if !written.contains(&(place.to_owned(), kind.to_owned(), key.to_owned())) {
                    missing.push(format!("{place} {kind} {key}"));
                }
            }
        }
        assert!(missing.is_empty(), "accepted but never written: {missing:?}");
    }

    #[test]
    fn json_is_one_element_a_line_in_reading_order() {
        let text = r#"
            title = "Lane"
            [[controls]]
            id = "off"
            link = "U"
            status = "closed"
            when = { tank = "T", level_above = 4.5 }
            [[links]]
            id = "P"
            from = "R"
            to = "J"
            length = 100
            diameter = 150
            roughness = 120
            [[links]]
            id = "U"
            kind = "pump"
            from = "J"
            to = "T"
            head_curve = [[0, 40], [10, 30]]
            [[nodes]]
            id = "R"
            kind = "reservoir"
            head = 50
            [[nodes]]
            id = "J"
            elevation = 10
            demand = 1.0
            pattern = "homes"
            [[nodes]]
            id = "T"
            kind = "tank"
            elevation = 30
            level = 2
            [[patterns]]
            id = "homes"
            step = "1h"
            multipliers = [0.5, 1.5]
            [simulation]
            duration = "1d"
            [hydraulics]
            max_iterations = 50
            [units]
            flow = "L/s"
        "#;
        let model = read_str(text, Format::Toml, "t.toml").unwrap_or_else(|e| panic!("{e}"));
        let out = to_string(&model, Format::Json);
        let top: Vec<&str> =
            out.lines().filter_map(|l| l.strip_prefix("  \"").and_then(|rest| rest.split('"').next())).collect();
        assert_eq!(top, ["title", "units", "hydraulics", "simulation", "patterns", "nodes", "links", "controls"]);
        let lines: Vec<&str> = out.lines().collect();
        for expected in [
            r#"    {"id": "homes", "step": "1h", "multipliers": [0.5, 1.5]}"#,
            r#"    {"id": "R", "kind": "reservoir", "head": 50.0, "elevation": 50.0},"#,
            r#"    {"id": "J", "kind": "junction", "elevation": 10.0, "demand": 1.0, "pattern": "homes"},"#,
            r#"    {"id": "T", "kind": "tank", "elevation": 30.0, "level": 2.0, "min_level": 0.0}"#,
            &format!(
                r#"    {{"id": "U", "kind": "pump", "from": "J", "to": "T", "head_curve": [[0.0, 40.0], [10.0, 30.0]], "efficiency": {:?}, "speed": 1.0}}"#,
                100.0 * Efficiency::DEFAULT
            ),
            r#"    {"id": "off", "link": "U", "status": "closed", "when": {"tank": "T", "level_above": 4.5}, "priority": 0}"#,
        ] {
            assert!(lines.contains(&expected), "{expected}\nnot in\n{out}");
        }
        assert!(lines.contains(&r#"  "units": {"#) && lines.contains(&r#"    "flow": "L/s","#), "{out}");
        // The layout is plain JSON to any other reader.
        let parsed: serde_json::Value = serde_json::from_str(&out).unwrap_or_else(|e| panic!("{e}\n{out}"));
        assert_eq!(parsed["links"][0]["roughness"], 120.0);
        let back = read_str(&out, Format::Json, "out.json").unwrap_or_else(|e| panic!("{e}\n{out}"));
        assert_eq!(back.time, model.time);
        let toml_text = to_string(&model, Format::Toml);
        let back = read_str(&toml_text, Format::Toml, "out.toml").unwrap_or_else(|e| panic!("{e}\n{toml_text}"));
        assert_eq!(back.time, model.time);
    }

    #[test]
    fn awkward_ids_are_escaped() {
        // Ids may hold any character but control characters.
        let ids = ["quote \" in", "back\\slash", "\u{e9}t\u{e9} \u{2028} \u{1f6b0}", "}, {\"id\": \"x", "a\\u0022b"];
        let mut text = String::from("[[nodes]]\nid = \"R\"\nkind = \"reservoir\"\nhead = 50\n");
        for (i, id) in ids.iter().enumerate() {
            let quoted = serde_json::to_string(id).unwrap_or_default();
            text += &format!("[[nodes]]\nid = {quoted}\nelevation = 1\n[[links]]\nid = {quoted}\nfrom = \"R\"\n");
            text += &format!("to = {quoted}\nlength = {}\ndiameter = 100\nroughness = 130\n", 10 + i);
        }
        let model = read_str(&text, Format::Toml, "t.toml").unwrap_or_else(|e| panic!("{e}\n{text}"));
        for format in [Format::Json, Format::Toml] {
            let out = to_string(&model, format);
            let back = read_str(&out, format, "out").unwrap_or_else(|e| panic!("{e}\n{out}"));
            let names = |m: &Model| {
                m.nodes().iter().map(|n| n.id.clone()).chain(m.links().iter().map(|l| l.id.clone())).collect::<Vec<_>>()
            };
            assert_eq!(names(&back), names(&model), "{out}");
        }
    }

    #[test]
    fn element_per_line_layout_of_empty_and_nested_values() {
        let mut out = Vec::new();
        let value = serde_json::json!({"a": [], "b": {}, "c": [[1, 2], {"d": [3, {"e": null}]}], "f": {"g": true}});
        write_element_per_line(&mut out, &value).unwrap_or_else(|e| panic!("{e}"));
        let text = String::from_utf8(out).unwrap_or_default();
        let expected = "{\n  \"a\": [],\n  \"b\": {},\n  \"c\": [\n    [1, 2],\n    {\"d\": [3, {\"e\": null}]}\n  ],\n  \"f\": {\n    \"g\": true\n  }\n}\n";
        assert_eq!(text, expected);
    }

    #[test]
    fn map_keys_round_trip_in_both_formats() {
        let text = r#"
            [map]
            coordinates = "lonlat"
            [[nodes]]
            id = "R"
            kind = "reservoir"
            head = 60
            x = 7.4411
            y = 46.9481
            [[nodes]]
            id = "J"
            elevation = 10
            x = 7.4452
            y = 46.9503
            [[links]]
            id = "P"
            from = "R"
            to = "J"
            length = 400
            diameter = 150
            roughness = 120
            path = [[7.4420, 46.9490], [7.4437, 46.9495]]
            [[links]]
            id = "Q"
            from = "R"
            to = "J"
            length = 500
            diameter = 100
            roughness = 120
        "#;
        let model = read_str(text, Format::Toml, "t.toml").unwrap();
        assert_eq!(model.map.coordinates, crate::model::MapCoordinates::LonLat);
        assert_eq!(model.map.paths.get(&0).map(Vec::len), Some(2));
        assert!(!model.map.paths.contains_key(&1));
        let drawn = model.map.alignment(&model, 0).unwrap();
        assert_eq!(drawn, vec![(7.4411, 46.9481), (7.4420, 46.9490), (7.4437, 46.9495), (7.4452, 46.9503)]);
        for format in [Format::Toml, Format::Json] {
            let out = to_string(&model, format);
            let back = read_str(&out, format, "out").unwrap_or_else(|e| panic!("{e}\n{out}"));
            assert_eq!(back, model, "{out}");
        }
        // A path that is not a list of pairs names the link and the key.
        let bad = text.replace("path = [[7.4420, 46.9490], [7.4437, 46.9495]]", "path = [[7.4420]]");
        let e = read_str(&bad, Format::Toml, "t.toml").unwrap_err();
        assert_eq!(
            (e.element.clone(), e.key.as_deref()),
            (Some(crate::Element::Link("P".into())), Some("path")),
            "{e}"
        );
        let bad = text.replace("\"lonlat\"", "\"latlon\"");
        let e = read_str(&bad, Format::Toml, "t.toml").unwrap_err();
        assert_eq!(e.key.as_deref(), Some("coordinates"), "{e}");
    }

    #[test]
    fn round_trip_both_formats() {
        let text = r#"
            title = "t"
            [units]
            flow = "gpm"
            length = "ft"
            diameter = "in"
            [hydraulics]
            headloss = "darcy-weisbach"
            [[nodes]]
            id = "R"
            kind = "reservoir"
            head = 300
            [[nodes]]
            id = "J"
            elevation = 100
            demand = 50
            x = 1.0
            y = 2.0
            [[nodes]]
            id = "T"
            kind = "tank"
            elevation = 200
            level = 10
            max_level = 20
            diameter = 40
            [[links]]
            id = "P"
            from = "R"
            to = "J"
            length = 1000
            diameter = 8
            roughness = 0.005
            check_valve = true
            [[links]]
            id = "Q"
            from = "J"
            to = "T"
            length = 1000
            diameter = 8
            roughness = 0.005
            status = "closed"
        "#;
        let model = read_str(text, Format::Toml, "t.toml").unwrap();
        for format in [Format::Toml, Format::Json] {
            let out = to_string(&model, format);
            let back = read_str(&out, format, "out").unwrap_or_else(|e| panic!("{e}\n{out}"));
            assert_eq!(back.nodes().len(), model.nodes().len());
            for (a, b) in back.links().iter().zip(model.links()) {
                assert_eq!(a.status, b.status);
                let (pa, pb) = (a.as_pipe().unwrap(), b.as_pipe().unwrap());
                assert!((pa.diameter - pb.diameter).abs() < 1e-12);
                assert!((pa.roughness - pb.roughness).abs() < 1e-15);
                assert_eq!(pa.check_valve, pb.check_valve);
            }
        }
    }
}
