//! The network during a run: the [`Conditions`] whose time-varying values (demands, reservoir
//! heads, pump speeds, valve settings, link statuses, tank levels) are set before each hydraulic
//! solve, one reused [`Solver`] (which rebuilds only the laws of pumps whose speed changed), and
//! the rule that keeps a full tank from taking water and an empty one from giving it. The model
//! itself is never copied or changed.
//!
//! Tank limits: while a tank is full, every link that would carry water into it is closed for
//! the solve (and reopened as soon as the heads would drive water out through it); while it is
//! empty, the same for links carrying water out. The closures are settled inside each hydraulic
//! evaluation, like check valves, so the tank's net inflow is never positive when full or
//! negative when empty.

use super::SimulateError;
use crate::model::time::{TimeData, VolumeCurve};
use crate::model::{LinkKind, LinkStatus, Model, NodeKind};
use crate::solve::{Conditions, LinkState, Solution, SolveOptions, Solver};
use crate::{Element, ModelError};

/// Largest number of rounds of tank-limit closures in one evaluation.
const LIMIT_ROUNDS: usize = 30;
/// A tank level beyond this (m) is no tank's: the tallest standpipes are some tens of metres.
const LEVEL_BEYOND_ANY_TANK: f64 = 1e5;
/// Flows below this (m³/s) do not count as filling or draining a tank at a limit.
const FLOW_EPS: f64 = 1e-10;

/// How a tank's storage is shaped.
#[derive(Clone, Debug)]
pub enum Shape {
    /// A vertical cylinder of this plan area, m².
    Cylinder(f64),
    /// A level–volume table.
    Curve(VolumeCurve),
}

/// A tank's fixed data.
#[derive(Clone, Debug)]
pub struct TankInfo {
    /// Node index.
    pub node: usize,
    /// Floor elevation, m.
    pub elevation: f64,
    /// Lowest level, m.
    pub min_level: f64,
    /// Highest level, m (`None`: no limit).
    pub max_level: Option<f64>,
    /// Storage shape.
    pub shape: Shape,
}

impl TankInfo {
    /// Volume stored at `level`, m³.
    pub fn volume(&self, level: f64) -> f64 {
        match &self.shape {
            Shape::Cylinder(a) => a * level,
            Shape::Curve(c) => c.volume(level),
        }
    }

    /// Level at which `volume` is stored, m.
    pub fn level(&self, volume: f64) -> f64 {
        match &self.shape {
            Shape::Cylinder(a) => volume / a,
            Shape::Curve(c) => c.level(volume),
        }
    }

    /// Plan area at `level`, m².
    pub fn area(&self, level: f64) -> f64 {
        match &self.shape {
            Shape::Cylinder(a) => *a,
            Shape::Curve(c) => c.area(level),
        }
    }
}

/// Whether a tank is at one of its limits.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum TankMode {
    /// Between its limits: every link as set.
    Normal,
    /// At its maximum level: links that would fill it are closed.
    Full,
    /// At its minimum level: links that would drain it are closed.
    Empty,
}

/// What the integrator needs from one hydraulic solve.
#[derive(Clone, Debug)]
pub struct Stage {
    /// Net inflow into each tank, m³/s.
    pub tank_inflow: Vec<f64>,
    /// Net outflow of all reservoirs into the network, m³/s.
    pub supplied: f64,
    /// Demand met at connected junctions, m³/s.
    pub delivered: f64,
    /// Demand asked but not delivered (junctions cut off from every source, or short of
    /// pressure where demand follows pressure), m³/s.
    pub unsupplied: f64,
    /// Background leakage, m³/s.
    pub leaked: f64,
    /// Flow of the outlets, m³/s.
    pub outlets: f64,
    /// Per pump (in the order of [`Network::pumps`]): running (1 or 0), flow m³/s, shaft power W,
    /// hydraulic power W.
    pub pumps: Vec<[f64; 4]>,
    /// The solution.
    pub solution: Solution,
}

/// Per-link values set by controls (the base values patterns multiply).
#[derive(Clone, Debug)]
pub struct LinkSettings {
    /// Open or closed.
    pub status: Vec<LinkStatus>,
    /// Pump base speed (NaN for other links).
    pub speed: Vec<f64>,
    /// Valve base setting (NaN for other links).
    pub setting: Vec<f64>,
    /// Valve regulates (`true`) or is held open.
    pub automatic: Vec<bool>,
}

impl LinkSettings {
    /// The values written in the model.
    pub fn from_model(model: &Model) -> Self {
        let links = model.links();
        LinkSettings {
            status: links.iter().map(|l| l.status).collect(),
            speed: links.iter().map(|l| l.as_pump().map_or(f64::NAN, |p| p.speed)).collect(),
            setting: links.iter().map(|l| l.as_valve().map_or(f64::NAN, |v| v.setting)).collect(),
            automatic: links.iter().map(|l| l.as_valve().is_some_and(|v| v.automatic)).collect(),
        }
    }
}

/// The working network of a run.
#[derive(Debug)]
pub struct Network {
    /// The values of the next solve.
    conditions: Conditions,
    solver: Solver,
    options: SolveOptions,
    /// Tanks, in node order.
    pub tanks: Vec<TankInfo>,
    /// Link indices of the pumps, in link order.
    pub pumps: Vec<usize>,
    /// Tank index of each node (`usize::MAX` for other nodes).
    tank_of_node: Vec<usize>,
    /// Links closed by the tank-limit rule.
    pub limit_closed: Vec<bool>,
    /// Mode of each tank.
    pub mode: Vec<TankMode>,
    /// Number of hydraulic solves done.
    pub solves: u64,
}

impl Network {
    /// Prepares the network of `model` for a run; checks that every tank has a shape.
    pub fn new(model: &Model) -> Result<Self, SimulateError> {
        model.validate()?;
        let time = &model.time;
        check_attachments(model, time)?;
        let mut tanks = Vec::new();
        let mut tank_of_node = vec![usize::MAX; model.nodes().len()];
        for (i, n) in model.nodes().iter().enumerate() {
            let NodeKind::Tank(t) = &n.kind else { continue };
            let shape = match (time.volume_curves.get(&i), t.diameter) {
                (Some(c), _) => Shape::Curve(c.clone()),
                (None, Some(d)) => Shape::Cylinder(std::f64::consts::PI * d * d / 4.0),
                (None, None) => {
                    return Err(ModelError::at(
                        Some(Element::Node(n.id.to_string())),
                        Some("diameter"),
                        "is missing: a simulation needs each tank's diameter or volume_curve",
                    )
                    .into())
                }
            };
            tank_of_node[i] = tanks.len();
            tanks.push(TankInfo {
                node: i,
                elevation: n.elevation,
                min_level: t.min_level,
                max_level: t.max_level,
                shape,
            });
        }
        let pumps = model.links().iter().enumerate().filter(|(_, l)| l.as_pump().is_some()).map(|(k, _)| k).collect();
        // The limits are enforced here; the conditions accept any trial level of zero or more.
        let conditions = Conditions::from_model(model);
        let solver = Solver::new(model)?;
        let options = SolveOptions { warm_start: true, ..SolveOptions::from_model(model) };
        let n_tanks = tanks.len();
        Ok(Network {
            conditions,
            solver,
            options,
            tanks,
            pumps,
            tank_of_node,
            limit_closed: vec![false; model.links().len()],
            mode: vec![TankMode::Normal; n_tanks],
            solves: 0,
        })
    }

    /// The values as last set.
    pub fn conditions(&self) -> &Conditions {
        &self.conditions
    }

    /// Sets the values that stay constant over a stretch between events: demands, reservoir
    /// heads, pump speeds and valve settings (patterns at clock time `clock`, bases from
    /// `settings`).
    pub fn configure(&mut self, model: &Model, settings: &LinkSettings, clock: f64) -> Result<(), ModelError> {
        let time = &model.time;
        let mult = |p: Option<usize>| p.map_or(1.0, |p| time.patterns[p].at(clock));
        let c = &mut self.conditions;
        for (&i, demands) in &time.demands {
            let d: f64 = demands.iter().map(|d| d.base * mult(d.pattern)).sum();
            c.set_demand(model, i, d)?;
        }
        for (&i, &p) in &time.head_patterns {
            if let NodeKind::Reservoir { head } = model.nodes()[i].kind {
                c.set_reservoir_head(model, i, head * mult(Some(p)))?;
            }
        }
        for (k, l) in model.links().iter().enumerate() {
            match &l.kind {
                LinkKind::Pump(_) => {
                    let s = settings.speed[k] * mult(time.speed_patterns.get(&k).copied());
                    c.set_pump_speed(model, k, s)?;
                }
                LinkKind::Valve(_) => {
                    let s = settings.setting[k] * mult(time.setting_patterns.get(&k).copied());
                    c.set_valve_setting(model, k, s)?;
                    c.set_valve_automatic(model, k, settings.automatic[k])?;
                }
                _ => {}
            }
        }
        for (k, &s) in settings.status.iter().enumerate() {
            c.set_status(model, k, s)?;
        }
        Ok(())
    }

    /// Solves the network with tank volumes `volumes` (statuses as configured, tank limits
    /// applied by mode) and returns what the integrator needs. `time` is for error messages.
    pub fn evaluate(
        &mut self,
        model: &Model,
        volumes: &[f64],
        settings: &LinkSettings,
        time: f64,
    ) -> Result<Stage, SimulateError> {
        for (j, t) in self.tanks.iter().enumerate() {
            let level = t.level(volumes[j]).max(0.0);
            if level.is_nan() || level > LEVEL_BEYOND_ANY_TANK {
                // The level follows from the volume and the shape: blame the shape.
                let key = if matches!(t.shape, Shape::Curve(_)) { "volume_curve" } else { "diameter" };
                return Err(ModelError::at(
                    Some(Element::Node(model.nodes()[t.node].id.to_string())),
                    Some(key),
                    format!(
                        "the tank's level would reach {} m at {} s of the run: its plan area ({} m2) is far too \
                         small for the water it receives (is the {key} in the right unit?)",
                        crate::model::show(level),
                        crate::model::show(time),
                        crate::model::show(t.area(0.0))
                    ),
                )
                .into());
            }
            self.conditions.set_tank_level(model, t.node, level)?;
        }
        if !self.mode.iter().any(|m| *m != TankMode::Normal) {
            self.limit_closed.iter_mut().for_each(|c| *c = false);
        }
        for round in 0.. {
            for (k, &s) in settings.status.iter().enumerate() {
                let s = if self.limit_closed[k] { LinkStatus::Closed } else { s };
                if self.conditions.status(k) != s {
                    self.conditions.set_status(model, k, s)?;
                }
            }
            let solution = self
                .solver
                .solve(model, &self.conditions, &self.options)
                .map_err(|error| SimulateError::Solve { time, error })?;
            self.solves += 1;
            let changed = self.update_limits(model, &solution, settings);
            if !changed {
                return Ok(self.stage(model, solution));
            }
            if round >= LIMIT_ROUNDS {
                let tank = self
                    .mode
                    .iter()
                    .position(|m| *m != TankMode::Normal)
                    .map(|j| model.nodes()[self.tanks[j].node].id.to_string())
                    .unwrap_or_default();
                return Err(SimulateError::TankLimits { time, tank });
            }
        }
        unreachable!("the loop returns")
    }

    /// One round of the tank-limit rule; returns whether a closure changed.
    fn update_limits(&mut self, model: &Model, s: &Solution, settings: &LinkSettings) -> bool {
        let mut changed = false;
        for (k, l) in model.links().iter().enumerate() {
            if settings.status[k] == LinkStatus::Closed {
                if self.limit_closed[k] {
                    self.limit_closed[k] = false;
                    changed = true;
                }
                continue;
            }
            let mut close = false;
            let mut keep_closed = false;
            for (end, other, into_sign) in [(l.to, l.from, 1.0), (l.from, l.to, -1.0)] {
                let j = self.tank_of_node[end];
                if j == usize::MAX {
                    continue;
                }
                let mode = self.mode[j];
                if mode == TankMode::Normal {
                    continue;
                }
                // Flow into the tank through this link.
                let inflow = into_sign * s.flow[k];
                let sign = if mode == TankMode::Full { 1.0 } else { -1.0 };
                if !self.limit_closed[k] {
                    close |= sign * inflow > FLOW_EPS;
                } else {
                    // Closed: would the heads drive water the allowed way if it were open?
                    let (h_tank, h_other) = (s.head[end], s.head[other]);
                    let allowed = match &l.kind {
                        // A pump only moves water from `from` to `to`.
                        LinkKind::Pump(_) => {
                            (mode == TankMode::Full && end == l.from) || (mode == TankMode::Empty && end == l.to)
                        }
                        // The other side cut off from every source (its supply shut, its pump
                        // stopped) would draw from a full tank and cannot feed an empty one.
                        _ if !h_other.is_finite() => mode == TankMode::Full,
                        _ => sign * (h_tank - h_other) > self.options.head_tolerance,
                    };
                    keep_closed |= !allowed;
                }
            }
            if !self.limit_closed[k] && close {
                self.limit_closed[k] = true;
                changed = true;
            } else if self.limit_closed[k] && !keep_closed {
                self.limit_closed[k] = false;
                changed = true;
            }
        }
        changed
    }

    fn stage(&self, model: &Model, solution: Solution) -> Stage {
        let mut tank_inflow = vec![0.0; self.tanks.len()];
        let mut supplied = 0.0;
        for (l, &q) in model.links().iter().zip(&solution.flow) {
            for (node, sign) in [(l.to, 1.0), (l.from, -1.0)] {
                let j = self.tank_of_node[node];
                if j != usize::MAX {
                    tank_inflow[j] += sign * q;
                } else if matches!(model.nodes()[node].kind, NodeKind::Reservoir { .. }) {
                    supplied -= sign * q;
                }
            }
        }
        let (mut delivered, mut unsupplied, mut leaked, mut outlets) = (0.0, 0.0, 0.0, 0.0);
        for (i, n) in model.nodes().iter().enumerate() {
            if n.fixed_head().is_none() {
                // What the junction received, and what it asked but did not get (cut off, or its
                // pressure too low where demand follows pressure).
                let got = solution.delivered(i);
                delivered += got;
                unsupplied += solution.demand[i] - got;
                leaked += solution.leakage(i);
                outlets += solution.outlet(i);
            }
        }
        let pumps = self
            .pumps
            .iter()
            .map(|&k| {
                let r = solution.pumps.iter().find(|p| p.link == k);
                let running = solution.link_state[k] == LinkState::Open;
                match r {
                    Some(r) if running => [1.0, solution.flow[k], r.shaft_power, r.hydraulic_power],
                    _ => [0.0, 0.0, 0.0, 0.0],
                }
            })
            .collect();
        Stage { tank_inflow, supplied, delivered, unsupplied, leaked, outlets, pumps, solution }
    }

    /// Takes tank `j` out of its limit mode and reopens the links closed for it.
    pub fn release(&mut self, model: &Model, j: usize) {
        self.mode[j] = TankMode::Normal;
        let node = self.tanks[j].node;
        for (k, l) in model.links().iter().enumerate() {
            if l.from == node || l.to == node {
                self.limit_closed[k] = false;
            }
        }
    }

    /// Links closed by the limit rule at tank `j` right now.
    pub fn closed_at(&self, model: &Model, j: usize) -> Vec<usize> {
        let node = self.tanks[j].node;
        model
            .links()
            .iter()
            .enumerate()
            .filter(|(k, l)| self.limit_closed[*k] && (l.from == node || l.to == node))
            .map(|(k, _)| k)
            .collect()
    }
}

/// Checks that attachments made through the API point at elements of the right kind.
fn check_attachments(model: &Model, time: &TimeData) -> Result<(), ModelError> {
    let n_nodes = model.nodes().len();
    let n_links = model.links().len();
    let n_patterns = time.patterns.len();
    let bad = |what: &str| {
        Err(ModelError::new(format!("time data refers to {what} that does not exist or has the wrong kind")))
    };
    for (&i, demands) in &time.demands {
        if i >= n_nodes || !matches!(model.nodes()[i].kind, NodeKind::Junction { .. }) {
            return bad("a junction");
        }
        if demands.iter().any(|d| d.pattern.is_some_and(|p| p >= n_patterns) || !d.base.is_finite()) {
            return bad("a pattern");
        }
    }
    for (&i, &p) in &time.head_patterns {
        if i >= n_nodes || !matches!(model.nodes()[i].kind, NodeKind::Reservoir { .. }) || p >= n_patterns {
            return bad("a reservoir or pattern");
        }
    }
    for &i in time.volume_curves.keys() {
        if i >= n_nodes || !matches!(model.nodes()[i].kind, NodeKind::Tank(_)) {
            return bad("a tank");
        }
    }
    for (&k, &p) in &time.speed_patterns {
        if k >= n_links || model.links()[k].as_pump().is_none() || p >= n_patterns {
            return bad("a pump or pattern");
        }
    }
    for (&k, &p) in &time.setting_patterns {
        if k >= n_links || model.links()[k].as_valve().is_none() || p >= n_patterns {
            return bad("a valve or pattern");
        }
    }
    if time.energy.tariff.is_some_and(|p| p >= n_patterns) {
        return bad("a tariff pattern");
    }
    for c in &time.controls {
        if c.link >= n_links {
            return Err(ModelError::at(
                Some(Element::Control(c.id.clone())),
                Some("link"),
                "refers to a link that does not exist",
            ));
        }
    }
    Ok(())
}
