//! Reading a `[criteria]` table (from a model file or a criteria file) into its typed form,
//! [`CriteriaTable`]: every limit a number in the model's units (`min_pressure = 20`) or a
//! string with its unit (`"20 m"`, `"30 psi"`, `"2.5 m/s"`, `"3 m/km"`, `"120 L/s"`, `"10 %"`),
//! converted into SI here and nowhere else. Errors name the table and the key (for example
//! `[criteria]: key 'groups[2].min_pressure'`); the caller adds the file. The keys are in
//! [`super::schema`]; what each means is in `analysis::criteria`.

use super::schema::{CRITERIA_KEYS, GROUP_KEYS};
use super::tree::{self, Key, Value};
use super::Format;
use crate::error::{printable, Element, ModelError};
use crate::model::criteria::{
    substance, table_error, CriteriaEntry, CriteriaTable, DiagnosticKind, GroupEntry, GroupTable, Limit, SupplyMargin,
    Written,
};
use crate::model::Model;
use crate::units::did_you_mean;
use crate::units::{Converter, FlowUnit, LengthUnit, PressureUnit, Quantity, UnitSystem};

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
        table_error(&format!("{}{key}", self.prefix), message)
    }

    fn limit(&self, key: &str, value: &Value, q: Quantity, non_negative: bool) -> Result<Limit, ModelError> {
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
        Ok(Limit { si, written: written(value) })
    }

    fn boolean(&self, key: &str, value: &Value) -> Result<bool, ModelError> {
        match value {
            Value::Bool(b) => Ok(*b),
            other => Err(self.error(key, format!("must be true or false, found {}", other.kind()))),
        }
    }

    /// A string or a list of strings, and whether it was a list.
    fn strings(&self, key: &str, value: &Value) -> Result<(Vec<String>, bool), ModelError> {
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
        Ok((list, matches!(value, Value::Array(_))))
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

/// A value as written (the shapes the table's keys accept).
fn written(value: &Value) -> Written {
    match value {
        Value::Bool(b) => Written::Bool(*b),
        Value::Int(i) => Written::Number(*i as f64),
        Value::Float(x) | Value::HugeInt(x) => Written::Number(*x),
        Value::Str(t) => Written::Text(t.clone()),
        Value::Array(items) => {
            Written::List(items.iter().map(|v| if let Value::Str(t) = v { t.clone() } else { String::new() }).collect())
        }
        // Refused by every key before it is kept.
        Value::Table(_) | Value::Date => Written::Text(String::new()),
    }
}

/// Reads a `[criteria]` table (the value of the `criteria` key) of `model`, whose units, water
/// and `[[quality]]` constituents are read (its nodes need not be: [`CriteriaTable::check`] checks
/// the sources it names once they are).
pub fn read_table(value: &Value, model: &Model) -> Result<CriteriaTable, ModelError> {
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
    let r = &reader;
    let mut table = CriteriaTable::default();
    for (key, v) in entries {
        let entry = match key.as_ref() {
            "must_converge" => CriteriaEntry::MustConverge(r.boolean(key, v)?),
            "all_demands_supplied" => CriteriaEntry::AllDemandsSupplied(r.boolean(key, v)?),
            "min_pressure" => CriteriaEntry::MinPressure(r.limit(key, v, Quantity::Pressure, false)?),
            "max_pressure" => CriteriaEntry::MaxPressure(r.limit(key, v, Quantity::Pressure, false)?),
            "max_velocity" => CriteriaEntry::MaxVelocity(r.limit(key, v, Quantity::Velocity, true)?),
            "max_headloss" => CriteriaEntry::MaxHeadloss(r.limit(key, v, Quantity::Gradient, true)?),
            "min_tank_reserve" => CriteriaEntry::MinTankReserve(r.limit(key, v, Quantity::Length, true)?),
            "min_supply_margin" => CriteriaEntry::MinSupplyMargin(read_margin(r, key, v)?, written(v)),
            "min_delivered" => CriteriaEntry::MinDelivered(read_share(r, key, v)?),
            "fire_residual" => CriteriaEntry::FireResidual(r.limit(key, v, Quantity::Pressure, false)?),
            "source_capacity" => CriteriaEntry::SourceCapacity(read_capacity(r, key, v)?),
            "fail_on_warnings" => CriteriaEntry::FailOnWarnings(read_fail_on(r, key, v)?, written(v)),
            "groups" => CriteriaEntry::Groups(read_groups(r, key, v)?),
            "max_age" => CriteriaEntry::MaxAge(r.limit(key, v, Quantity::Age, true)?),
            "min_residual" => CriteriaEntry::MinResidual(read_residuals(r, key, v, model)?),
            "after" => CriteriaEntry::After(match v {
                Value::Str(s) => Limit {
                    si: crate::model::time::parse_duration(s).map_err(|m| r.error(key, m))?,
                    written: written(v),
                },
                other => r.limit(key, other, Quantity::Age, true)?,
            }),
            _ => return Err(unknown_key(r, key, CRITERIA_KEYS)),
        };
        table.entries.push(entry);
    }
    let limit = |key: &str| {
        table.entries.iter().find_map(|e| match e {
            CriteriaEntry::MinPressure(l) if key == "min_pressure" => Some(l.si),
            CriteriaEntry::MaxPressure(l) if key == "max_pressure" => Some(l.si),
            _ => None,
        })
    };
    if let (Some(lo), Some(hi)) = (limit("min_pressure"), limit("max_pressure")) {
        if lo > hi {
            return Err(reader.error("max_pressure", "min_pressure is above max_pressure"));
        }
    }
    Ok(table)
}

/// Reads a criteria file's text (a `[criteria]` table, or its keys at the top level) against
/// `model`, everything it names checked. Syntax errors carry their line and column; the caller
/// adds the file.
pub fn read_file(text: &str, format: Format, model: &Model) -> Result<CriteriaTable, ModelError> {
    let parsed = match format {
        Format::Toml => tree::parse_toml(text),
        Format::Json => tree::parse_json(text),
    };
    let tree = parsed.map_err(|e| {
        let kind = if format == Format::Json { "JSON" } else { "TOML" };
        ModelError { position: e.position, ..ModelError::new(format!("{kind} syntax error: {}", e.message)) }
    })?;
    let value = match tree {
        Value::Table(mut entries) if entries.len() == 1 && entries[0].0 == "criteria" => entries.remove(0).1,
        other => other,
    };
    let table = read_table(&value, model)?;
    table.check(model)?;
    Ok(table)
}

/// Reads `min_residual = { id = "0.2 mg/L", ... }`: each constituent's lowest value, in its unit.
fn read_residuals(r: &Reader<'_>, key: &str, v: &Value, model: &Model) -> Result<Vec<(String, Limit)>, ModelError> {
    let entries = table(r, key, v)?;
    let mut out = Vec::new();
    for (id, value) in entries {
        let sub = format!("{key}.{}", id.as_ref());
        let c = substance(model, id.as_ref()).map_err(|m| r.error(&sub, m))?;
        let con = &model.time.quality.constituents[c];
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
        out.push((id.as_ref().to_owned(), Limit { si: number, written: written(value) }));
    }
    Ok(out)
}

/// Reads a share such as `"95 %"` (or a bare number of percent) as a fraction in (0, 1].
fn read_share(r: &Reader<'_>, key: &str, v: &Value) -> Result<Limit, ModelError> {
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
    Ok(Limit { si: percent / 100.0, written: written(v) })
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
    Ok(SupplyMargin::Flow(r.limit(key, v, Quantity::Flow, true)?.si))
}

/// Reads `source_capacity = { id = "120 L/s", ... }` (the nodes are checked by
/// [`CriteriaTable::check`]).
fn read_capacity(r: &Reader<'_>, key: &str, v: &Value) -> Result<Vec<(String, Limit)>, ModelError> {
    let mut out = Vec::new();
    for (id, cap) in table(r, key, v)? {
        let sub = format!("{key}.{id}");
        out.push((id.as_ref().to_owned(), r.limit(&sub, cap, Quantity::Flow, true)?));
    }
    Ok(out)
}

fn read_fail_on(r: &Reader<'_>, key: &str, v: &Value) -> Result<Vec<DiagnosticKind>, ModelError> {
    if let Value::Bool(all) = v {
        return Ok(if *all { DiagnosticKind::ALL.to_vec() } else { Vec::new() });
    }
    let names: Vec<&str> = DiagnosticKind::ALL.iter().map(|d| d.code()).collect();
    r.strings(key, v)?
        .0
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

fn read_groups(r: &Reader<'_>, key: &str, v: &Value) -> Result<Vec<GroupTable>, ModelError> {
    let Value::Array(items) = v else {
        return Err(r.error(key, format!("must be an array of tables ([[criteria.groups]]), found {}", v.kind())));
    };
    let mut groups: Vec<GroupTable> = Vec::with_capacity(items.len());
    let mut names: Vec<String> = Vec::with_capacity(items.len());
    for (i, item) in items.iter().enumerate() {
        let sub = Reader { prefix: format!("{key}[{}].", i + 1), units: r.units, density: r.density };
        let entries = match item {
            Value::Table(e) => e,
            other => {
                return Err(r.error(&format!("{key}[{}]", i + 1), format!("must be a table, found {}", other.kind())))
            }
        };
        let mut g = GroupTable { entries: Vec::with_capacity(entries.len()) };
        let mut name = format!("{}", i + 1);
        let (mut selects, mut limits) = (false, false);
        let (mut lo, mut hi) = (None, None);
        for (k, v) in entries {
            let entry = match k.as_ref() {
                "name" => match v {
                    Value::Str(s) if !s.trim().is_empty() && !s.chars().any(char::is_control) => {
                        name = s.clone();
                        GroupEntry::Name(s.clone())
                    }
                    Value::Str(_) => return Err(sub.error(k, "must not be empty or contain control characters")),
                    other => return Err(sub.error(k, format!("must be a string, found {}", other.kind()))),
                },
                "zone" => {
                    let (list, as_list) = sub.strings(k, v)?;
                    selects |= !list.is_empty();
                    GroupEntry::Zone(list, as_list)
                }
                "ids" => {
                    let (list, as_list) = sub.strings(k, v)?;
                    selects |= !list.is_empty();
                    GroupEntry::Ids(list, as_list)
                }
                "min_pressure" => {
                    let l = sub.limit(k, v, Quantity::Pressure, false)?;
                    (limits, lo) = (true, Some(l.si));
                    GroupEntry::MinPressure(l)
                }
                "max_pressure" => {
                    let l = sub.limit(k, v, Quantity::Pressure, false)?;
                    (limits, hi) = (true, Some(l.si));
                    GroupEntry::MaxPressure(l)
                }
                "min_fire_flow" => {
                    limits = true;
                    GroupEntry::MinFireFlow(sub.limit(k, v, Quantity::Flow, true)?)
                }
                _ => return Err(unknown_key(&sub, k, GROUP_KEYS)),
            };
            g.entries.push(entry);
        }
        if !selects {
            return Err(sub.error("zone", "a group needs 'zone' or 'ids' (or both) to select its nodes"));
        }
        if !limits {
            return Err(sub.error("min_pressure", "a group needs min_pressure, max_pressure or min_fire_flow"));
        }
        if let (Some(lo), Some(hi)) = (lo, hi) {
            if lo > hi {
                return Err(sub.error("max_pressure", "min_pressure is above max_pressure"));
            }
        }
        if names.contains(&name) {
            return Err(
                sub.error("name", format!("'{}' names another group too; names must be unique", printable(&name)))
            );
        }
        names.push(name);
        groups.push(g);
    }
    Ok(groups)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::Node;

    #[test]
    fn numbers_and_units() {
        assert_eq!(split_number("20 m"), Some((20.0, "m")));
        assert_eq!(split_number("2.5m/s"), Some((2.5, "m/s")));
        assert_eq!(split_number("1e3 L/s"), Some((1000.0, "L/s")));
        assert_eq!(split_number("-3 m"), Some((-3.0, "m")));
        assert_eq!(split_number("m"), None);
        assert_eq!(split_number("5"), Some((5.0, "")));
    }

    /// Every key of the schema's list reads into the entry that writes it back under that key,
    /// and a model's table is written back as written.
    #[test]
    fn every_criteria_key_reads_into_its_own_entry_and_back() {
        let mut m = Model::default();
        m.add_node(Node::reservoir("Works", 60.0)).unwrap();
        let text = r#"
            [criteria]
            must_converge = false
            all_demands_supplied = true
            min_pressure = "20psi"
            max_pressure = 80
            max_velocity = "2.5 m/s"
            max_headloss = "3 m/km"
            min_supply_margin = "10 %"
            source_capacity = { Works = "120 L/s" }
            min_tank_reserve = 0.5
            min_delivered = "95 %"
            fire_residual = "20 psi"
            fail_on_warnings = ["parallel-pipes"]
            max_age = "72 h"
            min_residual = {}
            after = "48h"
            [[criteria.groups]]
            zone = "high"
            ids = ["HZ-*"]
            min_fire_flow = "25 L/s"
        "#;
        let Value::Table(top) = tree::parse_toml(text).unwrap() else { unreachable!() };
        let table = read_table(&top[0].1, &m).unwrap();
        table.check(&m).unwrap();
        let mut keys: Vec<&str> = table.entries.iter().map(|e| e.key()).collect();
        let mut all = CRITERIA_KEYS.to_vec();
        keys.sort_unstable();
        all.sort_unstable();
        assert_eq!(keys, all);
        let Some(CriteriaEntry::MinPressure(l)) = table.entries.iter().find(|e| e.key() == "min_pressure") else {
            panic!()
        };
        assert_eq!(l.written, Written::Text("20psi".into()));
        // 20 psi = 20 × 6894.757293168 Pa (exact definition), as head of the model's water.
        let rho = m.options.water_properties().density;
        assert!((l.si - 20.0 * crate::units::PSI / (rho * crate::units::GRAVITY)).abs() < 1e-12);
        let Some(CriteriaEntry::Groups(groups)) = table.entries.iter().find(|e| e.key() == "groups") else { panic!() };
        let mut group_keys: Vec<&str> = groups[0].entries.iter().map(|e| e.key()).collect();
        group_keys.sort_unstable();
        assert_eq!(group_keys, ["ids", "min_fire_flow", "zone"]);
        // A node the table names must be a source: checked once the nodes are read.
        let Value::Table(top) = tree::parse_toml("[criteria.source_capacity]\nJ1 = 5\n").unwrap() else {
            unreachable!()
        };
        let table = read_table(&top[0].1, &m).unwrap();
        let e = table.check(&m).unwrap_err();
        assert_eq!(e.key.as_deref(), Some("source_capacity.J1"));
    }
}
