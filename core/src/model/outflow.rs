//! What leaves the network at a junction besides its fixed demand: demand that follows pressure
//! (`[pressure_demand]` and per-junction overrides), outlets to atmosphere, and background
//! leakage from the mains (`[background_leakage]`, per-pipe `leakage_rate`). SI inside: pressures as
//! pressure head in m, flows in m³/s, leakage rates in m³/s per metre of pipe.
//!
//! Like the time data, the per-element parts are kept beside the elements, keyed by element
//! index, so that junctions and pipes (a million of each in a large model) stay small.
//!
//! [`OutflowData::laws`] turns them into each junction's [`NodeOutflow`]: the relations of
//! [`crate::physics::outflow`] that the solver evaluates.

use super::{Model, NodeKind};
use crate::error::{Element, ModelError};
use crate::physics::outflow::PowerLaw;
use crate::units::PressureUnit;
use std::collections::BTreeMap;

/// The `[pressure_demand]` table: junction demands depend on pressure (Wagner, Shamir & Marks).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PressureDemand {
    /// Pressure head at or above which a junction receives its whole demand, m.
    pub full_pressure: f64,
    /// Pressure head at or below which it receives nothing, m.
    pub zero_pressure: f64,
    /// Exponent of the relation between the two.
    pub exponent: f64,
}

impl PressureDemand {
    /// Default zero pressure, m.
    pub const ZERO_PRESSURE: f64 = 0.0;
    /// Default exponent: the orifice law of the customers' connections (common practice).
    pub const EXPONENT: f64 = 0.5;

    /// The table's own rule, full pressure above zero pressure, checked where a model file is
    /// read and where a model is validated; the message gives both in `unit`, the model's.
    pub fn check(&self, unit: PressureUnit, density: f64) -> Result<(), ModelError> {
        if self.full_pressure <= self.zero_pressure {
            return Err(ModelError::at(
                Some(Element::Table("pressure_demand".into())),
                Some("full_pressure"),
                format!(
                    "must be above zero_pressure ({} <= {})",
                    crate::units::shown(unit.from_head(self.full_pressure, density)),
                    unit.shown_head(self.zero_pressure, density)
                ),
            ));
        }
        Ok(())
    }
}

/// An orifice to atmosphere at a junction: `q = coefficient · p^exponent` for `p > 0`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Outlet {
    /// SI coefficient: m³/s at 1 m of pressure head.
    pub coefficient: f64,
    /// Exponent (0.5 for a sharp-edged orifice).
    pub exponent: f64,
}

impl Outlet {
    /// Default exponent: a sharp-edged orifice (the orifice law).
    pub const EXPONENT: f64 = 0.5;
}

/// Per-junction outflow data: overrides of the `[pressure_demand]` values and an outlet.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct JunctionOutflow {
    /// Override of the full pressure, m.
    pub full_pressure: Option<f64>,
    /// Override of the zero pressure, m.
    pub zero_pressure: Option<f64>,
    /// Override of the exponent.
    pub exponent: Option<f64>,
    /// An outlet, if any.
    pub outlet: Option<Outlet>,
}

impl JunctionOutflow {
    /// Whether it overrides any `[pressure_demand]` value.
    pub fn overrides(&self) -> bool {
        self.full_pressure.is_some() || self.zero_pressure.is_some() || self.exponent.is_some()
    }
}

/// The `[background_leakage]` table: background leakage `rate · L · (p / reference_pressure)^exponent`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Leakage {
    /// Leak per metre of pipe at the reference pressure, m³/s per m.
    pub rate: f64,
    /// Reference pressure head, m.
    pub reference_pressure: f64,
    /// Exponent (Germanopoulos; May's fixed-and-variable-area view puts it between 0.5 and 2.5).
    pub exponent: f64,
}

impl Leakage {
    /// Default exponent: 1.18, a commonly quoted average of whole networks (common practice,
    /// from memory).
    pub const EXPONENT: f64 = 1.18;
}

/// Everything of a model about outflows that depend on pressure.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct OutflowData {
    /// `[pressure_demand]`, when present.
    pub pressure_demand: Option<PressureDemand>,
    /// `[background_leakage]`, when present.
    pub leakage: Option<Leakage>,
    /// Per-junction data: node index → overrides and outlet.
    pub junctions: BTreeMap<usize, JunctionOutflow>,
    /// Per-pipe leakage rates (m³/s per m): link index → rate.
    pub leakage_rates: BTreeMap<usize, f64>,
}

/// The outflow relations of one junction, besides a fixed demand.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct NodeOutflow {
    /// The demand, following pressure (Wagner, Shamir & Marks), when it does.
    pub demand: Option<PowerLaw>,
    /// The outlet.
    pub outlet: Option<PowerLaw>,
    /// The leak of the pipe halves ending here.
    pub leakage: Option<PowerLaw>,
}

impl NodeOutflow {
    /// Whether any relation depends on pressure.
    pub fn is_empty(&self) -> bool {
        self.demand.is_none() && self.outlet.is_none() && self.leakage.is_none()
    }
}

/// The laws of a model's junctions (only junctions with a relation have an entry, in node
/// order); demands not given a law stay fixed.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct OutflowLaws {
    /// (node index, its relations), by node index.
    pub nodes: Vec<(usize, NodeOutflow)>,
}

impl OutflowLaws {
    /// The relations of node `i`, if it has any.
    pub fn get(&self, i: usize) -> Option<&NodeOutflow> {
        self.nodes.binary_search_by_key(&i, |(j, _)| *j).ok().map(|at| &self.nodes[at].1)
    }
}

impl OutflowData {
    /// Whether the model has anything that depends on pressure.
    pub fn is_active(&self) -> bool {
        self.pressure_demand.is_some() || self.leakage.is_some() || !self.junctions.is_empty()
    }

    /// The pressure-dependent demand values of junction `node` (its overrides, else the table's).
    pub fn demand_values(&self, node: usize) -> Option<PressureDemand> {
        let table = self.pressure_demand?;
        let j = self.junctions.get(&node).copied().unwrap_or_default();
        Some(PressureDemand {
            full_pressure: j.full_pressure.unwrap_or(table.full_pressure),
            zero_pressure: j.zero_pressure.unwrap_or(table.zero_pressure),
            exponent: j.exponent.unwrap_or(table.exponent),
        })
    }

    /// The leakage rate of pipe `link` (m³/s per m): its own, else the table's.
    pub fn leakage_rate(&self, link: usize) -> Option<f64> {
        let table = self.leakage?;
        Some(self.leakage_rates.get(&link).copied().unwrap_or(table.rate))
    }

    /// Each junction's relations for demands `demands` (m³/s, indexed like the nodes; negative
    /// demands, inflows, stay fixed). Pipe leaks go half to each end, driven by that end's
    /// pressure; halves at a reservoir or tank are not modelled; closed pipes leak too.
    pub fn laws(&self, model: &Model, demands: &[f64]) -> OutflowLaws {
        let nodes = model.nodes();
        let mut leak: Vec<f64> = Vec::new();
        if let Some(table) = self.leakage {
            leak.resize(nodes.len(), 0.0);
            for (k, l) in model.links().iter().enumerate() {
                let Some(pipe) = l.as_pipe() else { continue };
                let half = 0.5 * self.leakage_rates.get(&k).copied().unwrap_or(table.rate) * pipe.length;
                if half > 0.0 {
                    leak[l.from] += half;
                    leak[l.to] += half;
                }
            }
        }
        let mut outlets = self.junctions.iter().filter_map(|(&i, j)| j.outlet.map(|o| (i, o))).peekable();
        let mut laws = Vec::new();
        for (i, n) in nodes.iter().enumerate() {
            let mut here = NodeOutflow::default();
            while let Some(&(j, o)) = outlets.peek() {
                if j > i {
                    break;
                }
                outlets.next();
                if j == i && o.coefficient > 0.0 {
                    here.outlet = Some(PowerLaw::orifice(o.coefficient, o.exponent));
                }
            }
            if !matches!(n.kind, NodeKind::Junction { .. }) {
                continue;
            }
            let d = demands[i];
            if d > 0.0 {
                if let Some(v) = self.demand_values(i) {
                    here.demand = Some(PowerLaw::demand(d, v.zero_pressure, v.full_pressure, v.exponent));
                }
            }
            if let (Some(table), Some(&c)) = (self.leakage, leak.get(i)) {
                if c > 0.0 {
                    here.leakage = Some(PowerLaw::leakage(c, table.reference_pressure, table.exponent));
                }
            }
            if !here.is_empty() {
                laws.push((i, here));
            }
        }
        OutflowLaws { nodes: laws }
    }

    /// Checks the whole: overrides only with `[pressure_demand]`, per-pipe rates only with
    /// `[background_leakage]`, attachments on junctions and pipes, and full above zero pressure per junction.
    pub fn check(&self, model: &Model) -> Result<(), ModelError> {
        // Pressures in messages are given in the model's own unit, as the file wrote them.
        let (unit, density) = (model.units.pressure, model.options.water_properties().density);
        for (&i, j) in &self.junctions {
            let node = model.nodes().get(i).ok_or_else(|| ModelError::new(format!("no node at index {i}")))?;
            let element = || Some(Element::Node(node.id.to_string()));
            if !matches!(node.kind, NodeKind::Junction { .. }) {
                return Err(ModelError::at(
                    element(),
                    Some("outlet"),
                    format!("applies to junctions only; this node is a {}", node.kind.label()),
                ));
            }
            if j.overrides() && self.pressure_demand.is_none() {
                let key = if j.full_pressure.is_some() {
                    "full_pressure"
                } else if j.zero_pressure.is_some() {
                    "zero_pressure"
                } else {
                    "exponent"
                };
                return Err(ModelError::at(
                    element(),
                    Some(key),
                    "overrides a [pressure_demand] value, but the model has no [pressure_demand] table",
                ));
            }
            if let Some(v) = self.demand_values(i) {
                if v.full_pressure <= v.zero_pressure {
                    let key = if j.full_pressure.is_some() { "full_pressure" } else { "zero_pressure" };
                    return Err(ModelError::at(
                        element(),
                        Some(key),
                        format!(
                            "full_pressure ({}) must be above zero_pressure ({})",
                            unit.shown_head(v.full_pressure, density),
                            unit.shown_head(v.zero_pressure, density)
                        ),
                    ));
                }
            }
        }
        for &k in self.leakage_rates.keys() {
            let link = model.links().get(k).ok_or_else(|| ModelError::new(format!("no link at index {k}")))?;
            let element = Some(Element::Link(link.id.to_string()));
            if link.as_pipe().is_none() {
                return Err(ModelError::at(element, Some("leakage_rate"), "applies to pipes only"));
            }
            if self.leakage.is_none() {
                return Err(ModelError::at(
                    element,
                    Some("leakage_rate"),
                    "needs a [background_leakage] table (for its reference_pressure and exponent)",
                ));
            }
        }
        match &self.pressure_demand {
            Some(pd) => pd.check(unit, density),
            None => Ok(()),
        }
    }
}
