//! The gradient method of Todini & Pilati (1988) for a snapshot of a network.
//!
//! Unknowns are the heads `H` of junctions and the flows `Q` of links; reservoirs and tanks hold
//! fixed heads. Each Newton step linearises every open link's law `h(Q) = H_from − H_to` around
//! the current flow, `h(Q') ≈ y + g (Q' − Q)` with `y = h(Q)` and `g = dh/dQ`, and eliminates the
//! flows: with `p = 1/g` and `c = Q − p y`, the new flow of a link is `Q' = c + p (H_from − H_to)`,
//! and mass balance at every junction gives a symmetric positive definite system for the heads,
//!
//! ```text
//! Σ_k p_k H_i − Σ_k p_k H_j = −d_i + Σ_in c_k − Σ_out c_k + Σ_(fixed neighbours) p_k H_fixed,
//! ```
//!
//! a weighted graph Laplacian. Flows then follow link by link. At a solution the mass balance is
//! met to the accuracy of the linear solve and the energy equations to the Newton tolerance.
//!
//! Phases, one file each: [`pattern`] (ordering, symbolic analysis, scatter map; once per
//! structure), [`links`] (each link's law, once per model), assembly and the iteration loop
//! (here), [`factor`] (numeric factorization and triangular solves, every step), [`status`]
//! (check valves, after each converged inner solve), [`topology`] (which junctions a fixed head
//! reaches). Entry points: [`solve`] for one answer, [`Solver`] to solve a network many times
//! reusing the analysis.
//!
//! # Convergence
//! A step is accepted as converged when the largest head change is at most the head tolerance and
//! the relative flow change `Σ|ΔQ| / Σ|Q|` at most the flow tolerance. Then the status of check
//! valves is examined; if one changes, the iteration goes on. Finally every open link's energy
//! equation and every junction's mass balance are evaluated and the largest residuals reported.
//! A case that has not converged within the iteration limit is an error, never an answer.

pub mod factor;
pub mod links;
pub mod pattern;
pub mod status;
pub mod topology;

use crate::error::{Element, Offender, SolveError};
use crate::model::{LinkKind, Model, ValveType};
use factor::Factor;
use links::LinkLaw;
use pattern::{Pattern, NONE};
use status::StatusTracker;
use topology::Adjacency;

/// Options of one solve. Defaults come from the model's `[hydraulics]`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SolveOptions {
    /// Iteration limit (status changes included).
    pub max_iterations: u32,
    /// Largest head change accepted at convergence, m.
    pub head_tolerance: f64,
    /// Largest relative flow change accepted at convergence.
    pub flow_tolerance: f64,
    /// Start from the previous solution of this solver, if any (useful for scenario loops).
    pub warm_start: bool,
}

impl SolveOptions {
    /// The options a model asks for.
    pub fn from_model(model: &Model) -> Self {
        SolveOptions {
            max_iterations: model.options.max_iterations,
            head_tolerance: model.options.head_tolerance,
            flow_tolerance: model.options.flow_tolerance,
            warm_start: false,
        }
    }
}

pub use links::INITIAL_VELOCITY;

/// Iterations without convergence in one set of device states after which an active pressure
/// valve whose flow keeps drifting is taken to be unable to regulate.
pub const STALLED_ITERATIONS: u32 = 40;
pub use status::{Ending, LinkState};

/// Results of one pump in a solution (SI).
#[derive(Clone, Debug, PartialEq)]
pub struct PumpResult {
    /// Index of the pump's link.
    pub link: usize,
    /// Head added, `H_to − H_from`, m.
    pub head: f64,
    /// Relative speed.
    pub speed: f64,
    /// Efficiency used, fraction.
    pub efficiency: f64,
    /// Hydraulic power ρ g Q H, W.
    pub hydraulic_power: f64,
    /// Shaft power ρ g Q H / η, W.
    pub shaft_power: f64,
    /// Whether it runs past the end of its curve (head below zero).
    pub beyond_curve: bool,
}

/// Something an engineer should look at in a solved network.
#[derive(Clone, Debug, PartialEq)]
pub struct Warning {
    /// The element concerned.
    pub element: Option<Element>,
    /// What to look at.
    pub message: String,
}

/// A solved snapshot, SI units (pressures as pressure head in m of the model's water).
#[derive(Clone, Debug, PartialEq)]
pub struct Solution {
    /// Always true for a returned solution (non-convergence is an error).
    pub converged: bool,
    /// Newton iterations done (linear solves).
    pub iterations: u32,
    /// Device state changes made on the way (check valves, pumps, control valves).
    pub status_changes: u32,
    /// Which rule ended the status logic.
    pub ending: Ending,
    /// Results of every pump, in link order.
    pub pumps: Vec<PumpResult>,
    /// Head per node, m; NaN for disconnected junctions.
    pub head: Vec<f64>,
    /// Pressure head per node, m; NaN for disconnected junctions.
    pub pressure: Vec<f64>,
    /// Demand per node (m³/s) as supplied; zero for fixed-head nodes.
    pub demand: Vec<f64>,
    /// Whether a fixed head reaches the node through open links.
    pub connected: Vec<bool>,
    /// Flow per link, m³/s, positive from `from` to `to`.
    pub flow: Vec<f64>,
    /// Mean velocity per link, m/s, same sign as the flow (NaN for pumps).
    pub velocity: Vec<f64>,
    /// Head difference across the link in the direction of flow (|H_from − H_to|), m; for a closed
    /// link, the head difference it holds; NaN when an end is disconnected.
    pub headloss: Vec<f64>,
    /// State of every link.
    pub link_state: Vec<LinkState>,
    /// Largest |Σ inflow − Σ outflow − demand| over connected junctions, m³/s.
    pub max_mass_residual: f64,
    /// Largest |h(Q) − (H_from − H_to)| over open links, m.
    pub max_energy_residual: f64,
    /// Largest head change of the last iteration, m.
    pub last_head_change: f64,
    /// Relative flow change of the last iteration.
    pub last_flow_change: f64,
    /// Things to look at.
    pub warnings: Vec<Warning>,
}

impl Solution {
    /// Net outflow of a node into the network, m³/s (positive: the node supplies water).
    pub fn net_outflow(&self, model: &Model, node: usize) -> f64 {
        model
            .links()
            .iter()
            .zip(&self.flow)
            .map(|(l, &q)| {
                if l.from == node {
                    q
                } else if l.to == node {
                    -q
                } else {
                    0.0
                }
            })
            .sum()
    }
}

/// Solves one snapshot of `model` with its own options.
pub fn solve(model: &Model) -> Result<Solution, SolveError> {
    Solver::new(model)?.solve(model)
}

/// A reusable solver: the analysis of one network structure and its workspaces.
///
/// Values (demands, heads, statuses, pipe data) may change between solves; when the structure
/// changes (nodes or links added, a node's kind changed), the analysis is redone automatically.
#[derive(Debug)]
pub struct Solver {
    pattern: Pattern,
    factor: Factor,
    adjacency: Adjacency,
    laws: Vec<LinkLaw>,
    flow: Vec<f64>,
    has_previous: bool,
    // Scratch, sized once per structure.
    p: Vec<f64>,
    c: Vec<f64>,
    rhs: Vec<f64>,
    x_old: Vec<f64>,
    open: Vec<bool>,
    on_law: Vec<bool>,
    last_dq: Vec<f64>,
    connected: Vec<bool>,
    known_head: Vec<f64>,
    anchored: Vec<bool>,
    /// Σ|demand| floored at 1e-3 m³/s: the scale of relative flow changes.
    demand_scale: f64,
    stack: Vec<u32>,
}

impl Solver {
    /// Analyses `model` (validating it first).
    pub fn new(model: &Model) -> Result<Self, SolveError> {
        model.validate()?;
        let pattern = Pattern::analyse(model);
        let factor = Factor::new(&pattern);
        let n_links = model.links().len();
        let n_nodes = model.nodes().len();
        Ok(Solver {
            factor,
            adjacency: Adjacency::new(model),
            laws: model.links().iter().map(|l| LinkLaw::new(model, l)).collect(),
            flow: vec![0.0; n_links],
            has_previous: false,
            p: vec![0.0; n_links],
            c: vec![0.0; n_links],
            rhs: vec![0.0; pattern.n],
            x_old: vec![0.0; pattern.n],
            open: vec![false; n_links],
            on_law: vec![false; n_links],
            last_dq: vec![0.0; n_links],
            connected: vec![false; n_nodes],
            known_head: vec![f64::NAN; n_nodes],
            anchored: vec![false; n_nodes],
            demand_scale: 0.0,
            stack: Vec::with_capacity(n_nodes),
            pattern,
        })
    }

    /// The analysed pattern (for statistics).
    pub fn pattern(&self) -> &Pattern {
        &self.pattern
    }

    /// Solves `model` with the options in its `[hydraulics]`.
    pub fn solve(&mut self, model: &Model) -> Result<Solution, SolveError> {
        self.solve_with(model, &SolveOptions::from_model(model))
    }

    /// Solves `model` with explicit options.
    pub fn solve_with(&mut self, model: &Model, options: &SolveOptions) -> Result<Solution, SolveError> {
        model.validate()?;
        if !self.pattern.fits(model) {
            *self = Solver::new(model)?;
        }
        // Pipe data may have changed since the analysis; laws are cheap to recompute.
        for (law, link) in self.laws.iter_mut().zip(model.links()) {
            *law = LinkLaw::new(model, link);
        }
        if !(options.warm_start && self.has_previous) {
            for (q, law) in self.flow.iter_mut().zip(&self.laws) {
                *q = law.initial_flow;
            }
        }
        self.demand_scale = model.nodes().iter().map(|n| n.demand().abs()).sum::<f64>().max(1e-3);
        let result = self.iterate(model, options);
        self.has_previous = result.is_ok();
        result
    }

    fn iterate(&mut self, model: &Model, options: &SolveOptions) -> Result<Solution, SolveError> {
        let nodes = model.nodes();
        let links = model.links();
        let fixed_head: Vec<f64> = nodes.iter().map(|n| n.fixed_head().unwrap_or(f64::NAN)).collect();
        let mut tracker = StatusTracker::new(model);
        let mut head: Vec<f64> = fixed_head.clone();
        let mut iterations = 0u32;
        let mut status_changes = 0u32;
        let mut head_change = f64::INFINITY;
        let mut flow_change = f64::INFINITY;
        let mut states_stale = true;
        let mut since_change = 0u32;

        loop {
            if states_stale {
                self.apply_states(model, &mut tracker, &fixed_head);
                states_stale = false;
            }
            if iterations >= options.max_iterations {
                return Err(self.not_converged(model, &head, iterations, head_change, flow_change));
            }
            iterations += 1;
            since_change += 1;
            if since_change > STALLED_ITERATIONS {
                // An active pressure valve whose pinned head cannot be held (no sink for the flow
                // it would pass, or a head it cannot reach) makes its flow drift without a fixed
                // point. Such a valve cannot regulate: it closes, and the status logic decides
                // again from the next converged solution.
                if let Some(k) = self.drifting_pressure_valve(model, &tracker) {
                    tracker.state[k] = LinkState::ValveClosed;
                    status_changes += 1;
                    states_stale = true;
                    since_change = 0;
                    head_change = f64::INFINITY;
                    continue;
                }
            }
            self.assemble(model, &tracker);
            for (u, x) in self.x_old.iter_mut().enumerate() {
                *x = head[self.pattern.node_of_unknown[u] as usize];
            }
            self.factor.factor_and_solve(&self.pattern, &mut self.rhs).map_err(|e| SolveError::Numerical {
                iteration: iterations,
                detail: match self.pattern.node_of_unknown.get(e.unknown) {
                    Some(&node) => format!("pivot of node '{}' is not positive", nodes[node as usize].id),
                    None => "a pivot is not positive".to_owned(),
                },
            })?;
            head_change = 0.0;
            let mut finite = true;
            for u in 0..self.pattern.n {
                let node = self.pattern.node_of_unknown[u] as usize;
                if self.connected[node] {
                    let h = self.rhs[u];
                    finite &= h.is_finite();
                    head_change = head_change.max((h - self.x_old[u]).abs());
                    head[node] = h;
                } else {
                    head[node] = f64::NAN;
                }
            }
            if iterations == 1 {
                // No previous heads to compare with.
                head_change = f64::INFINITY;
            }
            flow_change = self.update_flows(model, &tracker, &head);
            if !finite || !flow_change.is_finite() {
                return Err(SolveError::Numerical {
                    iteration: iterations,
                    detail: "heads or flows became NaN".into(),
                });
            }
            let heads_settled = head_change <= options.head_tolerance
                // At the floating-point floor of a badly conditioned network, heads can keep
                // moving by more than a tight tolerance while every energy equation already holds
                // to it: then the energy residual decides.
                || (flow_change <= options.flow_tolerance
                    && iterations > 1
                    && self.max_energy_residual(model, &head) <= options.head_tolerance);
            if heads_settled && flow_change <= options.flow_tolerance {
                if !tracker.has_devices() {
                    break;
                }
                let laws = &self.laws;
                let open_loss = |k: usize, q: f64| laws[k].evaluate_exact(q).0;
                let shutoff = |k: usize| laws[k].shutoff_head().unwrap_or(f64::INFINITY);
                let seen = status::Observed {
                    flow: &self.flow,
                    head: &head,
                    connected: &self.connected,
                    open_loss: &open_loss,
                    shutoff: &shutoff,
                    tolerance: options.head_tolerance,
                };
                match tracker.update(model, &seen) {
                    Ok(0) => break,
                    Ok(n) => {
                        status_changes += n;
                        states_stale = true;
                        since_change = 0;
                        head_change = f64::INFINITY;
                    }
                    Err(cycling) => {
                        return Err(SolveError::StatusCycle {
                            iterations,
                            links: cycling.into_iter().map(|k| links[k].id.clone()).collect(),
                        })
                    }
                }
            }
        }
        let ending = tracker.ending(status_changes);
        Ok(self.finish(model, head, iterations, status_changes, head_change, flow_change, &tracker, ending))
    }

    /// Recomputes, for the current device states, which links carry flow, which nodes a fixed
    /// head reaches, and which heads are pinned by active pressure valves.
    fn apply_states(&mut self, model: &Model, tracker: &mut StatusTracker, fixed_head: &[f64]) {
        let links = model.links();
        loop {
            for (k, s) in tracker.state.iter().enumerate() {
                self.open[k] = s.carries_flow();
            }
            topology::mark_connected(model, &self.adjacency, &self.open, &mut self.connected, &mut self.stack);
            self.known_head.copy_from_slice(fixed_head);
            for (k, l) in links.iter().enumerate() {
                self.open[k] &= self.connected[l.from] && self.connected[l.to];
                self.on_law[k] = self.open[k] && tracker.state[k].uses_law();
                if !self.open[k] {
                    self.flow[k] = 0.0;
                    continue;
                }
                if tracker.state[k] == LinkState::Active {
                    if let LinkKind::Valve(v) = &l.kind {
                        match v.valve {
                            ValveType::PressureReducing => {
                                self.known_head[l.to] = model.nodes()[l.to].elevation + v.setting;
                            }
                            ValveType::PressureSustaining => {
                                self.known_head[l.from] = model.nodes()[l.from].elevation + v.setting;
                            }
                            ValveType::FlowControl => self.flow[k] = v.setting,
                            ValveType::Throttle => {}
                        }
                    }
                }
            }
            // A group of junctions joined to every known head only through regulating valves has
            // no head the equations can fix (its matrix block would be singular), and a valve
            // cannot regulate a branch whose demand alone sets its flow: such a valve is fully open.
            topology::mark_reached(
                model,
                &self.adjacency,
                &self.on_law,
                self.known_head.iter().map(|h| !h.is_nan()),
                &mut self.anchored,
                &mut self.stack,
            );
            let mut forced = false;
            for i in 0..model.nodes().len() {
                if !self.connected[i] || self.anchored[i] {
                    continue;
                }
                if let Some(&k) = self.adjacency.of(i).iter().find(|&&k| tracker.state[k as usize] == LinkState::Active)
                {
                    tracker.hold_open(model, k as usize);
                    forced = true;
                    break;
                }
            }
            if !forced {
                break;
            }
        }
    }

    /// The active pressure valve whose flow changed most in the last step, if any.
    fn drifting_pressure_valve(&self, model: &Model, tracker: &StatusTracker) -> Option<usize> {
        model
            .links()
            .iter()
            .enumerate()
            .filter(|(k, l)| {
                tracker.state[*k] == LinkState::Active
                    && matches!(l.as_valve(), Some(v) if matches!(v.valve, ValveType::PressureReducing | ValveType::PressureSustaining))
            })
            .max_by(|a, b| self.last_dq[a.0].total_cmp(&self.last_dq[b.0]))
            .map(|(k, _)| k)
    }

    /// New flows from new heads; returns the relative flow change Σ|ΔQ| / Σ|Q|.
    ///
    /// Links on their law follow `Q = c + p (H_from − H_to)`. An active flow-control valve holds
    /// its setting. An active pressure valve's flow is whatever the mass balance of the node it
    /// pins requires; that flow enters the other node's balance at the next step, so at
    /// convergence both balances hold.
    fn update_flows(&mut self, model: &Model, tracker: &StatusTracker, head: &[f64]) -> f64 {
        let links = model.links();
        let (mut sum_dq, mut sum_q) = (0.0, 0.0);
        let mut pinned_flows = false;
        for (k, l) in links.iter().enumerate() {
            let q = if !self.open[k] {
                0.0
            } else if tracker.state[k].uses_law() {
                self.c[k] + self.p[k] * (head[l.from] - head[l.to])
            } else {
                pinned_flows |= matches!(&l.kind, LinkKind::Valve(v) if v.valve != ValveType::FlowControl);
                self.c[k]
            };
            sum_dq += (q - self.flow[k]).abs();
            sum_q += q.abs();
            self.last_dq[k] = (q - self.flow[k]).abs();
            self.flow[k] = q;
        }
        if pinned_flows {
            for (k, l) in links.iter().enumerate() {
                if !self.open[k] || tracker.state[k] != LinkState::Active {
                    continue;
                }
                let Some(v) = l.as_valve() else { continue };
                let (node, sign) = match v.valve {
                    ValveType::PressureReducing => (l.to, 1.0),
                    ValveType::PressureSustaining => (l.from, -1.0),
                    _ => continue,
                };
                // Net inflow the pinned node needs from this valve: its demand plus its outflow
                // through every other link, minus its inflow through them.
                let mut need = model.nodes()[node].demand();
                for &j in self.adjacency.of(node) {
                    let j = j as usize;
                    if j == k {
                        continue;
                    }
                    let lj = &links[j];
                    if lj.from == node {
                        need += self.flow[j];
                    } else {
                        need -= self.flow[j];
                    }
                }
                // A pressure-sustaining valve pins its upstream node: its flow is what leaves it.
                let q = if sign > 0.0 { need } else { -need };
                sum_dq += (q - self.flow[k]).abs();
                sum_q += q.abs() - self.flow[k].abs();
                self.last_dq[k] = (q - self.flow[k]).abs();
                self.flow[k] = q;
            }
        }
        // Relative to the water moving; a network with (almost) no flow is measured against the
        // total demand, or an absolute floor of 1 L/s, so that round-off in flows of nothing
        // does not count as change.
        sum_dq / sum_q.max(self.demand_scale)
    }

    /// Largest |h(Q) − (H_from − H_to)| over links on their law.
    fn max_energy_residual(&self, model: &Model, head: &[f64]) -> f64 {
        energy_residuals(model, &self.laws, &self.flow, head, &self.on_law).into_iter().fold(0.0, f64::max)
    }

    /// Fills the matrix values and right-hand side for the current flows and states.
    fn assemble(&mut self, model: &Model, tracker: &StatusTracker) {
        let values = &mut self.factor.values;
        values.iter_mut().for_each(|v| *v = 0.0);
        for (u, r) in self.rhs.iter_mut().enumerate() {
            *r = -model.nodes()[self.pattern.node_of_unknown[u] as usize].demand();
        }
        let known = &self.known_head;
        for (k, l) in model.links().iter().enumerate() {
            if !self.open[k] {
                self.p[k] = 0.0;
                self.c[k] = 0.0;
                continue;
            }
            let (p, c) = if tracker.state[k].uses_law() {
                let (y, g) = self.laws[k].evaluate(self.flow[k]);
                let p = 1.0 / g;
                (p, self.flow[k] - p * y)
            } else {
                // Regulating valve: a known flow this step, no coupling of heads.
                (0.0, self.flow[k])
            };
            self.p[k] = p;
            self.c[k] = c;
            let s = self.pattern.links[k];
            let free_from = s.from != NONE && known[l.from].is_nan();
            let free_to = s.to != NONE && known[l.to].is_nan();
            if free_from {
                values[self.pattern.diag_slot[s.from as usize] as usize] += p;
                self.rhs[s.from as usize] -= c;
                if !free_to {
                    self.rhs[s.from as usize] += p * known[l.to];
                }
            }
            if free_to {
                values[self.pattern.diag_slot[s.to as usize] as usize] += p;
                self.rhs[s.to as usize] += c;
                if !free_from {
                    self.rhs[s.to as usize] += p * known[l.from];
                }
            }
            if free_from && free_to {
                values[s.off as usize] -= p;
            }
        }
        for u in 0..self.pattern.n {
            let node = self.pattern.node_of_unknown[u] as usize;
            if !self.connected[node] {
                values[self.pattern.diag_slot[u] as usize] = 1.0;
                self.rhs[u] = 0.0;
            } else if !known[node].is_nan() {
                values[self.pattern.diag_slot[u] as usize] = 1.0;
                self.rhs[u] = known[node];
            }
        }
    }

    fn not_converged(
        &self,
        model: &Model,
        head: &[f64],
        iterations: u32,
        head_change: f64,
        flow_change: f64,
    ) -> SolveError {
        let energy = energy_residuals(model, &self.laws, &self.flow, head, &self.on_law);
        let mut worst_nodes: Vec<Offender> = (0..self.pattern.n)
            .filter(|&u| self.connected[self.pattern.node_of_unknown[u] as usize])
            .map(|u| {
                let node = self.pattern.node_of_unknown[u] as usize;
                Offender { id: model.nodes()[node].id.clone(), value: (head[node] - self.x_old[u]).abs() }
            })
            .filter(|o| o.value.is_finite())
            .collect();
        worst_nodes.sort_by(|a, b| b.value.total_cmp(&a.value));
        worst_nodes.truncate(5);
        let mut worst_links: Vec<Offender> = model
            .links()
            .iter()
            .enumerate()
            .filter(|(k, _)| self.on_law[*k])
            .map(|(k, l)| Offender { id: l.id.clone(), value: energy[k] })
            .collect();
        worst_links.sort_by(|a, b| b.value.total_cmp(&a.value));
        worst_links.truncate(5);
        SolveError::NotConverged {
            iterations,
            head_change,
            flow_change,
            energy_residual: energy.iter().copied().fold(0.0, f64::max),
            worst_nodes,
            worst_links,
        }
    }

    #[allow(clippy::too_many_arguments)]
    fn finish(
        &self,
        model: &Model,
        head: Vec<f64>,
        iterations: u32,
        status_changes: u32,
        last_head_change: f64,
        last_flow_change: f64,
        tracker: &StatusTracker,
        ending: Ending,
    ) -> Solution {
        let nodes = model.nodes();
        let links = model.links();
        let energy = energy_residuals(model, &self.laws, &self.flow, &head, &self.on_law);
        let max_energy_residual = energy.iter().copied().fold(0.0, f64::max);
        let mut balance: Vec<f64> = nodes.iter().map(|n| -n.demand()).collect();
        for (l, &q) in links.iter().zip(&self.flow) {
            balance[l.to] += q;
            balance[l.from] -= q;
        }
        let max_mass_residual = nodes
            .iter()
            .enumerate()
            .filter(|(i, n)| n.fixed_head().is_none() && self.connected[*i])
            .map(|(i, _)| balance[i].abs())
            .fold(0.0, f64::max);
        let pressure: Vec<f64> = nodes.iter().zip(&head).map(|(n, h)| h - n.elevation).collect();
        let velocity: Vec<f64> = self
            .flow
            .iter()
            .zip(&self.laws)
            .map(|(q, law)| if law.area > 0.0 { q / law.area } else { f64::NAN })
            .collect();
        let headloss: Vec<f64> = links.iter().map(|l| (head[l.from] - head[l.to]).abs()).collect();
        let link_state: Vec<LinkState> = tracker
            .state
            .iter()
            .enumerate()
            .map(|(k, &s)| if s.carries_flow() && !self.open[k] { LinkState::Disconnected } else { s })
            .collect();
        let rho_g = model.options.water_properties().density * crate::units::GRAVITY;
        let pumps: Vec<PumpResult> = links
            .iter()
            .enumerate()
            .filter_map(|(k, l)| {
                let pump = l.as_pump()?;
                let q = self.flow[k];
                let lift = head[l.to] - head[l.from];
                let running = link_state[k] == LinkState::Open;
                let efficiency = pump.efficiency.at(q, pump.speed);
                let hydraulic_power = if running { rho_g * q * lift } else { 0.0 };
                Some(PumpResult {
                    link: k,
                    head: if running { lift } else { 0.0 },
                    speed: pump.speed,
                    efficiency,
                    hydraulic_power,
                    shaft_power: hydraulic_power / efficiency,
                    beyond_curve: running && self.laws[k].beyond_curve(q),
                })
            })
            .collect();
        let mut warnings = Vec::new();
        let cut_off: Vec<usize> = (0..nodes.len()).filter(|&i| !self.connected[i]).collect();
        for &i in &cut_off {
            let d = nodes[i].demand();
            let message = if d != 0.0 {
                "cut off from every reservoir and tank by closed links; its demand is not supplied".to_owned()
            } else {
                "cut off from every reservoir and tank by closed links; it has no head".to_owned()
            };
            warnings.push(Warning { element: Some(Element::Node(nodes[i].id.clone())), message });
        }
        for (i, n) in nodes.iter().enumerate() {
            if n.fixed_head().is_none() && self.connected[i] && pressure[i] < 0.0 {
                warnings.push(Warning {
                    element: Some(Element::Node(n.id.clone())),
                    message: "negative pressure: the demand cannot really be delivered at this head (consider a \
                              pressure-driven analysis)"
                        .to_owned(),
                });
            }
        }
        for r in &pumps {
            if r.beyond_curve {
                warnings.push(Warning {
                    element: Some(Element::Link(links[r.link].id.clone())),
                    message: "runs past the end of its head curve (it adds no head and acts as a resistance)".into(),
                });
            }
        }
        Solution {
            converged: true,
            iterations,
            status_changes,
            ending,
            pumps,
            demand: nodes.iter().map(|n| n.demand()).collect(),
            connected: self.connected.clone(),
            head,
            pressure,
            flow: self.flow.clone(),
            velocity,
            headloss,
            link_state,
            max_mass_residual,
            max_energy_residual,
            last_head_change,
            last_flow_change,
            warnings,
        }
    }
}

/// |h(Q) − (H_from − H_to)| per link (zero for links not open).
/// |h(Q) − (H_from − H_to)| per link on its law (zero for closed and regulating links, whose
/// energy equation is replaced by their constraint).
fn energy_residuals(model: &Model, laws: &[LinkLaw], flow: &[f64], head: &[f64], on_law: &[bool]) -> Vec<f64> {
    model
        .links()
        .iter()
        .enumerate()
        .map(
            |(k, l)| {
                if on_law[k] {
                    (laws[k].evaluate_exact(flow[k]).0 - (head[l.from] - head[l.to])).abs()
                } else {
                    0.0
                }
            },
        )
        .collect()
}
