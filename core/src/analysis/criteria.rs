//! The service criteria a model is checked against, read from a `[criteria]` table.
//!
//! The table comes from the model file or from a separate criteria file; [`Criteria::apply`]
//! reads one table on top of what is already set, so that a repository-wide file can override a
//! model's own table key by key. Every limit is a number in the model's units (`min_pressure =
//! 20`) or a string with its unit (`"20 m"`, `"30 psi"`, `"2.5 m/s"`, `"3 m/km"`, `"120 L/s"`,
//! `"10 %"`); limits are converted into SI here and nowhere else.
//!
//! ```toml
//! [criteria]
//! must_converge = true            # a scenario the solver cannot finish fails (default true)
//! all_demands_supplied = true     # a junction with a demand cut off from every source fails (default)
//! min_pressure = "20 m"           # junctions
//! max_pressure = "80 m"
//! max_velocity = "2.5 m/s"        # pipes and valves carrying flow
//! max_headloss = "3 m/km"         # head loss per length of pipe, friction and minor losses
//! min_supply_margin = "10 %"      # headroom below each source's capacity (or a flow, "5 L/s")
//! min_tank_reserve = "0.5 m"      # each tank's level above its min_level
//! min_delivered = "95 %"          # share of its demand each junction receives, and of the
//!                                 # total (meaningful with [pressure_demand])
//! fire_residual = "20 psi"        # residual pressure of min_fire_flow (default 20 psi, common
//!                                 # practice in North America)
//! fail_on_warnings = ["parallel-pipes"]   # model warnings that count as failures (or true: all)
//!
//! [criteria.source_capacity]      # what each source can deliver; supply = net outflow
//! "Works" = "120 L/s"
//!
//! # Water quality over a simulation (`ringmain simulate --criteria`, and `check` when the model
//! # has [simulation]): junctions over the reported times after a spin-up
//! max_age = "72 h"                # every age constituent
//! min_residual = { chlorine = "0.2 mg/L" }   # per substance, in its unit
//! after = "48h"                   # spin-up not checked
//!
//! [[criteria.groups]]             # limits for some nodes, replacing the global ones there
//! name = "high zone"
//! zone = "high"                   # nodes with this zone tag (a string or a list)
//! ids = "HZ-*"                    # and/or ids matching a pattern (* any text, ? one character)
//! min_pressure = "15 m"
//! min_fire_flow = "25 L/s"        # each junction of the group gives at least this fire flow
//!                                 # at the residual pressure (see `ringmain fire-flow`)
//! ```

use super::glob_match;
use super::DiagnosticKind;
use crate::error::{printable, Element, ModelError};
use crate::format::tree::{Key, Value};
use crate::model::{Model, NodeKind};
use crate::units::did_you_mean;
use crate::units::{Converter, FlowUnit, LengthUnit, PressureUnit, UnitSystem};

/// The keys of a `[criteria]` table.
pub const CRITERIA_KEYS: &[&str] = &[
    "must_converge",
    "all_demands_supplied",
    "min_pressure",
    "max_pressure",
    "max_velocity",
    "max_headloss",
    "min_supply_margin",
    "source_capacity",
    "min_tank_reserve",
    "min_delivered",
    "fire_residual",
    "fail_on_warnings",
    "groups",
    "max_age",
    "min_residual",
    "after",
];

/// The keys of one `[[criteria.groups]]` entry.
pub const GROUP_KEYS: &[&str] = &["name", "zone", "ids", "min_pressure", "max_pressure", "min_fire_flow"];

/// The residual pressure of `min_fire_flow` when the criteria do not give one: 20 psi, common
/// practice in North America (as pressure head of water at 1000 kg/m³ this is 14.06 m; here it is
/// converted with the model's water like every pressure).
pub const FIRE_RESIDUAL_PSI: f64 = 20.0;

/// How much headroom a source must keep below its capacity.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum SupplyMargin {
    /// A flow, m³/s: supply ≤ capacity − margin.
    Flow(f64),
    /// A fraction of the capacity: supply ≤ (1 − fraction) × capacity.
    Fraction(f64),
}

impl SupplyMargin {
    /// The largest supply allowed at a source of `capacity` (m³/s).
    pub fn allowed_supply(self, capacity: f64) -> f64 {
        match self {
            SupplyMargin::Flow(q) => capacity - q,
            SupplyMargin::Fraction(f) => capacity * (1.0 - f),
        }
    }
}

/// Pressure limits for a group of nodes.
#[derive(Clone, Debug, PartialEq)]
pub struct Group {
    /// The group's name, for reports (its 1-based position when not given).
    pub name: String,
    /// Zone tags; a node must carry one of them (when any are given).
    pub zones: Vec<String>,
    /// Id patterns; a node's id must match one of them (when any are given).
    pub ids: Vec<String>,
    /// Lowest pressure head allowed, m.
    pub min_pressure: Option<f64>,
    /// Highest pressure head allowed, m.
    pub max_pressure: Option<f64>,
    /// Smallest available fire flow at each of its junctions, m³/s.
    pub min_fire_flow: Option<f64>,
}

impl Group {
    /// Whether the group selects this node: both conditions that are given must hold.
    pub fn selects(&self, id: &str, zone: Option<&str>) -> bool {
        let zone_ok = self.zones.is_empty() || zone.is_some_and(|z| self.zones.iter().any(|g| g == z));
        let id_ok = self.ids.is_empty() || self.ids.iter().any(|p| glob_match(p, id));
        zone_ok && id_ok
    }
}

/// Service criteria, SI inside (pressures as pressure head in m of the model's water).
#[derive(Clone, Debug, PartialEq)]
pub struct Criteria {
    /// A scenario the solver cannot finish is a failure (otherwise it is only reported).
    pub must_converge: bool,
    /// A junction with a positive demand that no source reaches is a failure.
    pub all_demands_supplied: bool,
    /// Lowest pressure head at junctions, m.
    pub min_pressure: Option<f64>,
    /// Highest pressure head at junctions, m.
    pub max_pressure: Option<f64>,
    /// Highest mean velocity in pipes and valves, m/s.
    pub max_velocity: Option<f64>,
    /// Highest head loss per length of pipe, m/m.
    pub max_headloss: Option<f64>,
    /// Headroom every source with a capacity keeps.
    pub min_supply_margin: Option<SupplyMargin>,
    /// Capacity of sources, by node index, m³/s.
    pub source_capacity: Vec<(usize, f64)>,
    /// Lowest tank level above its `min_level`, m.
    pub min_tank_reserve: Option<f64>,
    /// Smallest share of its demand every junction receives, and of the total, as a fraction.
    pub min_delivered: Option<f64>,
    /// Residual pressure head of `min_fire_flow`, m (`None`: 20 psi).
    pub fire_residual: Option<f64>,
    /// Model warnings that count as failures.
    pub fail_on_warnings: Vec<DiagnosticKind>,
    /// Limits for groups of nodes.
    pub groups: Vec<Group>,
    /// Highest water age at junctions over a simulation, s.
    pub max_age: Option<f64>,
    /// Lowest value of a constituent at junctions over a simulation: constituent index, value.
    pub min_residual: Vec<(usize, f64)>,
    /// Quality criteria skip the reported times before this elapsed time, s (spin-up).
    pub after: f64,
}

impl Default for Criteria {
    /// Must converge and supply every demand; no limits.
    fn default() -> Self {
        Criteria {
            must_converge: true,
            all_demands_supplied: true,
            min_pressure: None,
            max_pressure: None,
            max_velocity: None,
            max_headloss: None,
            min_supply_margin: None,
            source_capacity: Vec::new(),
            min_tank_reserve: None,
            min_delivered: None,
            fire_residual: None,
            fail_on_warnings: Vec::new(),
            groups: Vec::new(),
            max_age: None,
            min_residual: Vec::new(),
            after: 0.0,
        }
    }
}

/// What a limit measures, for parsing its unit and for writing it back: the quantities of
/// [`crate::units`], converted by its [`Converter`].
pub use crate::units::Quantity;

/// The accepted unit names of a quantity.
fn unit_names(q: Quantity) -> Vec<&'static str> {
    match q {
        Quantity::Pressure => PressureUnit::ALL.iter().map(|u| u.label()).collect(),
        Quantity::Velocity => vec!["m/s", "ft/s"],
        Quantity::Gradient => vec!["m/km", "ft/kft", "m/m", "ft/ft"],
        Quantity::Flow => FlowUnit::ALL.iter().map(|u| u.label()).collect(),
        Quantity::Length => LengthUnit::ALL.iter().map(|u| u.label()).collect(),
        Quantity::Age => vec!["h", "min", "d", "s"],
        Quantity::Diameter
        | Quantity::PipeRoughness
        | Quantity::Power
        | Quantity::Volume
        | Quantity::LossCoefficient
        | Quantity::Number => Vec::new(),
    }
}

/// Converts `value` given in unit `unit` of quantity `q` into SI.
fn to_si(q: Quantity, unit: &str, value: f64, density: f64) -> Option<f64> {
    Some(match q {
        Quantity::Pressure => PressureUnit::parse(unit)?.to_head(value, density),
        Quantity::Velocity => LengthUnit::parse(unit.strip_suffix("/s")?)?.to_si(value),
        Quantity::Length => LengthUnit::parse(unit)?.to_si(value),
        Quantity::Gradient => match unit {
            "m/km" | "ft/kft" => value / 1000.0,
            "m/m" | "ft/ft" => value,
            _ => return None,
        },
        Quantity::Flow => FlowUnit::parse(unit)?.to_si(value),
        Quantity::Age => match unit {
            "h" => value * 3600.0,
            "min" => value * 60.0,
            "d" => value * 86_400.0,
            "s" => value,
            _ => return None,
        },
        Quantity::Diameter
        | Quantity::PipeRoughness
        | Quantity::Power
        | Quantity::Volume
        | Quantity::LossCoefficient
        | Quantity::Number => return None,
    })
}

/// The unit a bare number is read in: the model's.
fn default_unit(q: Quantity, units: &UnitSystem) -> &'static str {
    // Labels do not depend on the density or the friction formula.
    Converter::new(*units, f64::NAN, false).label(q)
}

/// Splits `"20 m"` into the number and the unit (the unit may follow without a space).
fn split_number(text: &str) -> Option<(f64, &str)> {
    let text = text.trim();
    let end = text
        .char_indices()
        .find(|&(i, c)| !(c.is_ascii_digit() || c == '.' || c == '+' || c == '-' || ((c == 'e' || c == 'E') && i > 0)))
        .map_or(text.len(), |(i, _)| i);
    // "2e" followed by a unit letter: give the 'e' back to the unit unless digits follow it.
    let mut end = end;
    while end > 0 && text[..end].ends_with(['e', 'E', '+', '-']) && text[..end].parse::<f64>().is_err() {
        end -= 1;
    }
    let number: f64 = text[..end].parse().ok()?;
    Some((number, text[end..].trim_start()))
}

/// The table being read, with the path of keys for messages.
struct Reader<'a> {
    prefix: String,
    units: &'a UnitSystem,
    density: f64,
}

impl Reader<'_> {
    fn error(&self, key: &str, message: impl Into<String>) -> ModelError {
        ModelError::at(Some(Element::Table("criteria".into())), Some(&format!("{}{key}", self.prefix)), message)
    }

    fn limit(&self, key: &str, value: &Value, q: Quantity, non_negative: bool) -> Result<f64, ModelError> {
        let names = unit_names(q);
        let (number, unit) = match value {
            Value::Int(i) => (*i as f64, default_unit(q, self.units)),
            Value::Float(f) => (*f, default_unit(q, self.units)),
            Value::Str(s) => {
                let Some((number, unit)) = split_number(s) else {
                    return Err(self.error(
                        key,
                        format!(
                            "\"{}\" is not a number with a unit; write for example \"{}\"",
                            printable(s),
                            example(q)
                        ),
                    ));
                };
                (number, if unit.is_empty() { default_unit(q, self.units) } else { unit })
            }
            other => {
                return Err(self.error(key, format!("must be a number or a string with a unit, found {}", other.kind())))
            }
        };
        if !number.is_finite() {
            return Err(self.error(key, format!("must be a finite number, found {number}")));
        }
        let Some(si) = to_si(q, unit, number, self.density) else {
            let hint = did_you_mean(unit, names.iter().copied(), '"');
            let choices = names.iter().map(|n| format!("\"{n}\"")).collect::<Vec<_>>().join(", ");
            return Err(
                self.error(key, format!("unknown unit \"{}\"{hint}; expected one of {choices}", printable(unit)))
            );
        };
        if non_negative && si < 0.0 {
            return Err(self.error(key, format!("must not be negative, found {number}")));
        }
        Ok(si)
    }

    fn boolean(&self, key: &str, value: &Value) -> Result<bool, ModelError> {
        match value {
            Value::Bool(b) => Ok(*b),
            other => Err(self.error(key, format!("must be true or false, found {}", other.kind()))),
        }
    }

    fn strings(&self, key: &str, value: &Value) -> Result<Vec<String>, ModelError> {
        let list = match value {
            Value::Str(s) => vec![s.clone()],
            Value::Array(items) => items
                .iter()
                .map(|v| match v {
                    Value::Str(s) => Ok(s.clone()),
                    other => Err(self.error(key, format!("must be a list of strings, found {} in it", other.kind()))),
                })
                .collect::<Result<Vec<_>, _>>()?,
            other => {
                return Err(self.error(key, format!("must be a string or a list of strings, found {}", other.kind())))
            }
        };
        if let Some(bad) = list.iter().find(|s| s.is_empty() || s.chars().any(char::is_control)) {
            return Err(self.error(key, format!("\"{}\" is empty or contains control characters", printable(bad))));
        }
        Ok(list)
    }
}

fn example(q: Quantity) -> &'static str {
    match q {
        Quantity::Pressure => "20 m",
        Quantity::Velocity => "2.5 m/s",
        Quantity::Gradient => "3 m/km",
        Quantity::Flow => "120 L/s",
        Quantity::Length => "0.5 m",
        Quantity::Age => "72 h",
        Quantity::Diameter
        | Quantity::PipeRoughness
        | Quantity::Power
        | Quantity::Volume
        | Quantity::LossCoefficient
        | Quantity::Number => "",
    }
}

fn unknown_key(reader: &Reader<'_>, key: &str, known: &[&str]) -> ModelError {
    let hint = did_you_mean(key, known.iter().copied(), '\'');
    reader.error(key, format!("is not a known criterion{hint}; known keys here: {}", known.join(", ")))
}

fn table<'v>(reader: &Reader<'_>, key: &str, value: &'v Value) -> Result<&'v [(Key, Value)], ModelError> {
    match value {
        Value::Table(entries) => Ok(entries),
        other => Err(reader.error(key, format!("must be a table, found {}", other.kind()))),
    }
}

impl Criteria {
    /// Reads a `[criteria]` table on top of `self`: each key given replaces the same key already
    /// set (whole tables and lists included). Errors name the table and the key (for example
    /// `[criteria]: key 'groups[2].min_pressure'`); the caller adds the file.
    pub fn apply(&mut self, value: &Value, model: &Model) -> Result<(), ModelError> {
        let reader =
            Reader { prefix: String::new(), units: &model.units, density: model.options.water_properties().density };
        let entries = match value {
            Value::Table(entries) => entries,
            other => {
                return Err(ModelError::at(
                    Some(Element::Table("criteria".into())),
                    None,
                    format!("must be a table, found {}", other.kind()),
                ))
            }
        };
        let mut next = self.clone();
        for (key, v) in entries {
            let r = &reader;
            match key.as_ref() {
                "must_converge" => next.must_converge = r.boolean(key, v)?,
                "all_demands_supplied" => next.all_demands_supplied = r.boolean(key, v)?,
                "min_pressure" => next.min_pressure = Some(r.limit(key, v, Quantity::Pressure, false)?),
                "max_pressure" => next.max_pressure = Some(r.limit(key, v, Quantity::Pressure, false)?),
                "max_velocity" => next.max_velocity = Some(r.limit(key, v, Quantity::Velocity, true)?),
                "max_headloss" => next.max_headloss = Some(r.limit(key, v, Quantity::Gradient, true)?),
                "min_tank_reserve" => next.min_tank_reserve = Some(r.limit(key, v, Quantity::Length, true)?),
                "min_supply_margin" => next.min_supply_margin = Some(read_margin(r, key, v)?),
                "min_delivered" => next.min_delivered = Some(read_share(r, key, v)?),
                "fire_residual" => next.fire_residual = Some(r.limit(key, v, Quantity::Pressure, false)?),
                "source_capacity" => next.source_capacity = read_capacity(r, key, v, model)?,
                "fail_on_warnings" => next.fail_on_warnings = read_fail_on(r, key, v)?,
                "groups" => next.groups = read_groups(r, key, v)?,
                "max_age" => next.max_age = Some(r.limit(key, v, Quantity::Age, true)?),
                "min_residual" => next.min_residual = read_residuals(r, key, v, model)?,
                "after" => {
                    next.after = match v {
                        Value::Str(s) => crate::model::time::parse_duration(s).map_err(|m| r.error(key, m))?,
                        other => r.limit(key, other, Quantity::Age, true)?,
                    }
                }
                _ => return Err(unknown_key(r, key, CRITERIA_KEYS)),
            }
        }
        if let (Some(lo), Some(hi)) = (next.min_pressure, next.max_pressure) {
            if lo > hi {
                let key =
                    if entries.iter().any(|(k, _)| k == "max_pressure") { "max_pressure" } else { "min_pressure" };
                return Err(reader.error(key, "min_pressure is above max_pressure"));
            }
        }
        *self = next;
        Ok(())
    }

    /// Reads one table onto the defaults.
    pub fn from_value(value: &Value, model: &Model) -> Result<Criteria, ModelError> {
        let mut c = Criteria::default();
        c.apply(value, model)?;
        Ok(c)
    }

    /// Whether any limit on results is set (beyond converging and supplying every demand).
    pub fn has_limits(&self) -> bool {
        self.min_pressure.is_some()
            || self.max_pressure.is_some()
            || self.max_velocity.is_some()
            || self.max_headloss.is_some()
            || self.min_supply_margin.is_some()
            || !self.source_capacity.is_empty()
            || self.min_tank_reserve.is_some()
            || self.min_delivered.is_some()
            || !self.groups.is_empty()
            || self.has_quality_limits()
    }

    /// Whether a water-quality limit is set (these need a simulation).
    pub fn has_quality_limits(&self) -> bool {
        self.max_age.is_some() || !self.min_residual.is_empty()
    }
}

/// Reads `min_residual = { id = "0.2 mg/L", ... }`: each constituent's lowest value, in its unit.
fn read_residuals(r: &Reader<'_>, key: &str, v: &Value, model: &Model) -> Result<Vec<(usize, f64)>, ModelError> {
    use crate::quality::ConstituentKind;
    let entries = table(r, key, v)?;
    let q = &model.time.quality;
    let mut out = Vec::new();
    for (id, value) in entries {
        let sub = format!("{key}.{}", id.as_ref());
        let Some(c) = q.index(id.as_ref()) else {
            let hint = did_you_mean(id.as_ref(), q.constituents.iter().map(|c| c.id.as_str()), '\'');
            return Err(r.error(
                &sub,
                format!("names constituent '{}', which the model's [[quality]] does not define{hint}", printable(id)),
            ));
        };
        let con = &q.constituents[c];
        if matches!(con.kind, ConstituentKind::Age) {
            return Err(r.error(&sub, format!("'{}' is a water age; limit it with max_age", con.id)));
        }
        let unit = con.report_unit().to_owned();
        let number = match value {
            Value::Int(i) => *i as f64,
            Value::Float(f) => *f,
            Value::Str(s) => {
                let Some((number, given)) = split_number(s) else {
                    return Err(r.error(
                        &sub,
                        format!("\"{}\" is not a number with a unit; write for example \"0.2 {unit}\"", printable(s)),
                    ));
                };
                let given = given.trim();
                if !given.is_empty() && given.replace(' ', "") != unit.replace(' ', "") {
                    return Err(r.error(
                        &sub,
                        format!("unit \"{}\" is not the unit of '{}', which is \"{unit}\"", printable(given), con.id),
                    ));
                }
                number
            }
            other => {
                return Err(r.error(&sub, format!("must be a number or a string with a unit, found {}", other.kind())))
            }
        };
        if !number.is_finite() || number < 0.0 {
            return Err(r.error(&sub, format!("must be a finite number, not negative, found {number}")));
        }
        out.push((c, number));
    }
    Ok(out)
}

/// Reads a share such as `"95 %"` (or a bare number of percent) as a fraction in (0, 1].
fn read_share(r: &Reader<'_>, key: &str, v: &Value) -> Result<f64, ModelError> {
    let percent = match v {
        Value::Int(i) => *i as f64,
        Value::Float(f) => *f,
        Value::Str(s) => match s.trim().strip_suffix('%').and_then(split_number) {
            Some((number, "")) => number,
            _ => {
                return Err(
                    r.error(key, format!("\"{}\" is not a percentage; write for example \"95 %\"", printable(s)))
                )
            }
        },
        other => return Err(r.error(key, format!("must be a percentage such as \"95 %\", found {}", other.kind()))),
    };
    if !(percent > 0.0 && percent <= 100.0) {
        return Err(r.error(key, format!("must be above 0 % and at most 100 %, found {percent} %")));
    }
    Ok(percent / 100.0)
}

/// The residual pressure head of `min_fire_flow`, m: the criteria's, else 20 psi converted with
/// the model's water.
pub fn fire_residual(criteria: &Criteria, model: &Model) -> f64 {
    criteria.fire_residual.unwrap_or_else(|| {
        let density = model.options.water_properties().density;
        PressureUnit::Psi.to_head(FIRE_RESIDUAL_PSI, density)
    })
}

fn read_margin(r: &Reader<'_>, key: &str, v: &Value) -> Result<SupplyMargin, ModelError> {
    if let Value::Str(s) = v {
        if let Some(number) = s.trim().strip_suffix('%') {
            let Some((number, "")) = split_number(number) else {
                return Err(
                    r.error(key, format!("\"{}\" is not a percentage; write for example \"10 %\"", printable(s)))
                );
            };
            if !(0.0..100.0).contains(&number) {
                return Err(r.error(key, format!("must be at least 0 % and below 100 %, found {number} %")));
            }
            return Ok(SupplyMargin::Fraction(number / 100.0));
        }
    }
    Ok(SupplyMargin::Flow(r.limit(key, v, Quantity::Flow, true)?))
}

fn read_capacity(r: &Reader<'_>, key: &str, v: &Value, model: &Model) -> Result<Vec<(usize, f64)>, ModelError> {
    let mut out = Vec::new();
    for (id, cap) in table(r, key, v)? {
        let sub = format!("{key}.{id}");
        let Some(i) = model.node_index(id) else {
            let hint = did_you_mean(id, model.nodes().iter().map(|n| n.id.as_str()), '\'');
            return Err(r.error(&sub, format!("refers to node '{}', which is not defined{hint}", printable(id))));
        };
        if matches!(model.nodes()[i].kind, NodeKind::Junction { .. }) {
            return Err(
                r.error(&sub, format!("node '{}' is a junction; only reservoirs and tanks supply", printable(id)))
            );
        }
        out.push((i, r.limit(&sub, cap, Quantity::Flow, true)?));
    }
    Ok(out)
}

fn read_fail_on(r: &Reader<'_>, key: &str, v: &Value) -> Result<Vec<DiagnosticKind>, ModelError> {
    if let Value::Bool(all) = v {
        return Ok(if *all { DiagnosticKind::ALL.to_vec() } else { Vec::new() });
    }
    let names: Vec<&str> = DiagnosticKind::ALL.iter().map(|d| d.code()).collect();
    r.strings(key, v)?
        .iter()
        .map(|s| {
            DiagnosticKind::parse(s).ok_or_else(|| {
                let hint = did_you_mean(s, names.iter().copied(), '"');
                r.error(
                    key,
                    format!(
                        "unknown warning \"{}\"{hint}; expected true, false or a list of {}",
                        printable(s),
                        names.join(", ")
                    ),
                )
            })
        })
        .collect()
}

fn read_groups(r: &Reader<'_>, key: &str, v: &Value) -> Result<Vec<Group>, ModelError> {
    let Value::Array(items) = v else {
        return Err(r.error(key, format!("must be an array of tables ([[criteria.groups]]), found {}", v.kind())));
    };
    let mut groups: Vec<Group> = Vec::with_capacity(items.len());
    for (i, item) in items.iter().enumerate() {
        let sub = Reader { prefix: format!("{key}[{}].", i + 1), units: r.units, density: r.density };
        let entries = match item {
            Value::Table(e) => e,
            other => {
                return Err(r.error(&format!("{key}[{}]", i + 1), format!("must be a table, found {}", other.kind())))
            }
        };
        let mut g = Group {
            name: format!("{}", i + 1),
            zones: Vec::new(),
            ids: Vec::new(),
            min_pressure: None,
            max_pressure: None,
            min_fire_flow: None,
        };
        for (k, v) in entries {
            match k.as_ref() {
                "name" => match v {
                    Value::Str(s) if !s.trim().is_empty() && !s.chars().any(char::is_control) => g.name = s.clone(),
                    Value::Str(_) => return Err(sub.error(k, "must not be empty or contain control characters")),
                    other => return Err(sub.error(k, format!("must be a string, found {}", other.kind()))),
                },
                "zone" => g.zones = sub.strings(k, v)?,
                "ids" => g.ids = sub.strings(k, v)?,
                "min_pressure" => g.min_pressure = Some(sub.limit(k, v, Quantity::Pressure, false)?),
                "max_pressure" => g.max_pressure = Some(sub.limit(k, v, Quantity::Pressure, false)?),
                "min_fire_flow" => g.min_fire_flow = Some(sub.limit(k, v, Quantity::Flow, true)?),
                _ => return Err(unknown_key(&sub, k, GROUP_KEYS)),
            }
        }
        if g.zones.is_empty() && g.ids.is_empty() {
            return Err(sub.error("zone", "a group needs 'zone' or 'ids' (or both) to select its nodes"));
        }
        if g.min_pressure.is_none() && g.max_pressure.is_none() && g.min_fire_flow.is_none() {
            return Err(sub.error("min_pressure", "a group needs min_pressure, max_pressure or min_fire_flow"));
        }
        if let (Some(lo), Some(hi)) = (g.min_pressure, g.max_pressure) {
            if lo > hi {
                return Err(sub.error("max_pressure", "min_pressure is above max_pressure"));
            }
        }
        if groups.iter().any(|o| o.name == g.name) {
            return Err(
                sub.error("name", format!("'{}' names another group too; names must be unique", printable(&g.name)))
            );
        }
        groups.push(g);
    }
    Ok(groups)
}

/// A limit in SI written in the model's units, e.g. `"20.00 m"`.
pub fn format_in_units(q: Quantity, si: f64, units: &UnitSystem, density: f64) -> String {
    let (v, unit) = to_units(q, si, units, density);
    if unit.is_empty() {
        format!("{v:.3}")
    } else if q == Quantity::Flow {
        format!("{v:.3} {unit}")
    } else {
        format!("{v:.2} {unit}")
    }
}

/// An SI value of a quantity in the model's units, with the unit's label.
pub fn to_units(q: Quantity, si: f64, units: &UnitSystem, density: f64) -> (f64, &'static str) {
    let c = Converter::new(*units, density, false);
    (c.from_si(q, si), c.label(q))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::format::tree::parse_toml;
    use crate::model::Node;
    use crate::units::PSI;

    fn model() -> Model {
        let mut m = Model::default();
        m.add_node(Node::reservoir("Works", 60.0)).unwrap();
        m.add_node(Node::junction("J-1", 10.0, 0.005)).unwrap();
        m
    }

    fn read(text: &str) -> Result<Criteria, ModelError> {
        let v = parse_toml(text).unwrap();
        let Value::Table(t) = v else { unreachable!() };
        Criteria::from_value(&t[0].1, &model())
    }

    #[test]
    fn limits_with_units() {
        let c = read(
            "[criteria]\nmin_pressure = \"30 psi\"\nmax_pressure = 80\nmax_velocity = \"2.5 m/s\"\n\
             max_headloss = \"3 m/km\"\nmin_supply_margin = \"10 %\"\n[criteria.source_capacity]\nWorks = \"120 L/s\"\n",
        )
        .unwrap();
        let rho = model().options.water_properties().density;
        // 30 psi = 30 × 6894.757293168 Pa (exact definition), as head of water at 20 °C.
        let expected = 30.0 * PSI / (rho * crate::units::GRAVITY);
        assert!((c.min_pressure.unwrap() - expected).abs() < 1e-12);
        assert_eq!(c.max_pressure, Some(80.0));
        assert_eq!(c.max_velocity, Some(2.5));
        assert!((c.max_headloss.unwrap() - 0.003).abs() < 1e-15);
        assert_eq!(c.min_supply_margin, Some(SupplyMargin::Fraction(0.1)));
        assert_eq!(c.source_capacity.len(), 1);
        assert!((c.source_capacity[0].1 - 0.12).abs() < 1e-15);
        assert!(c.must_converge && c.all_demands_supplied);
    }

    #[test]
    fn errors_name_the_key_and_suggest() {
        let e = read("[criteria]\nmin_pressure = \"20 M\"\n").unwrap_err();
        assert_eq!(e.key.as_deref(), Some("min_pressure"));
        assert!(e.message.contains("unknown unit \"M\"") && e.message.contains("did you mean \"m\""), "{e}");
        let e = read("[criteria]\nmax_velocity = \"2.5 m/S\"\n").unwrap_err();
        assert!(e.message.contains("did you mean \"m/s\""), "{e}");
        let e = read("[criteria]\nmin_presure = 20\n").unwrap_err();
        assert!(e.message.contains("did you mean 'min_pressure'"), "{e}");
        let e = read("[criteria]\nmin_pressure = \"1e400 m\"\n").unwrap_err();
        assert!(e.message.contains("finite"), "{e}");
        let e = read("[[criteria.groups]]\nzone = \"high\"\nmin_pressure = \"x m\"\n").unwrap_err();
        assert_eq!(e.key.as_deref(), Some("groups[1].min_pressure"));
        let e = read("[criteria.source_capacity]\nWorkz = 5\n").unwrap_err();
        assert!(e.message.contains("did you mean 'Works'"), "{e}");
        let e = read("[criteria]\nmin_pressure = 50\nmax_pressure = 40\n").unwrap_err();
        assert_eq!(e.key.as_deref(), Some("max_pressure"));
    }

    #[test]
    fn numbers_and_units() {
        assert_eq!(split_number("20 m"), Some((20.0, "m")));
        assert_eq!(split_number("2.5m/s"), Some((2.5, "m/s")));
        assert_eq!(split_number("1e3 L/s"), Some((1000.0, "L/s")));
        assert_eq!(split_number("-3 m"), Some((-3.0, "m")));
        assert_eq!(split_number("m"), None);
        assert_eq!(split_number("5"), Some((5.0, "")));
    }

    #[test]
    fn groups_select_by_zone_and_pattern() {
        let c =
            read("[[criteria.groups]]\nname = \"hz\"\nzone = [\"high\", \"top\"]\nids = \"HZ-*\"\nmin_pressure = 15\n")
                .unwrap();
        let g = &c.groups[0];
        assert!(g.selects("HZ-12", Some("top")));
        assert!(!g.selects("HZ-12", None));
        assert!(!g.selects("LZ-1", Some("high")));
    }
}
