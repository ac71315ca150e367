//! The values C changes between solves, and where they live.
//!
//! A model handle keeps, beside its [`Model`], the solver's own input: a
//! [`Conditions`](ringmain_core::solve::Conditions) made once from the model. Every setter of a
//! demand, reservoir head, tank level, link status, pump speed, valve setting, pipe roughness or
//! pipe diameter, one element or a whole array, writes the conditions (through their validating
//! setters) and never the model; every getter of those values reads the conditions. The next
//! solve then rebuilds only the laws of the links whose inputs changed, and neither copies nor
//! validates the model again.
//!
//! The model catches up with the conditions ([`ringmain_model::catch_up`]) only when it is
//! needed whole: before nodes or links are added (a new structure gets new conditions), and, on a
//! copy, when the model is written, cloned or simulated ([`ringmain_model::current`]).
//!
//! One description per value ([`Input`]: its key, the kind of element it applies to, its unit)
//! serves the single-element functions (`ringmain_model_set_demand`...) and the whole-array ones
//! (`ringmain_model_set_demands`...) alike.

use crate::boundary::{copy_out, handle, handle_mut, out, out_opt, slice, Failure};
use crate::codes::ringmain_link_status;
use crate::convert::{Quantity, Units};
use crate::model::{out_of_range, ringmain_model, wrong_kind};
use ringmain_core::{Element, LinkKind, LinkStatus, Model, ModelError, NodeKind};
use std::borrow::Cow;

/// A value of one node or link that C reads and sets between solves.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Input {
    /// Junction demand (flow unit).
    Demand,
    /// Reservoir head (length unit).
    ReservoirHead,
    /// Tank water level above its floor (length unit).
    TankLevel,
    /// Pump relative speed (1 = the speed of its curve).
    PumpSpeed,
    /// Valve setting (pressure, flow or loss coefficient by valve type).
    ValveSetting,
    /// Pipe roughness (Hazen–Williams C, or the roughness unit under Darcy–Weisbach).
    PipeRoughness,
    /// Pipe internal diameter (diameter unit).
    PipeDiameter,
}

impl Input {
    /// Whether the value belongs to links (else to nodes).
    pub(crate) fn on_links(self) -> bool {
        matches!(self, Input::PumpSpeed | Input::ValveSetting | Input::PipeRoughness | Input::PipeDiameter)
    }

    /// The key the value has in a model file (errors name it).
    fn key(self) -> &'static str {
        match self {
            Input::Demand => "demand",
            Input::ReservoirHead => "head",
            Input::TankLevel => "level",
            Input::PumpSpeed => "speed",
            Input::ValveSetting => "setting",
            Input::PipeRoughness => "roughness",
            Input::PipeDiameter => "diameter",
        }
    }

    /// The elements it applies to, in the plural (errors name them).
    fn applies_to(self) -> &'static str {
        match self {
            Input::Demand => "junctions",
            Input::ReservoirHead => "reservoirs",
            Input::TankLevel => "tanks",
            Input::PumpSpeed => "pumps",
            Input::ValveSetting => "valves",
            Input::PipeRoughness | Input::PipeDiameter => "pipes",
        }
    }

    /// Number of elements of the kind it belongs to (nodes or links).
    fn count(self, model: &Model) -> usize {
        if self.on_links() {
            model.links().len()
        } else {
            model.nodes().len()
        }
    }

    /// Whether element `index` (in range) has this value.
    fn applies(self, model: &Model, index: usize) -> bool {
        match self {
            Input::Demand => matches!(model.nodes()[index].kind, NodeKind::Junction { .. }),
            Input::ReservoirHead => matches!(model.nodes()[index].kind, NodeKind::Reservoir { .. }),
            Input::TankLevel => matches!(model.nodes()[index].kind, NodeKind::Tank(_)),
            Input::PumpSpeed => matches!(model.links()[index].kind, LinkKind::Pump(_)),
            Input::ValveSetting => matches!(model.links()[index].kind, LinkKind::Valve(_)),
            Input::PipeRoughness | Input::PipeDiameter => matches!(model.links()[index].kind, LinkKind::Pipe(_)),
        }
    }

    /// Checks that element `index` exists and has this value.
    fn check(self, model: &Model, index: usize) -> Result<(), Failure> {
        let count = self.count(model);
        if index >= count {
            return Err(out_of_range(if self.on_links() { "link" } else { "node" }, index, count));
        }
        if self.applies(model, index) {
            return Ok(());
        }
        Err(if self.on_links() {
            let l = &model.links()[index];
            wrong_kind(Element::Link(l.id.to_string()), self.key(), self.applies_to(), l.kind.label())
        } else {
            let n = &model.nodes()[index];
            wrong_kind(Element::Node(n.id.to_string()), self.key(), self.applies_to(), n.kind.label())
        })
    }

    /// The value of element `index` (checked) in SI.
    fn get_si(self, m: &ringmain_model, index: usize) -> f64 {
        let c = &m.conditions;
        match self {
            Input::Demand => c.demand(index),
            Input::ReservoirHead => c.fixed_head(index).unwrap_or(f64::NAN),
            Input::TankLevel => m.levels.get(&index).copied().unwrap_or_else(|| match &m.model.nodes()[index].kind {
                NodeKind::Tank(t) => t.level,
                _ => f64::NAN,
            }),
            Input::PumpSpeed => c.pump_speed(index),
            Input::ValveSetting => c.valve_setting(index),
            Input::PipeRoughness => c.roughness(index),
            Input::PipeDiameter => c.diameter(index),
        }
    }

    /// Sets the value of element `index` (checked) in SI, through the conditions' validating
    /// setters.
    fn set_si(self, m: &mut ringmain_model, index: usize, v: f64) -> Result<(), Failure> {
        let (model, c) = (&m.model, &mut m.conditions);
        match self {
            Input::Demand => c.set_demand(model, index, v)?,
            Input::ReservoirHead => c.set_reservoir_head(model, index, v)?,
            Input::TankLevel => {
                let node = &model.nodes()[index];
                if let NodeKind::Tank(t) = &node.kind {
                    // The model's own rule for a tank: its level between its limits.
                    let limit = if v < t.min_level {
                        Some(format!("is below min_level ({v} < {} m)", t.min_level))
                    } else {
                        t.max_level.filter(|&max| v > max).map(|max| format!("is above max_level ({v} > {max} m)"))
                    };
                    if let Some(message) = limit {
                        return Err(
                            ModelError::at(Some(Element::Node(node.id.to_string())), Some("level"), message).into()
                        );
                    }
                }
                c.set_tank_level(model, index, v)?;
                m.levels.insert(index, v);
            }
            Input::PumpSpeed => c.set_pump_speed(model, index, v)?,
            Input::ValveSetting => c.set_valve_setting(model, index, v)?,
            Input::PipeRoughness => c.set_roughness(model, index, v)?,
            Input::PipeDiameter => c.set_diameter(model, index, v)?,
        }
        m.changed = true;
        Ok(())
    }

    /// The quantity of element `index`'s value (checked): a valve's setting is a pressure, a
    /// flow or a loss coefficient by its type.
    fn quantity(self, model: &Model, index: usize) -> Quantity {
        match self {
            Input::Demand => Quantity::Flow,
            Input::ReservoirHead | Input::TankLevel => Quantity::Length,
            Input::PumpSpeed => Quantity::Number,
            Input::ValveSetting => {
                model.links()[index].as_valve().map_or(Quantity::Number, |v| v.valve.setting_quantity())
            }
            Input::PipeRoughness => Quantity::PipeRoughness,
            Input::PipeDiameter => Quantity::Diameter,
        }
    }

    /// `v` (SI) of element `index` in the model's units.
    fn to_model_units(self, model: &Model, u: &Units, index: usize, v: f64) -> f64 {
        u.from_si(self.quantity(model, index), v)
    }

    /// `v` (model's units) of element `index` in SI.
    fn to_si(self, model: &Model, u: &Units, index: usize, v: f64) -> f64 {
        u.to_si(self.quantity(model, index), v)
    }
}

impl ringmain_model {
    /// The value `input` of element `index`, in the model's units.
    pub(crate) fn input(&self, input: Input, index: usize) -> Result<f64, Failure> {
        input.check(&self.model, index)?;
        Ok(input.to_model_units(&self.model, &self.units(), index, input.get_si(self, index)))
    }

    /// Sets the value `input` of element `index`, given in the model's units.
    pub(crate) fn set_input(&mut self, input: Input, index: usize, value: f64) -> Result<(), Failure> {
        input.check(&self.model, index)?;
        let v = input.to_si(&self.model, &self.units(), index, value);
        input.set_si(self, index, v)
    }

    /// Every element's value `input` in the model's units, NaN where it does not apply.
    pub(crate) fn inputs(&self, input: Input) -> Vec<f64> {
        let u = self.units();
        (0..input.count(&self.model))
            .map(|i| {
                if input.applies(&self.model, i) {
                    input.to_model_units(&self.model, &u, i, input.get_si(self, i))
                } else {
                    f64::NAN
                }
            })
            .collect()
    }

    /// Sets the value `input` of every element from `values` (model's units; NaN leaves an
    /// element unchanged): all or none.
    pub(crate) fn set_inputs(&mut self, input: Input, values: &[f64]) -> Result<(), Failure> {
        let count = input.count(&self.model);
        if values.len() != count {
            let what = if input.on_links() { "link" } else { "node" };
            return Err(Failure::new(
                crate::codes::ringmain_status::RINGMAIN_OUT_OF_RANGE,
                format!(
                    "argument 'len': the buffer holds {} values; the model has {count} {what}s (one value each)",
                    values.len()
                ),
            ));
        }
        let u = self.units();
        // Old values in SI, to put back on the first error.
        let mut undo: Vec<(usize, f64)> = Vec::new();
        let tank_levels_before = (input == Input::TankLevel).then(|| self.levels.clone());
        let mut failure = None;
        for (i, &v) in values.iter().enumerate() {
            if v.is_nan() {
                continue;
            }
            if let Err(f) = input.check(&self.model, i) {
                failure = Some(f);
                break;
            }
            let old = input.get_si(self, i);
            let si = input.to_si(&self.model, &u, i, v);
            if let Err(f) = input.set_si(self, i, si) {
                failure = Some(f);
                break;
            }
            undo.push((i, old));
        }
        let Some(failure) = failure else { return Ok(()) };
        for (i, old) in undo.into_iter().rev() {
            // The old values passed the same checks when they were set.
            input.set_si(self, i, old)?;
        }
        if let Some(levels) = tank_levels_before {
            self.levels = levels;
        }
        Err(failure)
    }

    /// The status set on link `k` (checked), as its code: a valve that regulates is automatic.
    pub(crate) fn link_status(&self, k: usize) -> ringmain_link_status {
        match self.conditions.status(k) {
            LinkStatus::Closed => ringmain_link_status::RINGMAIN_STATUS_CLOSED,
            LinkStatus::Open if self.conditions.automatic(k) => ringmain_link_status::RINGMAIN_STATUS_AUTOMATIC,
            LinkStatus::Open => ringmain_link_status::RINGMAIN_STATUS_OPEN,
        }
    }

    /// Checks that link `k` (in range) may take `status`: automatic applies to valves only.
    fn check_status(&self, k: usize, status: ringmain_link_status) -> Result<(), Failure> {
        let l = &self.model.links()[k];
        if status == ringmain_link_status::RINGMAIN_STATUS_AUTOMATIC && l.as_valve().is_none() {
            let e = ModelError::at(
                Some(Element::Link(l.id.to_string())),
                Some("status"),
                format!("\"automatic\" applies to valves only; this link is a {}", l.kind.label()),
            );
            return Err(Failure::invalid(e.to_string()));
        }
        Ok(())
    }

    /// Sets link `k`'s status (checked by [`ringmain_model::check_status`]): open and closed
    /// valves stop regulating, automatic ones regulate.
    fn apply_status(&mut self, k: usize, status: ringmain_link_status) -> Result<(), Failure> {
        let (model, c) = (&self.model, &mut self.conditions);
        let (status, automatic) = match status {
            ringmain_link_status::RINGMAIN_STATUS_OPEN => (LinkStatus::Open, false),
            ringmain_link_status::RINGMAIN_STATUS_CLOSED => (LinkStatus::Closed, false),
            ringmain_link_status::RINGMAIN_STATUS_AUTOMATIC => (LinkStatus::Open, true),
        };
        c.set_status(model, k, status)?;
        if model.links()[k].as_valve().is_some() {
            c.set_valve_automatic(model, k, automatic)?;
        }
        self.changed = true;
        Ok(())
    }

    /// Sets link `k`'s status.
    pub(crate) fn set_link_status(&mut self, k: usize, status: ringmain_link_status) -> Result<(), Failure> {
        let n = self.model.links().len();
        if k >= n {
            return Err(out_of_range("link", k, n));
        }
        self.check_status(k, status)?;
        self.apply_status(k, status)
    }

    /// Sets every link's status from codes: all or none.
    pub(crate) fn set_link_statuses(&mut self, codes: &[u32]) -> Result<(), Failure> {
        let n = self.model.links().len();
        if codes.len() != n {
            return Err(Failure::new(
                crate::codes::ringmain_status::RINGMAIN_OUT_OF_RANGE,
                format!(
                    "argument 'len': the buffer holds {} values; the model has {n} links (one value each)",
                    codes.len()
                ),
            ));
        }
        let mut statuses = Vec::with_capacity(n);
        for (k, &code) in codes.iter().enumerate() {
            let status = ringmain_link_status::from_code(code, "statuses")
                .map_err(|f| Failure::new(f.status, format!("link '{}': {}", self.model.links()[k].id, f.message)))?;
            self.check_status(k, status)?;
            statuses.push(status);
        }
        for (k, status) in statuses.into_iter().enumerate() {
            self.apply_status(k, status)?;
        }
        Ok(())
    }

    /// The model with the values of the conditions: itself when nothing was set since it last
    /// caught up, else a copy brought up to date (for writing, cloning and simulating).
    pub(crate) fn current(&self) -> Result<Cow<'_, Model>, Failure> {
        if !self.changed {
            return Ok(Cow::Borrowed(&self.model));
        }
        let mut model = self.model.clone();
        write_conditions(&mut model, self)?;
        Ok(Cow::Owned(model))
    }

    /// Brings the model up to date with the conditions (before its structure changes).
    pub(crate) fn catch_up(&mut self) -> Result<(), Failure> {
        if self.changed {
            let mut model = std::mem::take(&mut self.model);
            let written = write_conditions(&mut model, self);
            self.model = model;
            written?;
            self.levels.clear();
            self.changed = false;
        }
        Ok(())
    }
}

/// Writes the values the handle's conditions hold into `model` (the handle's model or a copy of
/// it): every element whose value differs is changed and checked as the model checks it.
fn write_conditions(model: &mut Model, m: &ringmain_model) -> Result<(), Failure> {
    let c = &m.conditions;
    let differs = |a: f64, b: f64| a.to_bits() != b.to_bits();
    model.change_nodes(
        |i, node| {
            let old = node.clone();
            let changed = match &mut node.kind {
                NodeKind::Junction { demand } if differs(*demand, c.demand(i)) => {
                    *demand = c.demand(i);
                    true
                }
                NodeKind::Reservoir { head } if c.fixed_head(i).is_some_and(|h| differs(*head, h)) => {
                    *head = c.fixed_head(i).unwrap_or(*head);
                    true
                }
                NodeKind::Tank(t) => match m.levels.get(&i) {
                    Some(&level) if differs(t.level, level) => {
                        t.level = level;
                        true
                    }
                    _ => false,
                },
                _ => false,
            };
            Ok(changed.then_some(old))
        },
        |node, old| *node = old,
    )?;
    model.change_links(
        |k, link| {
            let old = link.clone();
            let mut changed = link.status != c.status(k);
            link.status = c.status(k);
            match &mut link.kind {
                LinkKind::Pipe(p) => {
                    changed |= differs(p.diameter, c.diameter(k)) || differs(p.roughness, c.roughness(k));
                    p.diameter = c.diameter(k);
                    p.roughness = c.roughness(k);
                }
                LinkKind::Pump(p) => {
                    changed |= differs(p.speed, c.pump_speed(k));
                    p.speed = c.pump_speed(k);
                }
                LinkKind::Valve(v) => {
                    changed |= differs(v.setting, c.valve_setting(k)) || v.automatic != c.automatic(k);
                    v.setting = c.valve_setting(k);
                    v.automatic = c.automatic(k);
                }
                // A kind of link this library does not know yet has no values it can set.
                _ => {}
            }
            Ok(changed.then_some(old))
        },
        |link, old| *link = old,
    )?;
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// The shared bodies of the exported functions
// ---------------------------------------------------------------------------------------------

/// Writes the value `input` of element `index` to `out`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
pub(crate) unsafe fn get_one(
    model: *const ringmain_model,
    input: Input,
    index: usize,
    out: *mut f64,
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let (m, out) = unsafe { (handle(model, "model")?, self::out(out, "out")?) };
    out.write(m.input(input, index)?);
    Ok(())
}

/// Sets the value `input` of element `index`.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call.
pub(crate) unsafe fn set_one(
    model: *mut ringmain_model,
    input: Input,
    index: usize,
    value: f64,
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let m = unsafe { handle_mut(model, "model") }?;
    m.set_input(input, index, value)
}

/// Writes the value `input` of every element into `buf` (`len` doubles) and the count.
///
/// # Safety
/// `model` is NULL or a live model; `buf` is NULL or `len` writable doubles; `count` is NULL or
/// writable.
pub(crate) unsafe fn get_all(
    model: *const ringmain_model,
    input: Input,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
    what: &str,
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let (m, count) = unsafe { (handle(model, "model")?, out_opt(count, "count")?) };
    let n = input.count(&m.model);
    let values = if len < n { vec![0.0; n] } else { m.inputs(input) };
    // SAFETY: forwarded; copy_out only reports the size needed when `len` is too small.
    unsafe { copy_out(&values, buf, len, count, what) }
}

/// Sets the value `input` of every element from `values` (`len` doubles).
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call; `values` is NULL or
/// points to `len` doubles.
pub(crate) unsafe fn set_all(
    model: *mut ringmain_model,
    input: Input,
    values: *const f64,
    len: usize,
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let (m, values) = unsafe { (handle_mut(model, "model")?, slice(values, len, "values")?) };
    m.set_inputs(input, values)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ringmain_core::{read_bytes, Format, Node, SolveOptions, Solver};

    /// An invented hillside scheme: a spring, a tower on a hill, a pump and a reducing valve.
    const NET: &str = r#"
[[nodes]]
id = "Spring"
kind = "reservoir"
head = 50.0
[[nodes]]
id = "Tower"
kind = "tank"
elevation = 100.1
level = 4.0
min_level = 1.0
max_level = 8.0
diameter = 10.0
[[nodes]]
id = "A"
elevation = 10.0
demand = 1.0
[[nodes]]
id = "B"
elevation = 12.0
demand = 2.0
[[links]]
id = "Lift"
kind = "pump"
from = "Spring"
to = "A"
power = 30.0
[[links]]
id = "P1"
from = "A"
to = "B"
length = 100.0
diameter = 150.0
roughness = 120.0
[[links]]
id = "P2"
from = "Tower"
to = "B"
length = 300.0
diameter = 200.0
roughness = 110.0
[[links]]
id = "PRV"
kind = "valve"
valve = "pressure-reducing"
from = "B"
to = "A"
diameter = 100.0
setting = 30.0
"#;

    fn handle_of(text: &str) -> ringmain_model {
        ringmain_model::from_model(read_bytes(text.as_bytes(), Format::Toml, "net.toml").unwrap(), None)
    }

    fn text_of(model: &Model) -> String {
        ringmain_core::format::write::to_string(model, Format::Toml)
    }

    #[test]
    fn setters_write_the_conditions_and_leave_the_model_until_it_is_needed_whole() {
        let mut m = handle_of(NET);
        let before = text_of(&m.model);
        m.set_input(Input::Demand, 2, 3.5).unwrap();
        m.set_input(Input::PipeDiameter, 1, 175.0).unwrap();
        m.set_input(Input::TankLevel, 1, 6.3).unwrap();
        m.set_link_status(3, ringmain_link_status::RINGMAIN_STATUS_OPEN).unwrap();
        // The model is untouched; the getters read what was set.
        assert_eq!(text_of(&m.model), before);
        assert_eq!(m.input(Input::Demand, 2).unwrap(), 3.5);
        assert_eq!(m.input(Input::PipeDiameter, 1).unwrap(), 175.0);
        // Exactly the level given, though the conditions keep floor + level (100.1 + 6.3 - 100.1
        // is not 6.3 in binary floating point).
        assert_eq!(m.input(Input::TankLevel, 1).unwrap(), 6.3);
        assert_eq!(m.link_status(3), ringmain_link_status::RINGMAIN_STATUS_OPEN);
        // Written whole, the model has the values set; reading that text back gives a model
        // whose conditions are the handle's.
        let current = m.current().unwrap().into_owned();
        let reread = handle_of(&text_of(&current));
        for input in [Input::Demand, Input::TankLevel, Input::PipeDiameter, Input::ValveSetting] {
            assert_eq!(
                reread.inputs(input).iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
                m.inputs(input).iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
                "{input:?}"
            );
        }
        assert_eq!(reread.link_status(3), ringmain_link_status::RINGMAIN_STATUS_OPEN);
        // Adding a node: the model catches up first, and nothing set is lost.
        // Node::junction takes SI: 0.5 L/s.
        m.add_node_for_test(Node::junction("C", 5.0, 0.5e-3));
        assert_eq!(m.input(Input::Demand, 2).unwrap(), 3.5);
        assert_eq!(m.input(Input::TankLevel, 1).unwrap(), 6.3);
        assert!((m.input(Input::Demand, 4).unwrap() - 0.5).abs() < 1e-12);
        assert_eq!(m.link_status(3), ringmain_link_status::RINGMAIN_STATUS_OPEN);
    }

    #[test]
    fn a_solve_after_setting_equals_a_fresh_solve_of_the_model_with_those_values() {
        let mut m = handle_of(NET);
        let mut options = SolveOptions::from_model(&m.model);
        options.warm_start = false;
        // Solve once, then change every kind of value and solve again on the same solver.
        let mut solver = Solver::new(&m.model).unwrap();
        solver.solve(&m.model, &m.conditions, &options).unwrap();
        m.set_inputs(Input::Demand, &[f64::NAN, f64::NAN, 2.5, 1.5]).unwrap();
        m.set_input(Input::ReservoirHead, 0, 55.0).unwrap();
        m.set_input(Input::TankLevel, 1, 2.0).unwrap();
        m.set_input(Input::PipeRoughness, 2, 95.0).unwrap();
        m.set_input(Input::PipeDiameter, 1, 125.0).unwrap();
        m.set_input(Input::PumpSpeed, 0, 0.9).unwrap();
        m.set_input(Input::ValveSetting, 3, 25.0).unwrap();
        let warm = solver.solve(&m.model, &m.conditions, &options).unwrap();
        let written = m.current().unwrap().into_owned();
        let fresh = ringmain_core::solve::solve(&handle_of(&text_of(&written)).model).unwrap();
        assert_eq!(warm.head, fresh.head);
        assert_eq!(warm.flow, fresh.flow);
    }

    #[test]
    fn a_failed_whole_array_set_leaves_every_value_as_it_was() {
        let mut m = handle_of(NET);
        m.set_input(Input::TankLevel, 1, 6.3).unwrap();
        let levels = m.inputs(Input::TankLevel);
        let demands = m.inputs(Input::Demand);
        // A tank level above its max_level: refused, the other values kept.
        let e = m.set_inputs(Input::TankLevel, &[f64::NAN, 9.0, f64::NAN, f64::NAN]).unwrap_err();
        assert!(e.message.contains("is above max_level"), "{}", e.message);
        assert_eq!(m.inputs(Input::TankLevel)[1].to_bits(), levels[1].to_bits());
        // A good demand then an infinite one: the good one is undone.
        let e = m.set_inputs(Input::Demand, &[f64::NAN, f64::NAN, 7.0, f64::INFINITY]).unwrap_err();
        assert!(e.message.contains("node 'B': key 'demand': must be finite"), "{}", e.message);
        assert_eq!(m.inputs(Input::Demand)[2], demands[2]);
        // A number at a reservoir: the wrong kind, named.
        let e = m.set_inputs(Input::Demand, &[1.0, f64::NAN, 7.0, 1.0]).unwrap_err();
        assert_eq!(e.status, crate::codes::ringmain_status::RINGMAIN_WRONG_KIND);
        assert_eq!(m.inputs(Input::Demand)[2], demands[2]);
        // Automatic applies to valves only, and a whole set of statuses is all or none.
        let open = ringmain_link_status::RINGMAIN_STATUS_OPEN as u32;
        let closed = ringmain_link_status::RINGMAIN_STATUS_CLOSED as u32;
        let automatic = ringmain_link_status::RINGMAIN_STATUS_AUTOMATIC as u32;
        assert!(m.set_link_statuses(&[closed, automatic, open, automatic]).is_err());
        assert_eq!(m.link_status(0), ringmain_link_status::RINGMAIN_STATUS_OPEN);
        m.set_link_statuses(&[closed, open, open, automatic]).unwrap();
        assert_eq!(m.link_status(0), ringmain_link_status::RINGMAIN_STATUS_CLOSED);
    }
}
