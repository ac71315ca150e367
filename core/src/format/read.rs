//! Reading a model file (format version 1) into a [`Model`].
//!
//! TOML and JSON files share one structure (see the README). Every key is checked: unknown keys
//! are errors (with a suggestion when a known key is close), values must have the right type and
//! range, and units are converted into SI here and nowhere else. Errors name the file, the
//! element id and the key.

use super::schema::*;
use super::tree::{self, Key, Value};
use super::Format;
use crate::error::{Element, ModelError};
use crate::model::outflow::{JunctionOutflow, Leakage, Outlet, PressureDemand};
use crate::model::time::{
    self as tm, Action, Condition, Control, Demand, Energy, SimulationSettings, TimeData, TimePattern,
};
use crate::model::{
    HeadLossLaw, HydraulicOptions, Link, LinkKind, LinkStatus, MapCoordinates, Model, Node, NodeKind, Pipe, Pump,
    PumpDrive, Tank, Valve, ValveType, WaterSpec,
};
use crate::physics::fittings::{Fitting, FittingKind, FittingsMethod};
use crate::physics::pump::{Efficiency, HeadCurve};
use crate::physics::WaterProperties;
use crate::units::did_you_mean;
use crate::units::Quantity;
use crate::units::{DiameterUnit, FlowUnit, LengthUnit, PressureUnit, RoughnessUnit, UnitSystem};
use std::sync::OnceLock;

/// Reads a JSON model in one pass from `reader`, without holding the text: each node and link
/// is parsed into a small tree, read into the model and dropped in turn, so that memory holds the
/// model and one element's tree. The reader is buffered here.
///
/// It gives up (`None`) at the first problem of any kind, and also when the file's top-level keys
/// are not in the order a one-pass read needs: every setting (units, hydraulics, patterns...)
/// before `nodes`, `nodes` before `links` — the order [`super::write`] writes them in. The caller
/// then reads the whole text with [`read_str`](super::read_str) (or [`read_bytes`](super::read_bytes)), which accepts any order and
/// whose errors carry their positions; a model read this way equals the one `read_str` builds
/// from the same text.
pub fn read_json_stream<R: std::io::Read>(reader: R) -> Option<Model> {
    let reader = std::io::BufReader::with_capacity(1 << 16, reader);
    read_json_one_pass(serde_json::Deserializer::from_reader(reader))
}

/// Reads a JSON model laid out one element a line — the layout [`super::write`] writes: the
/// top-level object indented, each node, link and control on a line of its own — line by line
/// from `reader`. Each line is parsed from memory (about twice as fast as parsing from a reader,
/// as [`read_json_stream`] does) and dropped, so memory holds the model and one line.
///
/// It gives up (`None`) on anything else: another layout, a syntax or model error, keys in an
/// order one pass cannot take. The caller then tries [`read_json_stream`] or reads the whole
/// text; a model read this way equals the one [`read_str`](super::read_str) builds from the same text.
pub fn read_json_lines<R: std::io::BufRead>(mut reader: R) -> Option<Model> {
    let mut line = Vec::with_capacity(1 << 12);
    let mut next = |line: &mut Vec<u8>| -> Option<()> {
        line.clear();
        (reader.read_until(b'\n', line).ok()? > 0).then_some(())
    };
    // The settings: every line before `"nodes": [`, parsed as one object.
    let mut head = Vec::new();
    loop {
        next(&mut line)?;
        if line.trim_ascii() == b"\"nodes\": [" {
            break;
        }
        head.extend_from_slice(&line);
    }
    let mut head = head.trim_ascii_end().to_vec();
    if head.last() == Some(&b',') {
        head.pop();
    }
    head.push(b'}');
    let Value::Table(entries) = tree::parse_json(std::str::from_utf8(&head).ok()?).ok()? else { return None };
    if entries.iter().any(|(k, _)| matches!(k.as_ref(), "nodes" | "links" | "controls")) {
        return None;
    }
    let mut top = Fields::new(None, entries);
    let settings = Settings::take(&mut top).ok()?;
    top.finish(TOP_KEYS).ok()?;
    let mut model = settings.into_model().ok()?;
    let mut controls = Vec::new();
    let mut section = 0; // 0 nodes, 1 links, 2 controls
    loop {
        // One array: a value a line, a comma after each but the last, then `]` or `],`.
        let mut i = 0;
        let mut more = true;
        let closing = loop {
            next(&mut line)?;
            let t = line.trim_ascii();
            if t == b"]" || t == b"]," {
                if more && i > 0 {
                    return None; // a comma after the last value
                }
                break t == b"],";
            }
            if !more {
                return None; // no comma between two values
            }
            let (value, comma) = match t.strip_suffix(b",") {
                Some(v) => (v, true),
                None => (t, false),
            };
            more = comma;
            let mut de = serde_json::Deserializer::from_slice(value);
            let value = serde::de::DeserializeSeed::deserialize(tree::Seed { depth: 2 }, &mut de).ok()?;
            de.end().ok()?;
            match section {
                0 => add_node_value(&mut model, i, value).ok()?,
                1 => add_link_value(&mut model, i, value).ok()?,
                _ => controls.push(value),
            }
            i += 1;
        };
        if !closing {
            break;
        }
        section += 1;
        next(&mut line)?;
        let expected: &[u8] = match section {
            1 => b"\"links\": [",
            2 => b"\"controls\": [",
            _ => return None,
        };
        if line.trim_ascii() != expected {
            return None;
        }
    }
    // The end of the object, then nothing but white space.
    next(&mut line)?;
    if line.trim_ascii() != b"}" {
        return None;
    }
    while next(&mut line).is_some() {
        if !line.trim_ascii().is_empty() {
            return None;
        }
    }
    finish(model, controls).ok()
}

fn read_json_one_pass<'de, R: serde_json::de::Read<'de>>(mut de: serde_json::Deserializer<R>) -> Option<Model> {
    let model = serde::Deserializer::deserialize_map(&mut de, OnePass).ok()?;
    de.end().ok()?;
    Some(model)
}

/// The visitor of a model file's top-level object for [`read_json_stream`]; every error is only
/// "give up".
struct OnePass;

fn give_up<E: serde::de::Error>(_: ModelError) -> E {
    E::custom("not readable in one pass")
}

impl<'de> serde::de::Visitor<'de> for OnePass {
    type Value = Model;

    fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("a model")
    }

    fn visit_map<A: serde::de::MapAccess<'de>>(self, mut map: A) -> Result<Model, A::Error> {
        use serde::de::Error;
        let mut entries: Vec<(Key, Value)> = Vec::new();
        let mut seen: Vec<String> = Vec::new();
        let mut model: Option<Model> = None;
        let mut controls: Option<Value> = None;
        while let Some(key) = map.next_key::<String>()? {
            if seen.contains(&key) {
                return Err(A::Error::custom("duplicate key"));
            }
            match key.as_str() {
                // (`links` needs the nodes read; a second `nodes` is a duplicate key.)
                "nodes" => {
                    let mut top = Fields::new(None, std::mem::take(&mut entries));
                    let settings = Settings::take(&mut top).map_err(give_up)?;
                    top.finish(TOP_KEYS).map_err(give_up)?;
                    let mut m = settings.into_model().map_err(give_up)?;
                    map.next_value_seed(Elements { model: &mut m, nodes: true })?;
                    model = Some(m);
                }
                "links" => {
                    let Some(m) = model.as_mut() else { return Err(A::Error::custom("links before nodes")) };
                    map.next_value_seed(Elements { model: m, nodes: false })?;
                }
                "controls" => controls = Some(map.next_value_seed(tree::Seed { depth: 1 })?),
                _ if model.is_some() => return Err(A::Error::custom("a setting after the nodes")),
                _ => entries.push((Key::Owned(key.clone()), map.next_value_seed(tree::Seed { depth: 1 })?)),
            }
            seen.push(key);
        }
        let Some(model) = model else { return Err(A::Error::custom("no nodes")) };
        let controls = match controls {
            None => Vec::new(),
            Some(Value::Array(items)) => items,
            Some(_) => return Err(A::Error::custom("controls not an array")),
        };
        finish(model, controls).map_err(give_up)
    }
}

/// The `nodes` or `links` array of [`OnePass`], read element by element into the model.
struct Elements<'m> {
    model: &'m mut Model,
    nodes: bool,
}

impl<'de> serde::de::DeserializeSeed<'de> for Elements<'_> {
    type Value = ();
    fn deserialize<D: serde::Deserializer<'de>>(self, deserializer: D) -> Result<(), D::Error> {
        deserializer.deserialize_seq(self)
    }
}

impl<'de> serde::de::Visitor<'de> for Elements<'_> {
    type Value = ();

    fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("an array of tables")
    }

    fn visit_seq<A: serde::de::SeqAccess<'de>>(self, mut seq: A) -> Result<(), A::Error> {
        let mut i = 0;
        while let Some(value) = seq.next_element_seed(tree::Seed { depth: 2 })? {
            if self.nodes {
                add_node_value(self.model, i, value).map_err(give_up)?;
            } else {
                add_link_value(self.model, i, value).map_err(give_up)?;
            }
            i += 1;
        }
        Ok(())
    }
}

/// The top-level table's fields (for the one-pass readers of [`super::one_pass`]).
pub(super) fn top_fields(entries: Vec<(Key, Value)>) -> Fields {
    Fields::new(None, entries)
}

/// The model with the settings of the top-level table, before any element, when every setting
/// is valid and no other key is there (for the one-pass readers of [`super::one_pass`]).
pub(super) fn settings_model(top: &mut Fields) -> Option<Model> {
    let settings = Settings::take(top).ok()?;
    let rest = std::mem::replace(top, Fields::new(None, Vec::new()));
    rest.finish(TOP_KEYS).ok()?;
    settings.into_model().ok()
}

/// [`finish`] for the one-pass readers: `None` on any error.
pub(super) fn finish_model(model: Model, controls: Vec<Value>) -> Option<Model> {
    finish(model, controls).ok()
}

/// The ordinary reader: the whole file as one value tree, then the model.
pub(super) fn read_tree(text: &str, format: Format) -> Result<Model, ModelError> {
    if text.trim().is_empty() {
        return Err(ModelError::new("the file is empty; a model needs at least [[nodes]] and [[links]]"));
    }
    let tree = match format {
        Format::Toml => tree::parse_toml(text),
        Format::Json => tree::parse_json(text),
    }
    .map_err(|e| ModelError {
        position: e.position,
        ..ModelError::new(format!(
            "{} syntax error: {}",
            match format {
                Format::Toml => "TOML",
                Format::Json => "JSON",
            },
            e.message
        ))
    })?;
    let Value::Table(entries) = tree else {
        return Err(ModelError::new(format!("the model must be a table of keys, found {}", tree.kind())));
    };
    let mut top = Fields::new(None, entries);
    let settings = Settings::take(&mut top)?;
    let nodes = top.array("nodes")?;
    let links = top.array("links")?;
    let controls = top.array("controls")?;
    top.finish(TOP_KEYS)?;
    let mut model = settings.into_model()?;
    for (i, v) in nodes.into_iter().enumerate() {
        add_node_value(&mut model, i, v)?;
    }
    for (i, v) in links.into_iter().enumerate() {
        add_link_value(&mut model, i, v)?;
    }
    finish(model, controls)
}

/// What the top level says besides the elements and controls, read in this order by both readers.
struct Settings {
    title: Option<String>,
    units: UnitSystem,
    options: HydraulicOptions,
    simulation: Option<SimulationSettings>,
    energy: Option<Value>,
    patterns: Vec<Value>,
    criteria: Option<Value>,
    pressure_demand: Option<PressureDemand>,
    leakage: Option<Leakage>,
    map: MapCoordinates,
    quality: Vec<Value>,
}

impl Settings {
    fn take(top: &mut Fields) -> Result<Settings, ModelError> {
        let title = top.string("title")?;
        let units = match top.take("units") {
            Some(v) => read_units(v)?,
            None => UnitSystem::default(),
        };
        let options = match top.take("hydraulics") {
            Some(v) => read_hydraulics(v, &units)?,
            None => HydraulicOptions::default(),
        };
        let pressure_demand = match top.take("pressure_demand") {
            Some(v) => Some(read_pressure_demand(v, &units, &options)?),
            None => None,
        };
        let leakage = match (top.take("background_leakage"), top.take("leakage")) {
            (Some(_), Some(_)) => {
                return Err(ModelError::at(
                    Some(Element::Table("leakage".into())),
                    None,
                    "the model has both [background_leakage] and its short name: keep one",
                ))
            }
            (Some(v), None) => Some(read_leakage(v, "background_leakage", &units, &options)?),
            (None, Some(v)) => Some(read_leakage(v, "leakage", &units, &options)?),
            (None, None) => None,
        };
        let simulation = match top.take("simulation") {
            Some(v) => Some(read_simulation(v, &units)?),
            None => None,
        };
        let energy = top.take("electricity");
        let map = match top.take("map") {
            Some(v) => read_map(v)?,
            None => MapCoordinates::default(),
        };
        let patterns = top.array("patterns")?;
        // Read once the constituents are (a lowest residual names one); its sources are checked
        // once the nodes are.
        let criteria = top.take("criteria");
        let quality = top.array("quality")?;
        Ok(Settings {
            title,
            units,
            options,
            simulation,
            energy,
            patterns,
            criteria,
            pressure_demand,
            leakage,
            map,
            quality,
        })
    }

    /// The model with these settings and its patterns, before any element.
    fn into_model(self) -> Result<Model, ModelError> {
        let mut model = Model::new(self.units, self.options);
        model.title = self.title;
        model.time.simulation = self.simulation;
        for (i, v) in self.patterns.into_iter().enumerate() {
            let pattern = read_pattern(i, v, &model.time)?;
            model.time.patterns.push(pattern);
        }
        if let Some(v) = self.energy {
            model.time.energy = read_energy(v, &model.time)?;
        }
        model.outflow.pressure_demand = self.pressure_demand;
        model.outflow.leakage = self.leakage;
        model.map.coordinates = self.map;
        for (i, v) in self.quality.into_iter().enumerate() {
            let c = read_constituent(i, v, &model.units, &model.time.quality)?;
            model.time.quality.constituents.push(c);
        }
        if let Some(v) = self.criteria {
            model.criteria = Some(super::criteria::read_table(&v, &model)?);
        }
        Ok(model)
    }
}

/// Reads the `i`-th entry of `nodes` into the model.
pub(super) fn add_node_value(model: &mut Model, i: usize, value: Value) -> Result<(), ModelError> {
    let index = model.nodes().len();
    let units = model.units;
    let options = model.options;
    let (node, outflow) = read_node(i, value, &units, &options, index, &mut model.time)?;
    model.add_node(node)?;
    if let Some(j) = outflow {
        model.outflow.junctions.insert(index, j);
    }
    Ok(())
}

/// Reads the `i`-th entry of `links` into the model.
pub(super) fn add_link_value(model: &mut Model, i: usize, value: Value) -> Result<(), ModelError> {
    let index = model.links().len();
    let (link, pattern, leakage_rate, path, fittings) = read_link(i, value, model)?;
    if let Some(rate) = leakage_rate {
        model.outflow.leakage_rates.insert(index, rate);
    }
    if let Some(path) = path {
        model.map.paths.insert(index, path);
    }
    if let Some(p) = pattern {
        match link.kind {
            LinkKind::Pump(_) => model.time.speed_patterns.insert(index, p),
            _ => model.time.setting_patterns.insert(index, p),
        };
    }
    model.add_link(link)?;
    if !fittings.is_empty() {
        model.set_fittings(index, fittings)?;
    }
    Ok(())
}

/// The controls (they refer to nodes and links, so come last), then the whole-network checks.
fn finish(mut model: Model, controls: Vec<Value>) -> Result<Model, ModelError> {
    resolve_sources(&mut model)?;
    if let Some(criteria) = &model.criteria {
        criteria.check(&model)?;
    }
    for (i, v) in controls.into_iter().enumerate() {
        let control = read_control(i, v, &model)?;
        model.time.controls.push(control);
    }
    model.check_data()?;
    model.shrink_to_fit();
    Ok(model)
}

/// The keys of one table being read, with what has been consumed.
pub(super) struct Fields {
    element: Option<Element>,
    entries: Vec<(Key, Option<Value>)>,
    /// Written before every key in messages, for tables inside an element ("demands[2].").
    prefix: String,
}

impl Fields {
    fn new(element: Option<Element>, entries: Vec<(Key, Value)>) -> Self {
        Fields { element, entries: entries.into_iter().map(|(k, v)| (k, Some(v))).collect(), prefix: String::new() }
    }

    /// The fields of a table nested in this element under `prefix` (e.g. "when.").
    fn nested(&self, prefix: String, value: Value) -> Result<Self, ModelError> {
        match value {
            Value::Table(entries) => Ok(Fields { prefix, ..Fields::new(self.element.clone(), entries) }),
            other => Err(ModelError::at(
                self.element.clone(),
                Some(prefix.trim_end_matches('.')),
                format!("must be a table, found {}", other.kind()),
            )),
        }
    }

    /// A duration such as "24h" or "15min", in seconds.
    fn duration(&mut self, key: &str) -> Result<Option<f64>, ModelError> {
        match self.take(key) {
            None => Ok(None),
            Some(Value::Str(s)) => tm::parse_duration(&s).map(Some).map_err(|m| self.error(key, m)),
            Some(other) => Err(self.error(
                key,
                format!("must be a duration written as a string such as \"1h\" or \"15min\", found {}", other.kind()),
            )),
        }
    }

    /// A reference to a pattern by id, as its index.
    fn pattern(&mut self, key: &str, time: &TimeData) -> Result<Option<usize>, ModelError> {
        let Some(id) = self.string(key)? else { return Ok(None) };
        match time.pattern_index(&id) {
            Some(i) => Ok(Some(i)),
            None => {
                let hint = did_you_mean(&id, time.patterns.iter().map(|p| p.id.as_str()), '\'');
                Err(self.error(
                    key,
                    format!(
                        "refers to pattern '{}', which is not defined in [[patterns]]{hint}",
                        crate::error::printable(&id)
                    ),
                ))
            }
        }
    }

    fn from_value(element: Element, value: Value) -> Result<Self, ModelError> {
        match value {
            Value::Table(entries) => Ok(Fields::new(Some(element), entries)),
            other => Err(ModelError::at(Some(element), None, format!("must be a table, found {}", other.kind()))),
        }
    }

    fn error(&self, key: &str, message: impl Into<String>) -> ModelError {
        ModelError::at(self.element.clone(), Some(&format!("{}{key}", self.prefix)), message)
    }

    fn take(&mut self, key: &str) -> Option<Value> {
        // Length and first byte first: most keys differ there, and a model file of a large
        // network asks this question millions of times.
        let first = key.as_bytes().first();
        self.entries
            .iter_mut()
            .find(|(k, _)| k.len() == key.len() && k.as_bytes().first() == first && k == key)
            .and_then(|(_, v)| v.take())
    }

    fn number(&mut self, key: &str) -> Result<Option<f64>, ModelError> {
        match self.take(key) {
            None => Ok(None),
            Some(Value::Int(i)) => self.magnitude(key, i as f64).map(Some),
            Some(Value::Float(f)) => self.magnitude(key, f).map(Some),
            Some(Value::HugeInt(v)) => Err(self.error(
                key,
                format!("is too large: a whole number of about {v:e}, beyond 64 bits and any physical value"),
            )),
            Some(other) => Err(self.error(key, format!("must be a number, found {}", other.kind()))),
        }
    }

    /// Refuses a number beyond any physical value in any unit, before it is converted (a
    /// conversion would turn 5e-324 mm into 0 m and 1e308 kW into an infinite power, and the
    /// message would then show the converted value). Zero, infinities and NaN pass: the value
    /// rules of each key judge them with their own words.
    fn magnitude(&self, key: &str, v: f64) -> Result<f64, ModelError> {
        let size = v.abs();
        if size.is_finite() && size > crate::model::LARGEST_INPUT {
            return Err(self.error(
                key,
                format!(
                    "is too large: {} (no physical value in any unit is beyond {:e} in size)",
                    crate::model::show(v),
                    crate::model::LARGEST_INPUT
                ),
            ));
        }
        if size > 0.0 && size < crate::model::SMALLEST_INPUT {
            return Err(self.error(
                key,
                format!(
                    "is too small: {} (no physical value in any unit is this close to zero: below {:e} in size; \
                     write 0 if zero is meant)",
                    crate::model::show(v),
                    crate::model::SMALLEST_INPUT
                ),
            ));
        }
        Ok(v)
    }

    fn required_number(&mut self, key: &str) -> Result<f64, ModelError> {
        self.number(key)?.ok_or_else(|| self.missing(key))
    }

    /// The error for a missing required key; when an unread key is a near-miss of it (a typo),
    /// the error names that key instead, with the suggestion.
    fn missing(&self, key: &str) -> ModelError {
        let typo = self
            .entries
            .iter()
            .filter(|(_, v)| v.is_some())
            .find(|(k, _)| crate::units::edit_distance(&k.to_ascii_lowercase(), key) <= 2);
        match typo {
            Some((k, _)) => self.error(k, format!("is not a known key (did you mean '{key}'?); '{key}' is missing")),
            None => self.error(key, "is missing"),
        }
    }

    fn integer(&mut self, key: &str) -> Result<Option<i64>, ModelError> {
        match self.take(key) {
            None => Ok(None),
            Some(Value::Int(i)) => Ok(Some(i)),
            Some(other) => Err(self.error(key, format!("must be a whole number, found {}", other.kind()))),
        }
    }

    fn string(&mut self, key: &str) -> Result<Option<String>, ModelError> {
        match self.take(key) {
            None => Ok(None),
            Some(Value::Str(s)) => Ok(Some(s)),
            Some(other) => Err(self.error(key, format!("must be a string, found {}", other.kind()))),
        }
    }

    fn boolean(&mut self, key: &str) -> Result<Option<bool>, ModelError> {
        match self.take(key) {
            None => Ok(None),
            Some(Value::Bool(b)) => Ok(Some(b)),
            Some(other) => Err(self.error(key, format!("must be true or false, found {}", other.kind()))),
        }
    }

    fn array(&mut self, key: &str) -> Result<Vec<Value>, ModelError> {
        match self.take(key) {
            None => Ok(Vec::new()),
            Some(Value::Array(items)) => Ok(items),
            Some(other) => Err(self.error(key, format!("must be an array of tables, found {}", other.kind()))),
        }
    }

    /// A unit name, checked against the choices.
    fn unit<U: Copy>(
        &mut self,
        key: &str,
        parse: fn(&str) -> Option<U>,
        labels: &[&'static str],
    ) -> Result<Option<U>, ModelError> {
        let Some(text) = self.string(key)? else { return Ok(None) };
        if let Some(u) = parse(&text) {
            return Ok(Some(u));
        }
        let choices = labels.iter().map(|l| format!("\"{l}\"")).collect::<Vec<_>>().join(", ");
        let hint = did_you_mean(&text, labels.iter().copied(), '"');
        Err(self.error(
            key,
            format!("unknown unit \"{}\"{hint}; expected one of {choices}", crate::error::printable(&text)),
        ))
    }

    /// Errors on the first key that is not in `known`, before any is read (so that a misspelt
    /// key is reported as such rather than as the key it should have been).
    fn reject_unknown(&self, known: &[&str]) -> Result<(), ModelError> {
        match self.entries.iter().find(|(k, v)| v.is_some() && !known.contains(&k.as_ref())) {
            Some((key, _)) => {
                let hint = did_you_mean(key, known.iter().copied(), '\'');
                Err(self.error(key, format!("is not a known key{hint}; known keys here: {}", known.join(", "))))
            }
            None => Ok(()),
        }
    }

    /// Errors on any key not consumed; `known` are the keys valid here, for suggestions.
    fn finish(self, known: &[&str]) -> Result<(), ModelError> {
        self.finish_with(known, &[], "")
    }

    /// Like [`Fields::finish`], but keys in `elsewhere` get a message saying they belong to
    /// another kind of element (`what` names this kind).
    fn finish_with(self, known: &[&str], elsewhere: &[&str], what: &str) -> Result<(), ModelError> {
        for (key, value) in &self.entries {
            if value.is_none() {
                continue;
            }
            let message = if known.contains(&key.as_ref()) {
                // A known key that was not consumed: it conflicts with another key.
                "cannot be combined with the other keys given here".to_owned()
            } else if elsewhere.contains(&key.as_ref()) {
                format!("does not apply to a {what}")
            } else {
                let hint = did_you_mean(key, known.iter().copied(), '\'');
                format!("is not a known key{hint}; known keys here: {}", known.join(", "))
            };
            return Err(self.error(key, message));
        }
        Ok(())
    }
}

fn labels<T: Copy>(all: &[T], label: fn(T) -> &'static str) -> Vec<&'static str> {
    all.iter().map(|u| label(*u)).collect()
}

pub(crate) fn read_units(value: Value) -> Result<UnitSystem, ModelError> {
    let mut f = Fields::from_value(Element::Table("units".into()), value)?;
    let d = UnitSystem::default();
    let units = UnitSystem {
        length: f.unit("length", LengthUnit::parse, &labels(LengthUnit::ALL, LengthUnit::label))?.unwrap_or(d.length),
        diameter: f
            .unit("diameter", DiameterUnit::parse, &labels(DiameterUnit::ALL, DiameterUnit::label))?
            .unwrap_or(d.diameter),
        flow: f.unit("flow", FlowUnit::parse, &labels(FlowUnit::ALL, FlowUnit::label))?.unwrap_or(d.flow),
        pressure: f
            .unit("pressure", PressureUnit::parse, &labels(PressureUnit::ALL, PressureUnit::label))?
            .unwrap_or(d.pressure),
        roughness: f
            .unit("roughness", RoughnessUnit::parse, &labels(RoughnessUnit::ALL, RoughnessUnit::label))?
            .unwrap_or(d.roughness),
    };
    f.finish(UNIT_KEYS)?;
    Ok(units)
}

pub(crate) fn read_hydraulics(value: Value, units: &UnitSystem) -> Result<HydraulicOptions, ModelError> {
    let el = Element::Table("hydraulics".into());
    let mut f = Fields::from_value(el.clone(), value)?;
    let mut o = HydraulicOptions::default();
    if let Some(law) = f.string("headloss")? {
        o.headloss = match law.as_str() {
            "hazen-williams" => HeadLossLaw::HazenWilliams,
            "darcy-weisbach" => HeadLossLaw::DarcyWeisbach,
            other => {
                let hint = did_you_mean(other, ["hazen-williams", "darcy-weisbach"], '"');
                return Err(f.error(
                    "headloss",
                    format!(
                        "unknown law \"{}\"{hint}; expected \"hazen-williams\" or \"darcy-weisbach\"",
                        crate::error::printable(other)
                    ),
                ));
            }
        };
    }
    let nu = f.number("kinematic_viscosity")?;
    let temp = f.number("water_temperature")?;
    o.water = match (nu, temp) {
        (Some(_), Some(_)) => {
            return Err(f.error("water_temperature", "give either kinematic_viscosity or water_temperature, not both"))
        }
        (Some(nu), None) => {
            let nu = crate::model::check_value(&el, "kinematic_viscosity", nu, crate::model::Rule::Positive)?;
            if !(1e-7..=1e-4).contains(&nu) {
                return Err(f.error(
                    "kinematic_viscosity",
                    format!("{nu} m2/s is not a plausible viscosity for water (about 1.0e-6 m2/s at 20 deg C); the value is in m2/s"),
                ));
            }
            WaterSpec::KinematicViscosity(nu)
        }
        (None, Some(t)) => {
            let t = crate::model::check_value(&el, "water_temperature", t, crate::model::Rule::Finite)?;
            if !(WaterProperties::MIN_CELSIUS..=WaterProperties::MAX_CELSIUS).contains(&t) {
                return Err(f.error(
                    "water_temperature",
                    format!(
                        "must be between {} and {} deg C (liquid water at atmospheric pressure), found {t}",
                        WaterProperties::MIN_CELSIUS,
                        WaterProperties::MAX_CELSIUS
                    ),
                ));
            }
            WaterSpec::Temperature(t)
        }
        (None, None) => o.water,
    };
    if let Some(n) = f.integer("max_iterations")? {
        if !(1..=100_000).contains(&n) {
            return Err(f.error("max_iterations", format!("must be between 1 and 100000, found {n}")));
        }
        o.max_iterations = n as u32;
    }
    if let Some(t) = f.number("head_tolerance")? {
        o.head_tolerance =
            units.length.to_si(crate::model::check_value(&el, "head_tolerance", t, crate::model::Rule::Positive)?);
    }
    if let Some(t) = f.number("flow_tolerance")? {
        o.flow_tolerance = crate::model::check_value(&el, "flow_tolerance", t, crate::model::Rule::Positive)?;
    }
    if let Some(text) = f.string("fittings_method")? {
        o.fittings_method = FittingsMethod::parse(&text).ok_or_else(|| {
            let names: Vec<&str> = FittingsMethod::ALL.iter().map(|m| m.label()).collect();
            let hint = did_you_mean(&text, names.iter().copied(), '"');
            f.error(
                "fittings_method",
                format!(
                    "unknown method \"{}\"{hint}; expected one of {}",
                    crate::error::printable(&text),
                    names.join(", ")
                ),
            )
        })?;
    }
    if let Some(z) = f.number("site_elevation")? {
        let z = units.length.to_si(crate::model::check_value(&el, "site_elevation", z, crate::model::Rule::Finite)?);
        if !(crate::physics::atmosphere::MIN_ELEVATION..=crate::physics::atmosphere::MAX_ELEVATION).contains(&z) {
            return Err(f.error(
                "site_elevation",
                format!(
                    "{} m is outside the standard atmosphere's lowest layer ({} m to {} m above sea level)",
                    z,
                    crate::physics::atmosphere::MIN_ELEVATION,
                    crate::physics::atmosphere::MAX_ELEVATION
                ),
            ));
        }
        o.site_elevation = Some(z);
    }
    f.finish(HYDRAULIC_KEYS)?;
    Ok(o)
}

/// Reads `id` and `kind` of a node, link or `[[quality]]` entry; returns the fields, the keys its
/// kind accepts and the kind.
fn identify<K: EntryKind>(
    value: Value,
    entry: Element,
    make: fn(String) -> Element,
) -> Result<(Fields, &'static [&'static str], K), ModelError> {
    let mut f = Fields::from_value(entry.clone(), value)?;
    let id = match f.take("id") {
        Some(Value::Str(s)) => s,
        Some(Value::Int(i)) => {
            return Err(ModelError::at(Some(entry), Some("id"), format!("must be a string; write id = \"{i}\"")));
        }
        Some(other) => {
            return Err(ModelError::at(Some(entry), Some("id"), format!("must be a string, found {}", other.kind())))
        }
        None => return Err(ModelError::at(Some(entry), Some("id"), "is missing")),
    };
    crate::model::check_id(&id, &entry)?;
    f.element = Some(make(id));
    let kind = match f.string("kind")? {
        None => K::DEFAULT,
        Some(name) => K::from_name(&name).ok_or_else(|| {
            let names: Vec<&str> = K::ALL.iter().map(|k| k.name()).collect();
            let hint = did_you_mean(&name, names.iter().copied(), '"');
            f.error(
                "kind",
                format!(
                    "unknown kind \"{}\"{hint}; expected one of {}",
                    crate::error::printable(&name),
                    names.join(", ")
                ),
            )
        })?,
    };
    Ok((f, kind.keys(), kind))
}

/// Reads a node; also returns a junction's outflow data, if it has any.
fn read_node(
    index: usize,
    value: Value,
    units: &UnitSystem,
    options: &HydraulicOptions,
    node_index: usize,
    time: &mut TimeData,
) -> Result<(Node, Option<JunctionOutflow>), ModelError> {
    let (mut f, keys, kind) = identify::<NodeEntry>(value, Element::NodeEntry(index), Element::Node)?;
    let len = |v: f64| units.length.to_si(v);
    let coordinates = match (f.number("x")?, f.number("y")?) {
        (Some(x), Some(y)) => Some((x, y)),
        (None, None) => None,
        (Some(_), None) => return Err(f.error("y", "is missing (x is given)")),
        (None, Some(_)) => return Err(f.error("x", "is missing (y is given)")),
    };
    let zone = f.string("zone")?;
    let mut outflow = None;
    let (elevation, kind) = match kind {
        NodeEntry::Junction => {
            let elevation = len(f.required_number("elevation")?);
            let single = f.number("demand")?;
            let pattern = f.pattern("pattern", time)?;
            let several = f.take("demands");
            let demands = match (single, several) {
                (Some(_), Some(_)) => {
                    return Err(f.error("demands", "give either demand (with an optional pattern) or demands, not both"))
                }
                (_, Some(list)) => {
                    if pattern.is_some() {
                        return Err(f.error("pattern", "give each entry of demands its own pattern"));
                    }
                    read_demands(&mut f, list, units, time)?
                }
                (single, None) => {
                    let base = units.flow.to_si(single.unwrap_or(0.0));
                    vec![Demand { base, pattern }]
                }
            };
            let demand = demands.iter().map(|d| d.base).sum();
            if demands.len() != 1 || demands[0].pattern.is_some() {
                time.demands.insert(node_index, demands);
            }
            outflow = read_junction_outflow(&mut f, units, options)?;
            (elevation, NodeKind::Junction { demand })
        }
        NodeEntry::Reservoir => {
            let head = len(f.required_number("head")?);
            let elevation = f.number("elevation")?.map(len).unwrap_or(head);
            if let Some(p) = f.pattern("head_pattern", time)? {
                time.head_patterns.insert(node_index, p);
            }
            (elevation, NodeKind::Reservoir { head })
        }
        NodeEntry::Tank => {
            let elevation = len(f.required_number("elevation")?);
            let level = len(f.required_number("level")?);
            let tank = Tank {
                level,
                min_level: len(f.number("min_level")?.unwrap_or(0.0)),
                max_level: f.number("max_level")?.map(len),
                diameter: f.number("diameter")?.map(len),
            };
            if let Some(points) = pairs(&mut f, "volume_curve", "level, volume")? {
                if tank.diameter.is_some() {
                    return Err(f.error("volume_curve", "give either diameter or volume_curve, not both"));
                }
                let volume = len(1.0).powi(3);
                let points = points.into_iter().map(|(l, v)| (len(l), v * volume)).collect();
                let curve = tm::VolumeCurve::new(points).map_err(|m| f.error("volume_curve", m))?;
                time.volume_curves.insert(node_index, curve);
            }
            let mixing = read_mixing(&mut f)?;
            if let Some(m) = mixing {
                time.quality.mixing.insert(node_index, m);
            }
            (elevation, NodeKind::Tank(Box::new(tank)))
        }
    };
    read_node_quality(&mut f, node_index, time)?;
    let element = f.element.clone();
    let Some(Element::Node(id)) = element else { unreachable!("identify sets the element") };
    static ALL_NODE_KEYS: OnceLock<Vec<&'static str>> = OnceLock::new();
    f.finish_with(keys, ALL_NODE_KEYS.get_or_init(NodeEntry::all_keys), kind.label())?;
    Ok((Node { id: id.into(), elevation, coordinates, zone, kind }, outflow))
}

/// Reads `[map]`: what the nodes' coordinates are.
fn read_map(value: Value) -> Result<MapCoordinates, ModelError> {
    let mut f = Fields::from_value(Element::Table("map".into()), value)?;
    let coordinates = match f.string("coordinates")? {
        None => MapCoordinates::default(),
        Some(text) => MapCoordinates::parse(&text).ok_or_else(|| {
            f.error(
                "coordinates",
                format!(
                    "unknown coordinates \"{}\"; expected \"lonlat\" or \"projected\"",
                    crate::error::printable(&text)
                ),
            )
        })?,
    };
    f.finish(MAP_KEYS)?;
    Ok(coordinates)
}

/// A link read from a file: the link, the index of its speed or setting pattern, a pipe's own
/// leakage rate (m³/s per m), its `path`, its named fittings.
type LinkRead = (Link, Option<usize>, Option<f64>, Option<Vec<(f64, f64)>>, Vec<Fitting>);

/// Reads a link; also returns the index of its speed or setting pattern, if it has one, a pipe's
/// own leakage rate, if it has one, the interior vertices of its drawn alignment and its named
/// fittings.
fn read_link(index: usize, value: Value, model: &Model) -> Result<LinkRead, ModelError> {
    let (mut f, keys, kind) = identify::<LinkEntry>(value, Element::LinkEntry(index), Element::Link)?;
    let end = |key: &str, f: &mut Fields| -> Result<usize, ModelError> {
        let id = f.string(key)?.ok_or_else(|| f.missing(key))?;
        model.node_index(&id).ok_or_else(|| {
            let hint = did_you_mean(&id, model.nodes().iter().map(|n| n.id.as_str()), '\'');
            f.error(key, format!("refers to node '{}', which is not defined{hint}", crate::error::printable(&id)))
        })
    };
    let from = end("from", &mut f)?;
    let to = end("to", &mut f)?;
    let status_text = f.string("status")?;
    let path = pairs(&mut f, "path", "x, y")?;
    let pattern = match kind {
        LinkEntry::Pump => f.pattern("speed_pattern", &model.time)?,
        LinkEntry::Valve => f.pattern("setting_pattern", &model.time)?,
        LinkEntry::Pipe => None,
    };
    let fittings = match kind {
        LinkEntry::Pipe | LinkEntry::Valve => read_fittings(&mut f)?,
        LinkEntry::Pump => Vec::new(),
    };
    let mut leakage_rate = None;
    let (kind, status) = match kind {
        LinkEntry::Pipe => {
            if let Some(rate) = f.number("leakage_rate")? {
                let el = f.element.clone().unwrap_or(Element::LinkEntry(index));
                let rate = crate::model::check_value(&el, "leakage_rate", rate, crate::model::Rule::NonNegative)?;
                leakage_rate = Some(leakage_rate_to_si(&model.units, rate));
            }
            (LinkKind::Pipe(read_pipe(&mut f, model)?), link_status(&f, status_text.as_deref(), false)?.0)
        }
        LinkEntry::Pump => {
            (LinkKind::Pump(Box::new(read_pump(&mut f, model)?)), link_status(&f, status_text.as_deref(), false)?.0)
        }
        LinkEntry::Valve => {
            let (status, automatic) = link_status(&f, status_text.as_deref(), true)?;
            (LinkKind::Valve(read_valve(&mut f, model, automatic)?), status)
        }
    };
    let Some(Element::Link(id)) = f.element.clone() else { unreachable!("identify sets the element") };
    static ALL_LINK_KEYS: OnceLock<Vec<&'static str>> = OnceLock::new();
    f.finish_with(keys, ALL_LINK_KEYS.get_or_init(LinkEntry::all_keys), kind.label())?;
    Ok((Link { id: id.into(), from, to, status, kind }, pattern, leakage_rate, path, fittings))
}

/// Reads a link's `fittings`: an array of tables `{ kind, count, radius, angle, opening }`.
/// Values are checked by [`Model::set_fittings`]; here only their types and which keys each kind
/// takes.
fn read_fittings(f: &mut Fields) -> Result<Vec<Fitting>, ModelError> {
    let Some(list) = f.take("fittings") else { return Ok(Vec::new()) };
    let Value::Array(items) = list else {
        return Err(f.error(
            "fittings",
            format!("must be an array of tables such as {{ kind = \"elbow-90\", count = 2 }}, found {}", list.kind()),
        ));
    };
    let mut out = Vec::with_capacity(items.len());
    for (i, item) in items.into_iter().enumerate() {
        let mut e = f.nested(format!("fittings[{}].", i + 1), item)?;
        e.reject_unknown(FITTING_KEYS)?;
        let text = e.string("kind")?.ok_or_else(|| e.error("kind", "is missing"))?;
        let Some(kind) = FittingKind::parse(&text) else {
            let names: Vec<&str> = FittingKind::ALL.iter().map(|k| k.label()).collect();
            let hint = did_you_mean(&text, names.iter().copied(), '"');
            return Err(e.error(
                "kind",
                format!(
                    "unknown fitting kind \"{}\"{hint}; expected one of {} (`ringmain fittings` lists them)",
                    crate::error::printable(&text),
                    names.join(", ")
                ),
            ));
        };
        let mut fitting = Fitting::new(kind);
        if let Some(n) = e.integer("count")? {
            if !(1..=i64::from(u32::MAX)).contains(&n) {
                return Err(e.error("count", format!("must be a whole number of at least 1, found {n}")));
            }
            fitting.count = n as u32;
        }
        let takes = kind.parameters();
        for key in ["radius", "angle", "opening"] {
            let Some(v) = e.number(key)? else {
                if kind == FittingKind::Bend && key == "radius" {
                    return Err(e.error("radius", "is missing: give the bend radius in pipe diameters (r/D >= 0.5)"));
                }
                continue;
            };
            if !takes.contains(&key) {
                return Err(e.error(key, format!("does not apply to a {} fitting", kind.label())));
            }
            match key {
                "radius" => fitting.radius = v,
                "angle" => fitting.angle = v,
                _ => fitting.opening = v,
            }
        }
        e.finish(FITTING_KEYS)?;
        out.push(fitting);
    }
    Ok(out)
}

/// A leakage rate in flow units per km (per 1000 ft where lengths are in ft) into m³/s per m.
pub(super) fn leakage_rate_to_si(units: &UnitSystem, rate: f64) -> f64 {
    units.flow.to_si(rate) / units.length.to_si(1000.0)
}

/// The SI coefficient (m³/s at 1 m of head) of an outlet written in flow and pressure units.
pub(super) fn outlet_coefficient_to_si(units: &UnitSystem, density: f64, coefficient: f64, exponent: f64) -> f64 {
    units.flow.to_si(coefficient) * units.pressure.from_head(1.0, density).powf(exponent)
}

/// Reads `[pressure_demand]`.
fn read_pressure_demand(
    value: Value,
    units: &UnitSystem,
    options: &HydraulicOptions,
) -> Result<PressureDemand, ModelError> {
    let el = Element::Table("pressure_demand".into());
    let mut f = Fields::from_value(el.clone(), value)?;
    f.reject_unknown(PRESSURE_DEMAND_KEYS)?;
    let density = options.water_properties().density;
    let full = crate::model::check_value(
        &el,
        "full_pressure",
        f.required_number("full_pressure")?,
        crate::model::Rule::Finite,
    )?;
    let zero = match f.number("zero_pressure")? {
        Some(z) => units
            .pressure
            .to_head(crate::model::check_value(&el, "zero_pressure", z, crate::model::Rule::Finite)?, density),
        None => PressureDemand::ZERO_PRESSURE,
    };
    let exponent = match f.number("exponent")? {
        Some(e) => crate::model::check_value(&el, "exponent", e, crate::model::Rule::Positive)?,
        None => PressureDemand::EXPONENT,
    };
    f.finish(PRESSURE_DEMAND_KEYS)?;
    let table = PressureDemand { full_pressure: units.pressure.to_head(full, density), zero_pressure: zero, exponent };
    table.check(units.pressure, density)?;
    Ok(table)
}

/// Reads `[background_leakage]` (or the same table under its short name, `table`).
fn read_leakage(
    value: Value,
    table: &str,
    units: &UnitSystem,
    options: &HydraulicOptions,
) -> Result<Leakage, ModelError> {
    let el = Element::Table(table.into());
    let mut f = Fields::from_value(el.clone(), value)?;
    f.reject_unknown(LEAKAGE_KEYS)?;
    let density = options.water_properties().density;
    let rate = match f.number("rate")? {
        Some(r) => {
            leakage_rate_to_si(units, crate::model::check_value(&el, "rate", r, crate::model::Rule::NonNegative)?)
        }
        None => 0.0,
    };
    let reference = f.required_number("reference_pressure")?;
    let reference = crate::model::check_value(&el, "reference_pressure", reference, crate::model::Rule::Positive)?;
    let exponent = match f.number("exponent")? {
        Some(e) => crate::model::check_value(&el, "exponent", e, crate::model::Rule::Positive)?,
        None => Leakage::EXPONENT,
    };
    f.finish(LEAKAGE_KEYS)?;
    Ok(Leakage { rate, reference_pressure: units.pressure.to_head(reference, density), exponent })
}

/// Reads a junction's `full_pressure`, `zero_pressure`, `exponent` and `outlet`.
fn read_junction_outflow(
    f: &mut Fields,
    units: &UnitSystem,
    options: &HydraulicOptions,
) -> Result<Option<JunctionOutflow>, ModelError> {
    let full = f.number("full_pressure")?;
    let zero = f.number("zero_pressure")?;
    let exponent = f.number("exponent")?;
    let outlet = f.take("outlet");
    if full.is_none() && zero.is_none() && exponent.is_none() && outlet.is_none() {
        return Ok(None);
    }
    let el = f.element.clone().unwrap_or(Element::Table("nodes".into()));
    let density = options.water_properties().density;
    let pressure = |key: &str, v: Option<f64>| -> Result<Option<f64>, ModelError> {
        v.map(|v| {
            crate::model::check_value(&el, key, v, crate::model::Rule::Finite)
                .map(|v| units.pressure.to_head(v, density))
        })
        .transpose()
    };
    let mut j = JunctionOutflow {
        full_pressure: pressure("full_pressure", full)?,
        zero_pressure: pressure("zero_pressure", zero)?,
        exponent: exponent
            .map(|e| crate::model::check_value(&el, "exponent", e, crate::model::Rule::Positive))
            .transpose()?,
        outlet: None,
    };
    if let Some(value) = outlet {
        let mut o = f.nested("outlet.".into(), value)?;
        o.reject_unknown(OUTLET_KEYS)?;
        let c = o.required_number("coefficient")?;
        let c = crate::model::check_value(&el, "outlet.coefficient", c, crate::model::Rule::NonNegative)?;
        let e = match o.number("exponent")? {
            Some(e) => crate::model::check_value(&el, "outlet.exponent", e, crate::model::Rule::Positive)?,
            None => Outlet::EXPONENT,
        };
        o.finish(OUTLET_KEYS)?;
        j.outlet = Some(Outlet { coefficient: outlet_coefficient_to_si(units, density, c, e), exponent: e });
    }
    Ok(Some(j))
}

/// Reads `status`: open | closed, and for valves also automatic (the default for valves).
/// Returns the status and whether a valve is automatic.
fn link_status(f: &Fields, text: Option<&str>, valve: bool) -> Result<(LinkStatus, bool), ModelError> {
    match (text, valve) {
        (None, true) | (Some("automatic"), true) => Ok((LinkStatus::Open, true)),
        (None, false) | (Some("open"), _) => Ok((LinkStatus::Open, false)),
        (Some("closed"), _) => Ok((LinkStatus::Closed, false)),
        (Some(other), _) => {
            let expected = if valve { "\"automatic\", \"open\" or \"closed\"" } else { "\"open\" or \"closed\"" };
            Err(f
                .error("status", format!("unknown status \"{}\"; expected {expected}", crate::error::printable(other))))
        }
    }
}

fn read_pipe(f: &mut Fields, model: &Model) -> Result<Pipe, ModelError> {
    let units = &model.units;
    let roughness = f.required_number("roughness")?;
    let pipe = Pipe {
        length: units.length.to_si(f.required_number("length")?),
        diameter: units.diameter.to_si(f.required_number("diameter")?),
        roughness: match model.options.headloss {
            HeadLossLaw::HazenWilliams => roughness,
            HeadLossLaw::DarcyWeisbach => units.roughness.to_si(roughness),
        },
        minor_loss: f.number("minor_loss")?.unwrap_or(0.0),
        check_valve: f.boolean("check_valve")?.unwrap_or(false),
    };
    Ok(pipe)
}

/// Reads an array of `[x, y]` pairs.
fn pairs(f: &mut Fields, key: &str, what: &str) -> Result<Option<Vec<(f64, f64)>>, ModelError> {
    let Some(value) = f.take(key) else { return Ok(None) };
    let Value::Array(items) = value else {
        return Err(f.error(key, format!("must be an array of [{what}] pairs, found {}", value.kind())));
    };
    let mut out = Vec::with_capacity(items.len());
    for (i, item) in items.into_iter().enumerate() {
        let pair = match &item {
            Value::Array(xy) if xy.len() == 2 => {
                let num = |v: &Value| match v {
                    Value::Int(i) => Some(*i as f64),
                    Value::Float(x) => Some(*x),
                    _ => None,
                };
                num(&xy[0]).zip(num(&xy[1]))
            }
            _ => None,
        };
        match pair {
            Some((x, y)) if x.is_finite() && y.is_finite() => out.push((x, y)),
            _ => return Err(f.error(key, format!("point {} must be a pair of finite numbers [{what}]", i + 1))),
        }
    }
    Ok(Some(out))
}

fn read_pump(f: &mut Fields, model: &Model) -> Result<Pump, ModelError> {
    let units = &model.units;
    let curve = pairs(f, "head_curve", "flow, head")?;
    let power = f.number("power")?;
    let drive = match (curve, power) {
        (Some(_), Some(_)) => return Err(f.error("power", "give either head_curve or power, not both")),
        (None, None) => return Err(f.error("head_curve", "is missing (or give power for a constant-power pump)")),
        (Some(points), None) => {
            let points: Vec<(f64, f64)> =
                points.into_iter().map(|(q, h)| (units.flow.to_si(q), units.length.to_si(h))).collect();
            let curve = HeadCurve::fit(&points).map_err(|e| f.error("head_curve", e.0))?;
            PumpDrive::Curve { points, curve }
        }
        (None, Some(p)) => {
            // kW in SI models, horsepower in US-customary models.
            PumpDrive::Power(model.converter().to_si(Quantity::Power, p))
        }
    };
    let eff_points = pairs(f, "efficiency_curve", "flow, percent")?;
    let eff_const = f.number("efficiency")?;
    let (efficiency_points, efficiency) = match (eff_points, eff_const) {
        (Some(_), Some(_)) => return Err(f.error("efficiency", "give either efficiency_curve or efficiency, not both")),
        (Some(points), None) => {
            let points: Vec<(f64, f64)> = points.into_iter().map(|(q, e)| (units.flow.to_si(q), e / 100.0)).collect();
            let eff = Efficiency::fit(&points).map_err(|e| f.error("efficiency_curve", e.0))?;
            (Some(points), eff)
        }
        (None, Some(e)) => {
            if !(e > 0.0 && e <= 100.0) {
                return Err(f.error("efficiency", format!("must be above 0 and at most 100 percent, found {e}")));
            }
            (None, Efficiency::Constant(e / 100.0))
        }
        (None, None) => (None, Efficiency::Constant(Efficiency::DEFAULT)),
    };
    let speed = f.number("speed")?.unwrap_or(1.0);
    let elevation = f.number("elevation")?.map(|z| units.length.to_si(z));
    let npsh_required = pairs(f, "npsh_required_curve", "flow, head")?
        .map(|points| points.into_iter().map(|(q, h)| (units.flow.to_si(q), units.length.to_si(h))).collect());
    Ok(Pump { drive, efficiency_points, efficiency, speed, elevation, npsh_required })
}

fn read_valve(f: &mut Fields, model: &Model, automatic: bool) -> Result<Valve, ModelError> {
    let units = &model.units;
    let text = f.string("valve")?.ok_or_else(|| {
        f.error(
            "valve",
            "is missing; expected \"pressure-reducing\", \"pressure-sustaining\", \"flow-control\" or \"throttle\"",
        )
    })?;
    let Some(valve) = ValveType::parse(&text) else {
        let hint = did_you_mean(&text, ValveType::ALL.iter().map(|v| v.label()), '"');
        return Err(f.error(
            "valve",
            format!(
                "unknown valve type \"{}\"{hint}; expected \"pressure-reducing\", \"pressure-sustaining\", \"flow-control\" or \"throttle\"",
                crate::error::printable(&text)
            ),
        ));
    };
    let raw = f.required_number("setting")?;
    let setting = model.converter().to_si(valve.setting_quantity(), raw);
    Ok(Valve {
        valve,
        diameter: units.diameter.to_si(f.required_number("diameter")?),
        setting,
        minor_loss: f.number("minor_loss")?.unwrap_or(0.0),
        automatic,
    })
}

/// Reads a `[[quality]]` entry (its `source` node is found once the nodes are read).
fn read_constituent(
    index: usize,
    value: Value,
    units: &UnitSystem,
    known: &crate::quality::QualityData,
) -> Result<crate::quality::Constituent, ModelError> {
    use crate::quality::{Constituent, ConstituentKind, Reaction};
    let (mut f, keys, kind) =
        identify::<QualityEntry>(value, Element::Entry("quality".into(), index), Element::Constituent)?;
    let Some(Element::Constituent(id)) = f.element.clone() else { unreachable!("identify sets the element") };
    if known.index(&id).is_some() {
        return Err(f.error("id", "is used by another [[quality]] entry; constituent ids must be unique"));
    }
    let el = Element::Constituent(id.clone());
    let number = |f: &mut Fields, key: &str, rule: crate::model::Rule| -> Result<Option<f64>, ModelError> {
        match f.number(key)? {
            Some(v) => Ok(Some(crate::model::check_value(&el, key, v, rule)?)),
            None => Ok(None),
        }
    };
    let per_day = 1.0 / tm::DAY;
    let (kind, unit, initial) = match kind {
        QualityEntry::Age => {
            let initial = number(&mut f, "initial", crate::model::Rule::NonNegative)?.unwrap_or(0.0) * tm::HOUR;
            (ConstituentKind::Age, "h".to_owned(), initial)
        }
        QualityEntry::Source => {
            let source = f.string("source")?.ok_or_else(|| f.missing("source"))?;
            let initial = number(&mut f, "initial", crate::model::Rule::NonNegative)?.unwrap_or(0.0);
            if initial > 100.0 {
                return Err(f.error("initial", format!("is a percentage, at most 100, found {initial}")));
            }
            // The node is found in `resolve_sources`; until then its name waits in `unit`.
            (ConstituentKind::Source { node: usize::MAX }, source, initial)
        }
        QualityEntry::Substance => {
            let unit = f.string("unit")?.unwrap_or_else(|| "mg/L".to_owned());
            if unit.trim().is_empty() || unit.chars().any(char::is_control) {
                return Err(f.error("unit", "must be a label such as \"mg/L\""));
            }
            let bulk = number(&mut f, "bulk_rate", crate::model::Rule::Finite)?.unwrap_or(0.0) * per_day;
            let wall = number(&mut f, "wall_rate", crate::model::Rule::Finite)?
                .map_or(0.0, |w| units.length.to_si(w) * per_day);
            let diffusivity = number(&mut f, "diffusivity", crate::model::Rule::NonNegative)?
                .unwrap_or(crate::quality::constituents::DIFFUSIVITY);
            let initial = number(&mut f, "initial", crate::model::Rule::NonNegative)?.unwrap_or(0.0);
            (ConstituentKind::Substance(Reaction { bulk_rate: bulk, wall_rate: wall, diffusivity }), unit, initial)
        }
    };
    static ALL: OnceLock<Vec<&'static str>> = OnceLock::new();
    let label = match kind {
        ConstituentKind::Age => "age constituent",
        ConstituentKind::Source { .. } => "source trace",
        ConstituentKind::Substance(_) => "substance",
    };
    f.finish_with(keys, ALL.get_or_init(QualityEntry::all_keys), label)?;
    Ok(Constituent { id, kind, unit, initial })
}

/// Finds the node each source trace follows; it must be a reservoir or a tank.
fn resolve_sources(model: &mut Model) -> Result<(), ModelError> {
    use crate::quality::ConstituentKind;
    let mut found = Vec::new();
    for (c, con) in model.time.quality.constituents.iter().enumerate() {
        if !matches!(con.kind, ConstituentKind::Source { .. }) {
            continue;
        }
        let name = &con.unit;
        let el = Some(Element::Constituent(con.id.clone()));
        let Some(i) = model.node_index(name) else {
            let hint = did_you_mean(name, model.nodes().iter().map(|n| n.id.as_str()), '\'');
            return Err(ModelError::at(
                el,
                Some("source"),
                format!("refers to node '{}', which is not defined{hint}", crate::error::printable(name)),
            ));
        };
        if !matches!(model.nodes()[i].kind, NodeKind::Reservoir { .. } | NodeKind::Tank(_)) {
            return Err(ModelError::at(
                el,
                Some("source"),
                format!(
                    "node '{}' is a {}; a source trace follows the water of a reservoir or a tank",
                    crate::error::printable(name),
                    model.nodes()[i].kind.label()
                ),
            ));
        }
        found.push((c, i));
    }
    for (c, i) in found {
        let con = &mut model.time.quality.constituents[c];
        con.kind = ConstituentKind::Source { node: i };
        con.unit = "%".to_owned();
    }
    Ok(())
}

/// Reads a tank's `mixing` and `mixing_fraction`.
fn read_mixing(f: &mut Fields) -> Result<Option<crate::quality::Mixing>, ModelError> {
    use crate::quality::Mixing;
    let text = f.string("mixing")?;
    let fraction = f.number("mixing_fraction")?;
    let mixing = match text.as_deref() {
        None => None,
        Some("complete") => Some(Mixing::Complete),
        Some("two-zone") => {
            let share = fraction.ok_or_else(|| {
                f.error("mixing_fraction", "is missing: a two-zone tank needs the inlet zone's share (0 to 1)")
            })?;
            if !(share > 0.0 && share < 1.0) {
                return Err(f.error("mixing_fraction", format!("must be above 0 and below 1, found {share}")));
            }
            return Ok(Some(Mixing::TwoZone(share)));
        }
        Some("plug-flow") => Some(Mixing::PlugFlow),
        Some("stacked") => Some(Mixing::Stacked),
        Some(other) => {
            let hint = did_you_mean(other, Mixing::LABELS.iter().copied(), '"');
            return Err(f.error(
                "mixing",
                format!(
                    "unknown mixing model \"{}\"{hint}; expected \"complete\", \"two-zone\", \"plug-flow\" or \"stacked\"",
                    crate::error::printable(other)
                ),
            ));
        }
    };
    if fraction.is_some() {
        return Err(f.error("mixing_fraction", "applies only with mixing = \"two-zone\""));
    }
    Ok(mixing)
}

/// Reads a node's `quality`, `quality_pattern`, `initial_quality` and `booster` tables (keyed by
/// constituent id).
fn read_node_quality(f: &mut Fields, node: usize, time: &mut TimeData) -> Result<(), ModelError> {
    use crate::quality::{ConstituentKind, SourceValue};
    let table = |f: &mut Fields, key: &str| -> Result<Vec<(usize, Value)>, ModelError> {
        let Some(value) = f.take(key) else { return Ok(Vec::new()) };
        let Value::Table(entries) = value else {
            return Err(f.error(
                key,
                format!(
                    "must be a table of constituent ids, such as {key} = {{ chlorine = 0.5 }}, found {}",
                    value.kind()
                ),
            ));
        };
        let q = &time.quality;
        let mut out = Vec::new();
        for (k, v) in entries {
            let Some(c) = q.index(k.as_ref()) else {
                let hint = did_you_mean(k.as_ref(), q.constituents.iter().map(|c| c.id.as_str()), '\'');
                let known = if q.constituents.is_empty() {
                    "the model has no [[quality]] entries".to_owned()
                } else {
                    format!(
                        "known: {}",
                        q.constituents.iter().map(|c| format!("'{}'", c.id)).collect::<Vec<_>>().join(", ")
                    )
                };
                return Err(f.error(
                    key,
                    format!(
                        "names constituent '{}', which is not defined in [[quality]]{hint}; {known}",
                        crate::error::printable(k.as_ref())
                    ),
                ));
            };
            out.push((c, v));
        }
        Ok(out)
    };
    let initial = table(f, "initial_quality")?;
    let source = table(f, "quality")?;
    let pattern = table(f, "quality_pattern")?;
    let booster = table(f, "booster")?;
    let q = &time.quality;
    let num = |f: &Fields, key: &str, c: usize, v: &Value| -> Result<f64, ModelError> {
        let x = match v {
            Value::Int(i) => *i as f64,
            Value::Float(x) => *x,
            other => {
                return Err(f.error(
                    key,
                    format!("the value for '{}' must be a number, found {}", q.constituents[c].id, other.kind()),
                ))
            }
        };
        if !x.is_finite() || x < 0.0 {
            return Err(f.error(
                key,
                format!("the value for '{}' must be a finite number, not negative, found {x}", q.constituents[c].id),
            ));
        }
        if matches!(q.constituents[c].kind, ConstituentKind::Source { .. }) && x > 100.0 {
            return Err(f.error(
                key,
                format!("the value for '{}' is a percentage, at most 100, found {x}", q.constituents[c].id),
            ));
        }
        Ok(x)
    };
    let substance_only = |f: &Fields, key: &str, c: usize| -> Result<(), ModelError> {
        match q.constituents[c].kind {
            ConstituentKind::Substance(_) => Ok(()),
            ConstituentKind::Age => Err(f.error(
                key,
                format!(
                    "'{}' is a water age: it starts at 0 where water leaves a reservoir and cannot be set here",
                    q.constituents[c].id
                ),
            )),
            ConstituentKind::Source { .. } => Err(f.error(
                key,
                format!(
                    "'{}' is a source trace: its source is the node named by its 'source' key",
                    q.constituents[c].id
                ),
            )),
        }
    };
    let mut init = Vec::new();
    for (c, v) in &initial {
        let x = num(f, "initial_quality", *c, v)?;
        let scale = if matches!(q.constituents[*c].kind, ConstituentKind::Age) { tm::HOUR } else { 1.0 };
        init.push((*c, x * scale));
    }
    let mut sources = Vec::new();
    for (c, v) in &source {
        substance_only(f, "quality", *c)?;
        sources.push(SourceValue { constituent: *c, value: num(f, "quality", *c, v)?, pattern: None });
    }
    for (c, v) in pattern {
        let Value::Str(id) = v else {
            return Err(f.error(
                "quality_pattern",
                format!("the value for '{}' must be a pattern id (a string), found {}", q.constituents[c].id, v.kind()),
            ));
        };
        let Some(p) = time.pattern_index(&id) else {
            return Err(f.error(
                "quality_pattern",
                format!("refers to pattern '{}', which is not defined in [[patterns]]", crate::error::printable(&id)),
            ));
        };
        let Some(s) = sources.iter_mut().find(|s| s.constituent == c) else {
            return Err(f.error(
                "quality_pattern",
                format!("gives '{}' a pattern but quality gives it no value to multiply", q.constituents[c].id),
            ));
        };
        s.pattern = Some(p);
    }
    let mut boost = Vec::new();
    for (c, v) in &booster {
        substance_only(f, "booster", *c)?;
        boost.push((*c, num(f, "booster", *c, v)?));
    }
    let q = &mut time.quality;
    if !init.is_empty() {
        q.initial.insert(node, init);
    }
    if !sources.is_empty() {
        q.sources.insert(node, sources);
    }
    if !boost.is_empty() {
        q.boosters.insert(node, boost);
    }
    Ok(())
}

fn read_simulation(value: Value, units: &UnitSystem) -> Result<SimulationSettings, ModelError> {
    let el = Element::Table("simulation".into());
    let mut f = Fields::from_value(el.clone(), value)?;
    let positive = |f: &Fields, key: &str, v: f64| -> Result<f64, ModelError> {
        if v > 0.0 {
            Ok(v)
        } else {
            Err(f.error(key, "must be longer than zero"))
        }
    };
    let duration = f.duration("duration")?.ok_or_else(|| f.missing("duration"))?;
    let duration = positive(&f, "duration", duration)?;
    let hydraulic_step = match f.duration("hydraulic_step")? {
        Some(v) => positive(&f, "hydraulic_step", v)?,
        None => SimulationSettings::HYDRAULIC_STEP.min(duration),
    };
    let report_interval = match f.duration("report_interval")? {
        Some(v) => positive(&f, "report_interval", v)?,
        None => hydraulic_step,
    };
    let start_clock = match f.string("start_clock")? {
        Some(text) => tm::parse_clock(&text).map_err(|m| f.error("start_clock", m))?,
        None => 0.0,
    };
    let level_tolerance = match f.number("level_tolerance")? {
        Some(t) => {
            units.length.to_si(crate::model::check_value(&el, "level_tolerance", t, crate::model::Rule::Positive)?)
        }
        None => SimulationSettings::LEVEL_TOLERANCE,
    };
    let transport_step = match f.duration("transport_step")? {
        Some(v) => Some(positive(&f, "transport_step", v)?),
        None => None,
    };
    let quality_tolerance = match f.number("quality_tolerance")? {
        Some(t) => {
            let t = crate::model::check_value(&el, "quality_tolerance", t, crate::model::Rule::NonNegative)?;
            if t >= 1.0 {
                return Err(f.error("quality_tolerance", format!("is a relative tolerance, below 1, found {t}")));
            }
            Some(t)
        }
        None => None,
    };
    f.finish(SIMULATION_KEYS)?;
    Ok(SimulationSettings {
        duration,
        hydraulic_step,
        report_interval,
        start_clock,
        level_tolerance,
        transport_step,
        quality_tolerance,
    })
}

fn read_energy(value: Value, time: &TimeData) -> Result<Energy, ModelError> {
    let el = Element::Table("electricity".into());
    let mut f = Fields::from_value(el.clone(), value)?;
    let price = match f.number("price_per_kwh")? {
        Some(p) => crate::model::check_value(&el, "price_per_kwh", p, crate::model::Rule::NonNegative)?,
        None => 0.0,
    };
    let tariff = f.pattern("tariff_pattern", time)?;
    let currency = f.string("currency")?;
    f.finish(ENERGY_KEYS)?;
    Ok(Energy { price, tariff, currency })
}

/// Reads the `id` of an entry of `patterns` or `controls`.
fn entry_id(f: &mut Fields, table: &str, index: usize, make: fn(String) -> Element) -> Result<String, ModelError> {
    let entry = Element::Entry(table.into(), index);
    let id = match f.take("id") {
        Some(Value::Str(s)) => s,
        Some(other) => {
            return Err(ModelError::at(Some(entry), Some("id"), format!("must be a string, found {}", other.kind())))
        }
        None => return Err(ModelError::at(Some(entry), Some("id"), "is missing")),
    };
    crate::model::check_id(&id, &entry)?;
    f.element = Some(make(id.clone()));
    Ok(id)
}

fn read_pattern(index: usize, value: Value, time: &TimeData) -> Result<TimePattern, ModelError> {
    let mut f = Fields::from_value(Element::Entry("patterns".into(), index), value)?;
    let id = entry_id(&mut f, "patterns", index, Element::Pattern)?;
    if time.pattern_index(&id).is_some() {
        return Err(f.error("id", "is used by another pattern; pattern ids must be unique"));
    }
    let step = f.duration("step")?.ok_or_else(|| f.missing("step"))?;
    if step <= 0.0 {
        return Err(f.error("step", "must be longer than zero"));
    }
    let Some(list) = f.take("multipliers") else { return Err(f.missing("multipliers")) };
    let Value::Array(items) = list else {
        return Err(f.error("multipliers", format!("must be an array of numbers, found {}", list.kind())));
    };
    if items.is_empty() {
        return Err(f.error("multipliers", "must hold at least one number"));
    }
    let mut multipliers = Vec::with_capacity(items.len());
    for (i, item) in items.into_iter().enumerate() {
        let v = match item {
            Value::Int(n) => n as f64,
            Value::Float(x) => x,
            other => {
                return Err(f.error("multipliers", format!("entry {} must be a number, found {}", i + 1, other.kind())))
            }
        };
        if !(v.is_finite() && v >= 0.0) {
            return Err(
                f.error("multipliers", format!("entry {} must be a finite number not below zero, found {v}", i + 1))
            );
        }
        multipliers.push(v);
    }
    f.finish(PATTERN_KEYS)?;
    Ok(TimePattern { id, step, multipliers })
}

fn read_demands(f: &mut Fields, list: Value, units: &UnitSystem, time: &TimeData) -> Result<Vec<Demand>, ModelError> {
    let Value::Array(items) = list else {
        return Err(
            f.error("demands", format!("must be an array of tables {{ base, pattern }}, found {}", list.kind()))
        );
    };
    if items.is_empty() {
        return Err(f.error("demands", "must hold at least one { base, pattern } table"));
    }
    let mut out = Vec::with_capacity(items.len());
    for (i, item) in items.into_iter().enumerate() {
        let mut d = f.nested(format!("demands[{}].", i + 1), item)?;
        d.reject_unknown(DEMAND_KEYS)?;
        let base = d.required_number("base")?;
        if !base.is_finite() {
            return Err(d.error("base", format!("must be finite, found {base}")));
        }
        let pattern = d.pattern("pattern", time)?;
        d.finish(DEMAND_KEYS)?;
        out.push(Demand { base: units.flow.to_si(base), pattern });
    }
    Ok(out)
}

fn read_control(index: usize, value: Value, model: &Model) -> Result<Control, ModelError> {
    let mut f = Fields::from_value(Element::Entry("controls".into(), index), value)?;
    let id = entry_id(&mut f, "controls", index, Element::Control)?;
    if model.time.controls.iter().any(|c| c.id == id) {
        return Err(f.error("id", "is used by another control; control ids must be unique"));
    }
    let link_id = f.string("link")?.ok_or_else(|| f.missing("link"))?;
    let Some(link) = model.link_index(&link_id) else {
        let hint = did_you_mean(&link_id, model.links().iter().map(|l| l.id.as_str()), '\'');
        return Err(f.error(
            "link",
            format!("refers to link '{}', which is not defined{hint}", crate::error::printable(&link_id)),
        ));
    };
    let l = &model.links()[link];
    let status = f.string("status")?;
    let speed = f.number("speed")?;
    let setting = f.number("setting")?;
    let action = match (status, speed, setting) {
        (Some(s), None, None) => match s.as_str() {
            "open" => Action::Open,
            "closed" => Action::Close,
            "automatic" if l.as_valve().is_some() => Action::Automatic,
            "automatic" => return Err(f.error("status", "\"automatic\" applies only to valves")),
            other => {
                return Err(f.error(
                    "status",
                    format!(
                        "unknown status \"{}\"; expected \"open\", \"closed\" or (valves) \"automatic\"",
                        crate::error::printable(other)
                    ),
                ))
            }
        },
        (None, Some(v), None) => {
            if l.as_pump().is_none() {
                return Err(
                    f.error("speed", format!("only pumps have a speed; link '{link_id}' is a {}", l.kind.label()))
                );
            }
            if !(v.is_finite() && v >= 0.0) {
                return Err(f.error("speed", format!("must be a finite number not below zero, found {v}")));
            }
            Action::Speed(v)
        }
        (None, None, Some(v)) => {
            let Some(valve) = l.as_valve() else {
                return Err(f.error(
                    "setting",
                    format!("only valves have a setting; link '{link_id}' is a {}", l.kind.label()),
                ));
            };
            let si = model.converter().to_si(valve.valve.setting_quantity(), v);
            let ok = match valve.valve {
                ValveType::PressureReducing | ValveType::PressureSustaining => si.is_finite(),
                _ => si.is_finite() && si >= 0.0,
            };
            if !ok {
                return Err(
                    f.error("setting", format!("is not a valid setting for a {} valve: {v}", valve.valve.label()))
                );
            }
            Action::Setting(si)
        }
        (None, None, None) => {
            return Err(f.error("status", "is missing: give the action as status, speed (pumps) or setting (valves)"))
        }
        _ => return Err(f.error("status", "give one action only: status, speed or setting")),
    };
    let Some(when) = f.take("when") else { return Err(f.missing("when")) };
    let when = read_condition(&f, "when.".into(), when, model)?;
    let priority = f.integer("priority")?.unwrap_or(0);
    f.finish(CONTROL_KEYS)?;
    Ok(Control { id, link, action, when, priority })
}

fn read_condition(parent: &Fields, prefix: String, value: Value, model: &Model) -> Result<Condition, ModelError> {
    let mut f = parent.nested(prefix.clone(), value)?;
    f.reject_unknown(CONDITION_KEYS)?;
    let units = &model.units;
    let density = model.options.water_properties().density;
    let node_ref = |f: &mut Fields, key: &str| -> Result<Option<usize>, ModelError> {
        let Some(id) = f.string(key)? else { return Ok(None) };
        match model.node_index(&id) {
            Some(i) => Ok(Some(i)),
            None => {
                let hint = did_you_mean(&id, model.nodes().iter().map(|n| n.id.as_str()), '\'');
                Err(f.error(
                    key,
                    format!("refers to node '{}', which is not defined{hint}", crate::error::printable(&id)),
                ))
            }
        }
    };
    let tank = node_ref(&mut f, "tank")?;
    let node = node_ref(&mut f, "node")?;
    let level_above = f.number("level_above")?;
    let level_below = f.number("level_below")?;
    let pressure_above = f.number("pressure_above")?;
    let pressure_below = f.number("pressure_below")?;
    let clock = f.string("clock")?;
    let after = f.duration("after")?;
    let all = f.take("all");
    let any = f.take("any");
    let forms = [tank.is_some(), node.is_some(), clock.is_some(), after.is_some(), all.is_some(), any.is_some()];
    if forms.iter().filter(|b| **b).count() != 1 {
        let key = if forms.iter().any(|b| *b) { "tank" } else { "clock" };
        return Err(f.error(
            key,
            "a condition needs exactly one of: tank (with level_above or level_below), node (with pressure_above \
             or pressure_below), clock, after, all, any",
        ));
    }
    let threshold = |f: &Fields, above: Option<f64>, below: Option<f64>, keys: [&str; 2]| {
        match (above, below) {
            (Some(v), None) => Ok((true, v, keys[0])),
            (None, Some(v)) => Ok((false, v, keys[1])),
            (None, None) => Err(f.error(keys[0], format!("is missing (or give {})", keys[1]))),
            (Some(_), Some(_)) => Err(f.error(keys[1], format!("give either {} or {}, not both", keys[0], keys[1]))),
        }
        .and_then(|(up, v, key)| {
            if v.is_finite() {
                Ok((up, v))
            } else {
                Err(f.error(key, format!("must be finite, found {v}")))
            }
        })
    };
    let condition = if let Some(t) = tank {
        if !matches!(model.nodes()[t].kind, NodeKind::Tank(_)) {
            return Err(f.error("tank", format!("node '{}' is not a tank", model.nodes()[t].id)));
        }
        let (up, v) = threshold(&f, level_above, level_below, ["level_above", "level_below"])?;
        if v < 0.0 {
            return Err(f.error(
                if up { "level_above" } else { "level_below" },
                "must not be negative (a level above the tank floor)",
            ));
        }
        let level = units.length.to_si(v);
        if up {
            Condition::LevelAbove { tank: t, level }
        } else {
            Condition::LevelBelow { tank: t, level }
        }
    } else if let Some(n) = node {
        let (up, v) = threshold(&f, pressure_above, pressure_below, ["pressure_above", "pressure_below"])?;
        let pressure = units.pressure.to_head(v, density);
        if up {
            Condition::PressureAbove { node: n, pressure }
        } else {
            Condition::PressureBelow { node: n, pressure }
        }
    } else if let Some(text) = clock {
        Condition::Clock(tm::parse_clock(&text).map_err(|m| f.error("clock", m))?)
    } else if let Some(t) = after {
        Condition::After(t)
    } else {
        let (key, list) = match (all, any) {
            (Some(v), _) => ("all", v),
            (_, Some(v)) => ("any", v),
            _ => unreachable!("one form is present"),
        };
        let Value::Array(items) = list else {
            return Err(f.error(key, format!("must be an array of conditions, found {}", list.kind())));
        };
        if items.is_empty() {
            return Err(f.error(key, "must hold at least one condition"));
        }
        let mut parts = Vec::with_capacity(items.len());
        for (i, item) in items.into_iter().enumerate() {
            parts.push(read_condition(&f, format!("{prefix}{key}[{}].", i + 1), item, model)?);
        }
        if key == "all" {
            Condition::All(parts)
        } else {
            Condition::Any(parts)
        }
    };
    if (level_above.is_some() || level_below.is_some()) && tank.is_none() {
        let key = if level_above.is_some() { "level_above" } else { "level_below" };
        return Err(f.error(key, "needs tank"));
    }
    if (pressure_above.is_some() || pressure_below.is_some()) && node.is_none() {
        let key = if pressure_above.is_some() { "pressure_above" } else { "pressure_below" };
        return Err(f.error(key, "needs node"));
    }
    f.finish(CONDITION_KEYS)?;
    Ok(condition)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::format::read_str;

    #[test]
    fn every_element_key_is_shared_not_copied() {
        let parsed_key = |text: &str| match tree::parse_json(text).unwrap() {
            Value::Table(mut entries) => entries.remove(0).0,
            other => panic!("{other:?}"),
        };
        let kinds = NodeEntry::ALL.iter().map(|k| k.keys()).chain(LinkEntry::ALL.iter().map(|k| k.keys()));
        for keys in kinds {
            for key in keys {
                let parsed = parsed_key(&format!("{{\"{key}\": 1}}"));
                assert!(matches!(parsed, Key::Borrowed(k) if k == *key), "{key} was copied: {parsed:?}");
            }
        }
        assert!(matches!(parsed_key("{\"lenght\": 1}"), Key::Owned(k) if k == "lenght"));
    }

    #[test]
    fn streamed_json_reader_builds_the_same_model_as_the_tree_reader() {
        let mut model = crate::generate::generate(&crate::generate::NetworkSpec::new(1_500, 3)).unwrap();
        model.units = UnitSystem { flow: crate::units::FlowUnit::parse("gpm").unwrap(), ..UnitSystem::default() };
        let k = model.links().len() - 1;
        model.set_status(k, LinkStatus::Closed).unwrap();
        let text = super::super::write::to_string(&model, Format::Json);
        let streamed = read_json_stream(text.as_bytes()).expect("the one-pass reader takes a written model");
        assert_eq!(streamed, read_tree(&text, Format::Json).unwrap());
        // Where the one-pass reader gives up, the tree reader's error comes out.
        let broken = text.replacen("\"length\"", "\"lenght\"", 1);
        assert!(read_json_stream(broken.as_bytes()).is_none());
        let e = read_str(&broken, Format::Json, "broken.json").unwrap_err();
        assert!(e.to_string().contains("lenght"), "{e}");
        // Keys in alphabetical order (links before nodes, units last): one pass gives up, and the
        // whole-text reader builds the same model.
        let sorted = serde_json::to_string(&serde_json::from_str::<serde_json::Value>(&text).unwrap()).unwrap();
        assert!(sorted.find("\"links\"") < sorted.find("\"nodes\""));
        assert!(read_json_stream(sorted.as_bytes()).is_none());
        assert_eq!(read_str(&sorted, Format::Json, "sorted.json").unwrap(), streamed);
    }

    /// The line reader takes what the writer writes (with controls and patterns too), builds
    /// the model the tree reader builds, and gives up on every departure from the layout: other
    /// line breaks, a missing or extra comma, a setting after the nodes, trailing text, an error.
    #[test]
    fn line_json_reader_builds_the_same_model_or_gives_up() {
        let demo = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/../examples/hillside-day.toml"))
            .expect("the demo model");
        let mut models = vec![read_str(&demo, Format::Toml, "demo").unwrap()];
        models.push(crate::generate::generate(&crate::generate::NetworkSpec::new(800, 5)).unwrap());
        for model in models {
            let text = super::super::write::to_string(&model, Format::Json);
            let lines = read_json_lines(text.as_bytes()).expect("the line reader takes a written model");
            assert_eq!(lines, read_tree(&text, Format::Json).unwrap());
            let give_up = |edited: String, what: &str| {
                assert!(read_json_lines(edited.as_bytes()).is_none(), "{what}");
            };
            let second_node = text.find("\n    {\"id\"").unwrap();
            let second_node = second_node + 1 + text[second_node + 1..].find("\n    {\"id\"").unwrap();
            give_up(text.replacen("\"length\"", "\"lenght\"", 1), "an unknown key");
            give_up(text.replacen("},\n    {", "}\n    {", 1), "a missing comma");
            give_up(text.replacen("}\n  ],", "},\n  ],", 1), "a comma after the last element");
            // A break inside an element: the line reader gives up or reads the very same model.
            let broken = format!("{}\n", &text[..second_node]) + &text[second_node + 1..].replacen(", ", ",\n", 1);
            if let Some(m) = read_json_lines(broken.as_bytes()) {
                assert_eq!(m, read_tree(&broken, Format::Json).unwrap(), "a break inside an element");
            }
            give_up(
                text.replacen("\n  \"links\": [", "\n  \"title\": \"late\",\n  \"links\": [", 1),
                "a setting after the nodes",
            );
            give_up(format!("{text}x"), "trailing text");
            give_up(
                text.replacen("\"nodes\": [", "\"nodes\": [\n    {\"id\": \"extra\"}],\n  \"nodes\": [", 1),
                "nodes twice",
            );
            // Trailing white space is fine.
            assert!(read_json_lines(format!("{text}\n\n").as_bytes()).is_some());
        }
    }
}
