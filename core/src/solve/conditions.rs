//! What varies between solves of one network structure: the solver's own input.
//!
//! A [`Model`] says what the network *is* (nodes, links, their kinds and fixed data) and its
//! values as written in the file. [`Conditions`] holds, as plain arrays made once from a model
//! ([`Conditions::from_model`]), every value a caller may change between solves without changing
//! the structure:
//!
//! | per node | per link |
//! |---|---|
//! | junction demand (m³/s) | user status (open / closed) |
//! | fixed head of reservoirs and tanks (m) | whether a valve regulates (`automatic`) |
//! | | pump relative speed, valve setting (SI) |
//! | | diameter (m), roughness (Hazen–Williams C or m), minor-loss coefficient |
//!
//! and the junctions' outflow law ([`NodeLaw`]). The simulation, the criteria scenarios, the
//! each-pipe-closed sweep and the C library write these arrays; none of them clones a model to
//! vary a solve.
//!
//! # Validation
//! Every setter checks its value (finite, in range, the right kind of element) and returns a
//! [`ModelError`] naming the element's id and the key, so that [`Solver::solve`](super::Solver::solve)
//! does not have to check the arrays again. The values obey the rules the model reader applies
//! (the same checks, the same messages). The setters take the model for the element's kind and
//! id (the conditions themselves keep values only).
//!
//! # Which laws are stale
//! A link's head-loss law depends on its diameter, roughness, minor loss, pump speed and (for a
//! throttle valve) its setting; a solver keeps the laws it built. Every setter of one of those
//! values appends the link to a change journal; a solver remembers which conditions (by a
//! private identity, fresh for every [`Conditions::from_model`] and every clone) and how far into
//! the journal its laws are, and rebuilds only the laws of the links logged since. Statuses,
//! demands, fixed heads and pressure or flow settings enter no law and cost nothing to change.
//! When the journal grows past the number of links it is dropped and the conditions take a new
//! identity, so that solvers rebuild every law once.

use super::nodes::NodeLaw;
use crate::error::{Element, ModelError};
use crate::model::{check_value, HeadLossLaw, LinkKind, LinkStatus, Model, NodeKind, Rule, ValveType};
use std::sync::atomic::{AtomicU64, Ordering};

/// Source of the identities of conditions (see the module docs).
static NEXT_IDENTITY: AtomicU64 = AtomicU64::new(1);

fn fresh_identity() -> u64 {
    NEXT_IDENTITY.fetch_add(1, Ordering::Relaxed)
}

/// The values of one solve of a network structure. See the [module docs](self).
#[derive(Debug, PartialEq)]
pub struct Conditions {
    /// Per node: junction demand, m³/s (zero for fixed-head nodes).
    demand: Vec<f64>,
    /// Per node: fixed head, m (NaN for junctions).
    fixed_head: Vec<f64>,
    /// Per link: user status.
    status: Vec<LinkStatus>,
    /// Per link: a valve follows its rule (false for other links).
    automatic: Vec<bool>,
    /// Per link: valve setting (SI) or pump relative speed (NaN for pipes).
    setting: Vec<f64>,
    /// Per link: diameter, m (NaN for pumps).
    diameter: Vec<f64>,
    /// Per link: pipe roughness, C or m (NaN for pumps and valves).
    roughness: Vec<f64>,
    /// Per link: minor-loss coefficient K (NaN for pumps).
    minor_loss: Vec<f64>,
    /// How junctions draw water.
    node_law: NodeLaw,
    /// Draws at junctions that do not follow pressure (a fire draw), m³/s, by node.
    draws: Vec<(u32, f64)>,
    identity: u64,
    /// Links whose law inputs changed, in order (see the module docs).
    journal: Vec<u32>,
}

impl Clone for Conditions {
    /// A copy with its own identity: the two may then change apart, and a solver must not take
    /// one's journal for the other's.
    fn clone(&self) -> Self {
        Conditions {
            demand: self.demand.clone(),
            fixed_head: self.fixed_head.clone(),
            status: self.status.clone(),
            automatic: self.automatic.clone(),
            setting: self.setting.clone(),
            diameter: self.diameter.clone(),
            roughness: self.roughness.clone(),
            minor_loss: self.minor_loss.clone(),
            node_law: self.node_law,
            draws: self.draws.clone(),
            identity: fresh_identity(),
            journal: Vec::new(),
        }
    }
}

/// Where a solver's laws stand against some conditions: which conditions and how far into their
/// journal.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct LawsSeen {
    pub identity: u64,
    pub journal: usize,
}

impl Conditions {
    /// The values written in `model`.
    pub fn from_model(model: &Model) -> Self {
        Conditions::of_model(model, true)
    }

    /// The values written in `model` but the pipes' roughness and minor-loss coefficients,
    /// which only the links' laws read: for a solve whose laws are built from the model itself
    /// (`Solver::solve_once`; at a million links the two arrays are 20 MB). Nothing may read
    /// those two values from these conditions, nor set them.
    pub(crate) fn from_model_without_law_inputs(model: &Model) -> Self {
        Conditions::of_model(model, false)
    }

    fn of_model(model: &Model, law_inputs: bool) -> Self {
        let nodes = model.nodes();
        let links = model.links();
        let mut c = Conditions {
            demand: nodes.iter().map(|n| n.demand()).collect(),
            fixed_head: nodes.iter().map(|n| n.fixed_head().unwrap_or(f64::NAN)).collect(),
            status: links.iter().map(|l| l.status).collect(),
            automatic: links.iter().map(|l| l.as_valve().is_some_and(|v| v.automatic)).collect(),
            setting: Vec::with_capacity(links.len()),
            diameter: Vec::with_capacity(links.len()),
            roughness: Vec::with_capacity(if law_inputs { links.len() } else { 0 }),
            minor_loss: Vec::with_capacity(if law_inputs { links.len() } else { 0 }),
            node_law: NodeLaw::of_model(model),
            draws: Vec::new(),
            identity: fresh_identity(),
            journal: Vec::new(),
        };
        for l in links {
            let (setting, diameter, roughness, minor) = match &l.kind {
                LinkKind::Pipe(p) => (f64::NAN, p.diameter, p.roughness, p.minor_loss),
                LinkKind::Pump(p) => (p.speed, f64::NAN, f64::NAN, f64::NAN),
                LinkKind::Valve(v) => (v.setting, v.diameter, f64::NAN, v.minor_loss),
            };
            c.setting.push(setting);
            c.diameter.push(diameter);
            if law_inputs {
                c.roughness.push(roughness);
                c.minor_loss.push(minor);
            }
        }
        c
    }

    /// Whether these conditions have one value per node and per link of `model`.
    pub fn fits(&self, model: &Model) -> bool {
        self.demand.len() == model.nodes().len() && self.status.len() == model.links().len()
    }

    /// The error of conditions made for another network.
    pub(crate) fn mismatch(&self, model: &Model) -> ModelError {
        ModelError::new(format!(
            "the conditions were made for a network of {} nodes and {} links; this one has {} nodes and {} links",
            self.demand.len(),
            self.status.len(),
            model.nodes().len(),
            model.links().len()
        ))
    }

    // ---- reading -------------------------------------------------------------------------

    /// Demand of node `i`, m³/s (zero for fixed-head nodes).
    pub fn demand(&self, i: usize) -> f64 {
        self.demand[i]
    }

    /// Every node's demand, m³/s.
    pub fn demands(&self) -> &[f64] {
        &self.demand
    }

    /// Fixed head of node `i`, m (`None` for a junction).
    pub fn fixed_head(&self, i: usize) -> Option<f64> {
        let h = self.fixed_head[i];
        (!h.is_nan()).then_some(h)
    }

    /// User status of link `k`.
    pub fn status(&self, k: usize) -> LinkStatus {
        self.status[k]
    }

    /// Every link's user status.
    pub fn statuses(&self) -> &[LinkStatus] {
        &self.status
    }

    /// Whether valve `k` regulates (false for other links).
    pub fn automatic(&self, k: usize) -> bool {
        self.automatic[k]
    }

    /// Relative speed of pump `k` (NaN for other links).
    pub fn pump_speed(&self, k: usize) -> f64 {
        self.setting[k]
    }

    /// Setting of valve `k`, SI (NaN for pipes; the speed for pumps: use [`Conditions::pump_speed`]).
    pub fn valve_setting(&self, k: usize) -> f64 {
        self.setting[k]
    }

    /// Diameter of pipe or valve `k`, m (NaN for pumps).
    pub fn diameter(&self, k: usize) -> f64 {
        self.diameter[k]
    }

    /// Roughness of pipe `k` (Hazen–Williams C, or m; NaN for other links).
    pub fn roughness(&self, k: usize) -> f64 {
        self.roughness[k]
    }

    /// Minor-loss coefficient of pipe or valve `k` (NaN for pumps).
    pub fn minor_loss(&self, k: usize) -> f64 {
        self.minor_loss[k]
    }

    /// How junctions draw water.
    pub fn node_law(&self) -> NodeLaw {
        self.node_law
    }

    /// The fixed draws at junctions (node index, m³/s), in the order they were set.
    pub fn fixed_draws(&self) -> &[(u32, f64)] {
        &self.draws
    }

    /// Flow area of pipe or valve `k` at its current diameter, m² (zero for pumps).
    pub fn flow_area(&self, k: usize) -> f64 {
        let d = self.diameter[k];
        if d.is_nan() {
            0.0
        } else {
            std::f64::consts::PI * d * d / 4.0
        }
    }

    // ---- setters -------------------------------------------------------------------------

    /// Sets junction `i`'s demand, m³/s (negative: an inflow).
    pub fn set_demand(&mut self, model: &Model, i: usize, demand: f64) -> Result<(), ModelError> {
        let node = node(model, i)?;
        if !matches!(node.kind, NodeKind::Junction { .. }) {
            return Err(at_node(
                model,
                i,
                "demand",
                format!("only junctions have a demand; this node is a {}", node.kind.label()),
            ));
        }
        check_value(node, "demand", demand, Rule::Finite)?;
        self.demand[i] = demand;
        Ok(())
    }

    /// Sets every node's demand at once, m³/s, one value per node in node order (fixed-head nodes
    /// take zero). Nothing changes unless every value is valid.
    pub fn set_demands(&mut self, model: &Model, demands: &[f64]) -> Result<(), ModelError> {
        if demands.len() != model.nodes().len() {
            return Err(ModelError::at(
                None,
                Some("demand"),
                format!("{} values given for {} nodes", demands.len(), model.nodes().len()),
            ));
        }
        for (i, (&d, n)) in demands.iter().zip(model.nodes()).enumerate() {
            match n.kind {
                NodeKind::Junction { .. } => {
                    check_value(n, "demand", d, Rule::Finite)?;
                }
                _ if d != 0.0 => {
                    return Err(at_node(
                        model,
                        i,
                        "demand",
                        format!("only junctions have a demand; this node is a {} (give 0)", n.kind.label()),
                    ))
                }
                _ => {}
            }
        }
        self.demand.copy_from_slice(demands);
        Ok(())
    }

    /// Multiplies every junction's demand by `factor` (finite, zero or more).
    pub fn scale_demands(&mut self, factor: f64) -> Result<(), ModelError> {
        if !(factor.is_finite() && factor >= 0.0) {
            return Err(ModelError::at(
                None,
                Some("demand_factor"),
                format!("must be a finite number, zero or more, found {factor}"),
            ));
        }
        self.demand.iter_mut().for_each(|d| *d *= factor);
        Ok(())
    }

    /// Sets reservoir `i`'s head, m.
    pub fn set_reservoir_head(&mut self, model: &Model, i: usize, head: f64) -> Result<(), ModelError> {
        let node = node(model, i)?;
        if !matches!(node.kind, NodeKind::Reservoir { .. }) {
            return Err(at_node(
                model,
                i,
                "head",
                format!("only reservoirs have a head; this node is a {}", node.kind.label()),
            ));
        }
        check_value(node, "head", head, Rule::Finite)?;
        self.fixed_head[i] = head;
        Ok(())
    }

    /// Sets tank `i`'s water level above its floor, m (its head is floor + level). Any level of
    /// zero or more is accepted: keeping a tank between its limits is the simulation's work.
    pub fn set_tank_level(&mut self, model: &Model, i: usize, level: f64) -> Result<(), ModelError> {
        let node = node(model, i)?;
        if !matches!(node.kind, NodeKind::Tank(_)) {
            return Err(at_node(
                model,
                i,
                "level",
                format!("only tanks have a level; this node is a {}", node.kind.label()),
            ));
        }
        check_value(node, "level", level, Rule::NonNegative)?;
        self.fixed_head[i] = node.elevation + level;
        Ok(())
    }

    /// Sets link `k`'s user status.
    pub fn set_status(&mut self, model: &Model, k: usize, status: LinkStatus) -> Result<(), ModelError> {
        link(model, k)?;
        self.status[k] = status;
        Ok(())
    }

    /// Sets whether valve `k` regulates (`true`) or is held fully open when not closed.
    pub fn set_valve_automatic(&mut self, model: &Model, k: usize, automatic: bool) -> Result<(), ModelError> {
        let l = link(model, k)?;
        let Some(v) = l.as_valve() else {
            return Err(at_link(
                model,
                k,
                "status",
                format!("only valves regulate; this link is a {}", l.kind.label()),
            ));
        };
        if self.automatic[k] != automatic {
            self.automatic[k] = automatic;
            if v.valve == ValveType::Throttle {
                self.journal(k);
            }
        }
        Ok(())
    }

    /// Sets pump `k`'s relative speed (1 = the speed of its curve; 0 stops it).
    pub fn set_pump_speed(&mut self, model: &Model, k: usize, speed: f64) -> Result<(), ModelError> {
        let l = link(model, k)?;
        if l.as_pump().is_none() {
            return Err(at_link(
                model,
                k,
                "speed",
                format!("only pumps have a speed; this link is a {}", l.kind.label()),
            ));
        }
        check_value(l, "speed", speed, Rule::NonNegative)?;
        if self.setting[k] != speed {
            self.setting[k] = speed;
            self.journal(k);
        }
        Ok(())
    }

    /// Sets valve `k`'s setting in SI: pressure head (m) for pressure valves, flow (m³/s) for a
    /// flow-control valve, loss coefficient K for a throttle valve.
    pub fn set_valve_setting(&mut self, model: &Model, k: usize, setting: f64) -> Result<(), ModelError> {
        let l = link(model, k)?;
        let Some(v) = l.as_valve() else {
            return Err(at_link(
                model,
                k,
                "setting",
                format!("only valves have a setting; this link is a {}", l.kind.label()),
            ));
        };
        let rule = match v.valve {
            ValveType::PressureReducing | ValveType::PressureSustaining => Rule::Finite,
            ValveType::FlowControl | ValveType::Throttle => Rule::NonNegative,
        };
        check_value(l, "setting", setting, rule)?;
        if self.setting[k] != setting {
            self.setting[k] = setting;
            if v.valve == ValveType::Throttle {
                self.journal(k);
            }
        }
        Ok(())
    }

    /// Sets pipe or valve `k`'s diameter, m.
    pub fn set_diameter(&mut self, model: &Model, k: usize, diameter: f64) -> Result<(), ModelError> {
        let l = link(model, k)?;
        if l.as_pump().is_some() {
            return Err(at_link(model, k, "diameter", "pumps have no diameter"));
        }
        check_value(l, "diameter", diameter, Rule::Positive)?;
        if self.diameter[k] != diameter {
            self.diameter[k] = diameter;
            self.journal(k);
        }
        Ok(())
    }

    /// Sets pipe `k`'s roughness: Hazen–Williams C, or the absolute roughness in m under
    /// Darcy–Weisbach (as the model's `headloss` says).
    pub fn set_roughness(&mut self, model: &Model, k: usize, roughness: f64) -> Result<(), ModelError> {
        let l = link(model, k)?;
        if l.as_pipe().is_none() {
            return Err(at_link(
                model,
                k,
                "roughness",
                format!("only pipes have a roughness; this link is a {}", l.kind.label()),
            ));
        }
        check_value(l, "roughness", roughness, Rule::Positive)?;
        if model.options.headloss == HeadLossLaw::HazenWilliams && roughness < 1.0 {
            return Err(at_link(
                model,
                k,
                "roughness",
                format!(
                    "{roughness} is an absolute roughness, but this model uses Hazen-Williams, whose roughness is \
                     the coefficient C (typically 80 to 150)"
                ),
            ));
        }
        if self.roughness[k] != roughness {
            self.roughness[k] = roughness;
            self.journal(k);
        }
        Ok(())
    }

    /// Sets pipe or valve `k`'s minor-loss coefficient K (for a valve: when fully open).
    pub fn set_minor_loss(&mut self, model: &Model, k: usize, minor_loss: f64) -> Result<(), ModelError> {
        let l = link(model, k)?;
        if l.as_pump().is_some() {
            return Err(at_link(model, k, "minor_loss", "pumps have no minor-loss coefficient"));
        }
        check_value(l, "minor_loss", minor_loss, Rule::NonNegative)?;
        if self.minor_loss[k] != minor_loss {
            self.minor_loss[k] = minor_loss;
            self.journal(k);
        }
        Ok(())
    }

    /// Sets how junctions draw water.
    pub fn set_node_law(&mut self, law: NodeLaw) {
        self.node_law = law;
    }

    /// Sets a draw at junction `i` that does not follow pressure, m³/s, on top of its demand (a
    /// fire draw at a hydrant: the flow the fire engine takes, whatever the pressure); zero
    /// removes it. Unlike the demand it is not scaled by pressure-dependent demand.
    pub fn set_fixed_draw(&mut self, model: &Model, i: usize, draw: f64) -> Result<(), ModelError> {
        let node = node(model, i)?;
        if !matches!(node.kind, NodeKind::Junction { .. }) {
            return Err(at_node(
                model,
                i,
                "draw",
                format!("applies to junctions only; this node is a {}", node.kind.label()),
            ));
        }
        check_value(node, "draw", draw, Rule::Finite)?;
        match self.draws.iter_mut().find(|(j, _)| *j as usize == i) {
            Some(entry) => entry.1 = draw,
            None => self.draws.push((i as u32, draw)),
        }
        self.draws.retain(|&(_, q)| q != 0.0);
        Ok(())
    }

    /// Copies every value of `other` (conditions of the same network) into these, logging the
    /// links whose law inputs differ: how a worker returns to a base case after a scenario
    /// without rebuilding the laws of links that did not change.
    pub fn restore_from(&mut self, other: &Conditions) {
        debug_assert_eq!(self.status.len(), other.status.len());
        for k in 0..self.status.len() {
            let law_changed = self.setting[k].to_bits() != other.setting[k].to_bits()
                || self.diameter[k].to_bits() != other.diameter[k].to_bits()
                || self.roughness[k].to_bits() != other.roughness[k].to_bits()
                || self.minor_loss[k].to_bits() != other.minor_loss[k].to_bits()
                || self.automatic[k] != other.automatic[k];
            if law_changed {
                self.journal(k);
            }
        }
        self.demand.copy_from_slice(&other.demand);
        self.fixed_head.copy_from_slice(&other.fixed_head);
        self.status.copy_from_slice(&other.status);
        self.automatic.copy_from_slice(&other.automatic);
        self.setting.copy_from_slice(&other.setting);
        self.diameter.copy_from_slice(&other.diameter);
        self.roughness.copy_from_slice(&other.roughness);
        self.minor_loss.copy_from_slice(&other.minor_loss);
        self.node_law = other.node_law;
        self.draws.clone_from(&other.draws);
    }

    // ---- law staleness -------------------------------------------------------------------

    /// Logs that link `k`'s law must be rebuilt.
    fn journal(&mut self, k: usize) {
        if self.journal.len() >= self.status.len().max(16) {
            // Past this, rebuilding every law is as cheap as reading the journal.
            self.journal.clear();
            self.identity = fresh_identity();
        } else {
            self.journal.push(k as u32);
        }
    }

    /// Where a solver whose laws are up to date with these conditions stands.
    pub(crate) fn laws_seen(&self) -> LawsSeen {
        LawsSeen { identity: self.identity, journal: self.journal.len() }
    }

    /// The links whose laws changed since `seen`, or `None` when every law must be rebuilt
    /// (other conditions, or a journal since dropped).
    pub(crate) fn stale_since(&self, seen: Option<LawsSeen>) -> Option<&[u32]> {
        match seen {
            Some(s) if s.identity == self.identity && s.journal <= self.journal.len() => {
                Some(&self.journal[s.journal..])
            }
            _ => None,
        }
    }
}

fn node(model: &Model, i: usize) -> Result<&crate::model::Node, ModelError> {
    model
        .nodes()
        .get(i)
        .ok_or_else(|| ModelError::new(format!("no node at index {i} (the model has {} nodes)", model.nodes().len())))
}

fn link(model: &Model, k: usize) -> Result<&crate::model::Link, ModelError> {
    model
        .links()
        .get(k)
        .ok_or_else(|| ModelError::new(format!("no link at index {k} (the model has {} links)", model.links().len())))
}

fn at_node(model: &Model, i: usize, key: &str, message: impl Into<String>) -> ModelError {
    ModelError::at(Some(Element::Node(model.nodes()[i].id.to_string())), Some(key), message)
}

fn at_link(model: &Model, k: usize, key: &str, message: impl Into<String>) -> ModelError {
    ModelError::at(Some(Element::Link(model.links()[k].id.to_string())), Some(key), message)
}
