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
//! # Head corrections instead of heads
//! The system is solved for the *corrections* `δ = H' − H` of the current heads: with
//! `c = Q + p (H_from − H_to − y)` the new flow is `Q' = c + p (δ_from − δ_to)`, and the matrix
//! is the same Laplacian with right-hand side `−d_i + Σ_in c − Σ_out c`. Mathematically this is
//! the same Newton step (it does not depend on the heads it starts from); numerically it removes
//! the floating-point floor of the plain form, where heads of about 100 m, computed afresh at
//! every step from a matrix whose conductances span many orders of magnitude, stall at changes
//! of 1e-5 to 1e-4 m on large networks. Here `c` carries the energy residual, which goes to zero,
//! and `δ` shrinks with it, so the head change, the flow change and the residuals all converge
//! to round-off.
//!
//! # Forest and core
//! Dead-end trees (see [`pattern`]) never enter the matrix: the flow of a tree pipe is the demand
//! beyond it, summed leaves to root once per set of device states; the tree junctions' demands
//! are added to their roots; after the core has converged one sweep from the roots gives the
//! tree heads on the exact laws.
//!
//! # One pass per iteration
//! Per step: factor and solve (`factor`), apply the corrections, then one pass over the core
//! links in matrix-column order that computes each new flow, evaluates its law once (value and
//! slope: the energy residual, and `p`, `c` for the next step) and scatters it into the next
//! matrix. Laws of Hazen–Williams pipes, the commonest by far, are evaluated inline from three
//! numbers per link; other laws through [`links::LinkLaw`]. Nothing is allocated in the loop.
//!
//! Phases, one file each: [`pattern`] (forest-core split, ordering, symbolic analysis, scatter
//! map; once per structure, shared between clones of a [`Solver`]), [`links`] (each link's law,
//! once per solve), assembly and the iteration loop (here), [`factor`] (numeric factorization and
//! triangular solves, every step), [`status`] (device states, after each converged inner solve),
//! [`topology`] (which junctions a fixed head reaches). Entry points: [`solve`] for one answer,
//! [`Solver`] to solve a network many times reusing the analysis, [`Solver::solve_scenario`] and
//! [`Solver::solve_batch`] for demand and status scenarios (in parallel), [`Solver::timings`] for
//! where the time went.
//!
//! # Convergence
//! A step is accepted as converged when the relative flow change `Σ|ΔQ| / Σ|Q|` is at most the
//! flow tolerance and either the largest head correction or the largest energy residual of the
//! links on their law is at most the head tolerance (the residual comes free from the pass
//! above; it decides when a tolerance is set below what a network's heads can resolve). Then the
//! device states are examined; if one changes, the iteration goes on. Finally every open link's
//! energy equation and every junction's mass balance are evaluated and the largest residuals
//! reported. A case that has not converged within the iteration limit is an error, never an
//! answer.

pub mod factor;
pub mod finite;
pub mod links;
pub mod pattern;
pub mod status;
pub mod topology;

use crate::error::{Element, ModelError, Offender, SolveError};
use crate::model::{Link, LinkKind, LinkStatus, Model, ValveType};
use factor::Factor;
use links::LinkLaw;
use pattern::{Pattern, NONE};
use status::StatusTracker;
use std::sync::Arc;
use std::time::{Duration, Instant};

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

/// Where the time of the last solve went (wall-clock, this thread).
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Timings {
    /// Structure analysis (forest-core split, ordering, symbolic factorization), when this solver
    /// did it; zero when the analysis was reused.
    pub analysis: Duration,
    /// Laws, demands and initial values of this solve.
    pub preparation: Duration,
    /// Link coefficients (flows, head losses, slopes) and scattering them into the matrix.
    pub assembly: Duration,
    /// Numeric Cholesky factorization.
    pub factorization: Duration,
    /// Triangular solves.
    pub solves: Duration,
    /// Device states: connectivity, pinned heads, state rules.
    pub status: Duration,
    /// Dead-end trees: flows from demands, heads from their roots.
    pub forest: Duration,
    /// Residuals, pressures, velocities, warnings of the solution.
    pub results: Duration,
    /// Newton iterations done.
    pub iterations: u32,
}

impl Timings {
    /// Time spent inside the iterations (assembly, factorization, solves).
    pub fn iterating(&self) -> Duration {
        self.assembly + self.factorization + self.solves
    }

    /// Everything but the analysis.
    pub fn solve_total(&self) -> Duration {
        self.preparation + self.iterating() + self.status + self.forest + self.results
    }
}

/// One scenario of a network for [`Solver::solve_scenario`] and [`Solver::solve_batch`]: the
/// model's demands scaled by a factor, and some links' user status changed.
#[derive(Clone, Debug, PartialEq)]
pub struct Scenario {
    /// Factor on every junction demand (1 = as in the model).
    pub demand_multiplier: f64,
    /// Links (by index) whose user status differs from the model's.
    pub statuses: Vec<(usize, LinkStatus)>,
}

impl Default for Scenario {
    fn default() -> Self {
        Scenario { demand_multiplier: 1.0, statuses: Vec::new() }
    }
}

/// How a core link enters the current iteration (low two bits), and which of its ends are free
/// unknowns (the bits above).
const MODE_CLOSED: u8 = 0;
/// Steps of a cold start taken with secant slopes (see `Solver::linearise`).
const SECANT_STEPS: u32 = 1;
const MODE_LAW: u8 = 1;
const MODE_FIXED_FLOW: u8 = 2;
/// An active pressure valve: its flow comes from the balance of the node it pins.
const MODE_PINNED: u8 = 3;
const MODE_MASK: u8 = 3;
const FREE_FROM: u8 = 4;
const FREE_TO: u8 = 8;

/// A core link's law in the form the iteration evaluates: Hazen–Williams pipes inline, anything
/// else through its [`LinkLaw`].
#[derive(Clone, Copy, Debug, PartialEq)]
struct HotLaw {
    /// Hazen–Williams resistance, or NaN for a law evaluated through its [`LinkLaw`] (a flag
    /// field would add a quarter to the size of this per-link array).
    r: f64,
    minor: f64,
    min_slope: f64,
}

impl HotLaw {
    #[inline]
    fn general(&self) -> bool {
        self.r.is_nan()
    }
}

/// An active pressure valve: its core position and the node whose head it pins.
#[derive(Clone, Copy, Debug, PartialEq)]
struct Pinned {
    core: u32,
    link: u32,
    node: u32,
    /// +1 for a pressure-reducing valve (it feeds the pinned node), −1 for a sustaining one.
    sign: f64,
    /// |ΔQ| of its last step.
    change: f64,
}

/// Networks with at least this many links compute their links' laws on all cores (a few
/// percent of a solve; below it the threads' start costs more than they save).
const PARALLEL_LAWS: usize = 50_000;

/// A reusable solver: the analysis of one network structure and its workspaces.
///
/// Values (demands, heads, statuses, pipe data) may change between solves; when the structure
/// changes (nodes or links added, a node's kind changed, a pipe turned into another kind of
/// link), the analysis is redone automatically. Cloning is cheap in analysis: the clones share
/// one [`Pattern`] (behind an `Arc`) and only allocate their own workspaces, which is how
/// [`Solver::solve_batch`] gives every thread its solver.
#[derive(Debug, Clone)]
pub struct Solver {
    pattern: Arc<Pattern>,
    factor: Factor,
    laws: Vec<LinkLaw>,
    /// Laws of the core links, in core order.
    hot: Vec<HotLaw>,
    /// Flow of every link (for core links, valid after `sync_flows`).
    flow: Vec<f64>,
    /// Head of every node: the current iterate, then the solution.
    head: Vec<f64>,
    has_previous: bool,
    // Core links, in core order: flow, conductance p = 1/g, and c = Q + p (ΔH − h(Q)), so that
    // the next flow is c + p (δ_from − δ_to) for head corrections δ.
    cq: Vec<f64>,
    cp: Vec<f64>,
    cc: Vec<f64>,
    mode: Vec<u8>,
    // Per unknown.
    rhs: Vec<f64>,
    /// The last head corrections.
    delta: Vec<f64>,
    /// Heads of the unknowns during the iteration (the nodes' heads follow at `sync_flows`).
    unknown_head: Vec<f64>,
    unknown_demand: Vec<f64>,
    free: Vec<bool>,
    // Per link.
    open: Vec<bool>,
    on_law: Vec<bool>,
    status: Vec<LinkStatus>,
    // Per node.
    connected: Vec<bool>,
    known_head: Vec<f64>,
    demand: Vec<f64>,
    subtree: Vec<f64>,
    pinned: Vec<Pinned>,
    /// Σ|Q| over the tree pipes (constant for a set of device states).
    tree_flow_sum: f64,
    /// Nodes a known head reaches through links on their law (scratch of `apply_states`).
    anchored: Vec<bool>,
    /// Σ|demand| floored at 1e-3 m³/s: the scale of relative flow changes.
    demand_scale: f64,
    stack: Vec<u32>,
    timings: Timings,
    analysis_time: Duration,
}

impl Solver {
    /// Analyses `model` (validating it first).
    pub fn new(model: &Model) -> Result<Self, SolveError> {
        model.validate()?;
        let start = Instant::now();
        let pattern = Pattern::analyse(model).ok_or_else(|| {
            SolveError::Model(ModelError::new("the network is too large for the solver's 32-bit matrix indices"))
        })?;
        let pattern = Arc::new(pattern);
        let analysis_time = start.elapsed();
        Ok(Solver::with_pattern(model, pattern, analysis_time))
    }

    fn with_pattern(model: &Model, pattern: Arc<Pattern>, analysis_time: Duration) -> Self {
        let n_links = model.links().len();
        let n_nodes = model.nodes().len();
        let n_core = pattern.core.len();
        Solver {
            factor: Factor::new(&pattern),
            // Filled by every solve (pipe data may change between solves).
            laws: Vec::with_capacity(n_links),
            hot: vec![HotLaw { r: f64::NAN, minor: 0.0, min_slope: 0.0 }; n_core],
            flow: vec![0.0; n_links],
            head: vec![f64::NAN; n_nodes],
            has_previous: false,
            cq: vec![0.0; n_core],
            cp: vec![0.0; n_core],
            cc: vec![0.0; n_core],
            mode: vec![MODE_CLOSED; n_core],
            rhs: vec![0.0; pattern.n],
            delta: vec![0.0; pattern.n],
            unknown_head: vec![0.0; pattern.n],
            unknown_demand: vec![0.0; pattern.n],
            free: vec![false; pattern.n],
            open: vec![false; n_links],
            on_law: vec![false; n_links],
            status: vec![LinkStatus::Open; n_links],
            connected: vec![false; n_nodes],
            known_head: vec![f64::NAN; n_nodes],
            demand: vec![0.0; n_nodes],
            subtree: vec![0.0; n_nodes],
            pinned: Vec::new(),
            tree_flow_sum: 0.0,
            anchored: vec![false; n_nodes],
            demand_scale: 0.0,
            stack: Vec::new(),
            timings: Timings { analysis: analysis_time, ..Timings::default() },
            analysis_time,
            pattern,
        }
    }

    /// The analysed pattern (for statistics).
    pub fn pattern(&self) -> &Pattern {
        &self.pattern
    }

    /// Where the time of the last solve went.
    pub fn timings(&self) -> &Timings {
        &self.timings
    }

    /// Solves `model` with the options in its `[hydraulics]`.
    pub fn solve(&mut self, model: &Model) -> Result<Solution, SolveError> {
        self.solve_with(model, &SolveOptions::from_model(model))
    }

    /// Solves `model` with explicit options.
    pub fn solve_with(&mut self, model: &Model, options: &SolveOptions) -> Result<Solution, SolveError> {
        self.solve_scenario(model, options, &Scenario::default())
    }

    /// Solves one scenario of `model`: its demands scaled, some statuses changed, the model
    /// itself untouched.
    pub fn solve_scenario(
        &mut self,
        model: &Model,
        options: &SolveOptions,
        scenario: &Scenario,
    ) -> Result<Solution, SolveError> {
        model.validate()?;
        check_scenario(model, scenario)?;
        if !self.pattern.fits(model) {
            *self = Solver::new(model)?;
        }
        let start = Instant::now();
        self.timings = Timings { analysis: self.analysis_time, ..Timings::default() };
        self.analysis_time = Duration::ZERO;
        // Pipe data may have changed since the last solve; laws are cheap to recompute.
        let water = model.options.water_properties();
        if self.laws.len() != model.links().len() {
            // In the room reserved when the solver was made: no second array at any time.
            self.laws.clear();
            self.laws.resize(model.links().len(), LinkLaw::STOPPED);
        }
        let law_of = |(law, link): (&mut LinkLaw, &Link)| *law = LinkLaw::with_water(model, link, &water);
        if model.links().len() >= PARALLEL_LAWS {
            use rayon::prelude::*;
            self.laws.par_iter_mut().zip(model.links().par_iter()).for_each(law_of);
        } else {
            self.laws.iter_mut().zip(model.links()).for_each(law_of);
        }
        for (hot, c) in self.hot.iter_mut().zip(&self.pattern.core) {
            let law = &self.laws[c.link as usize];
            *hot = match law.hazen_williams_parts() {
                Some((r, minor)) if !r.is_nan() => HotLaw { r, minor, min_slope: law.min_slope },
                _ => HotLaw { r: f64::NAN, minor: 0.0, min_slope: law.min_slope },
            };
        }
        // The last solution took these two arrays (they are rebuilt for every solve).
        self.demand.resize(model.nodes().len(), 0.0);
        self.connected.resize(model.nodes().len(), false);
        for (i, n) in model.nodes().iter().enumerate() {
            self.demand[i] = n.demand() * scenario.demand_multiplier;
        }
        for (s, l) in self.status.iter_mut().zip(model.links()) {
            *s = l.status;
        }
        for &(k, s) in &scenario.statuses {
            self.status[k] = s;
        }
        let warm = options.warm_start && self.has_previous;
        if !warm {
            for ((q, law), link) in self.flow.iter_mut().zip(&self.laws).zip(model.links()) {
                *q = law.initial_flow(link);
            }
        }
        // Heads: fixed ones as given; junctions from the previous solution on a warm start, else
        // the mean fixed head. (The Newton step does not depend on the heads it starts from; a
        // good start only keeps the first correction small.)
        let (sum, count) =
            model.nodes().iter().filter_map(|n| n.fixed_head()).fold((0.0, 0usize), |(s, c), h| (s + h, c + 1));
        let start_head = sum / count.max(1) as f64;
        for (h, n) in self.head.iter_mut().zip(model.nodes()) {
            *h = match n.fixed_head() {
                Some(fixed) => fixed,
                None if warm && h.is_finite() => *h,
                None => start_head,
            };
        }
        self.demand_scale = self.demand.iter().map(|d| d.abs()).sum::<f64>().max(1e-3);
        self.timings.preparation += start.elapsed();
        let result = self.iterate(model, options, warm);
        self.has_previous = result.is_ok();
        result
    }

    /// Solves many scenarios of one network in parallel (rayon's thread pool), every thread with
    /// its own clone of this solver sharing one analysis. Results come in the scenarios' order.
    ///
    /// Each scenario is solved as by [`Solver::solve_scenario`] with `options`; with
    /// `warm_start`, a thread starts each scenario from the one it solved before, so results
    /// can then differ in the last digits from run to run.
    pub fn solve_batch(
        &self,
        model: &Model,
        options: &SolveOptions,
        scenarios: &[Scenario],
    ) -> Vec<Result<Solution, SolveError>> {
        use rayon::prelude::*;
        let fresh;
        let base = if self.pattern.fits(model) {
            self
        } else {
            match Solver::new(model) {
                Ok(s) => {
                    fresh = s;
                    &fresh
                }
                Err(e) => return scenarios.iter().map(|_| Err(e.clone())).collect(),
            }
        };
        scenarios
            .par_iter()
            .map_init(
                || {
                    let mut s = base.clone();
                    s.has_previous = false;
                    s
                },
                |solver, scenario| solver.solve_scenario(model, options, scenario),
            )
            .collect()
    }

    fn iterate(&mut self, model: &Model, options: &SolveOptions, warm: bool) -> Result<Solution, SolveError> {
        let nodes = model.nodes();
        let links = model.links();
        let clock = Instant::now();
        let mut tracker = StatusTracker::new(model, &self.status);
        self.timings.status += clock.elapsed();
        let mut iterations = 0u32;
        let mut status_changes = 0u32;
        let mut head_change = f64::INFINITY;
        let mut flow_change = f64::INFINITY;
        let mut states_stale = true;
        let mut since_change = 0u32;

        loop {
            if states_stale {
                let clock = Instant::now();
                self.apply_states(model, &mut tracker);
                self.timings.status += clock.elapsed();
                let clock = Instant::now();
                self.tree_flows(model);
                self.timings.forest += clock.elapsed();
                let clock = Instant::now();
                // The secant start only on a cold start's first step.
                self.linearise(iterations < SECANT_STEPS && !warm);
                self.begin_assembly();
                for i in 0..self.pattern.core.len() {
                    self.scatter(i);
                }
                self.end_assembly();
                self.timings.assembly += clock.elapsed();
                states_stale = false;
            }
            if iterations >= options.max_iterations {
                self.sync_flows();
                self.tree_heads();
                return Err(self.not_converged(model, iterations, head_change, flow_change));
            }
            iterations += 1;
            since_change += 1;
            if since_change > STALLED_ITERATIONS {
                // An active pressure valve whose pinned head cannot be held (no sink for the flow
                // it would pass, or a head it cannot reach) makes its flow drift without a fixed
                // point. Such a valve cannot regulate: it closes, and the status logic decides
                // again from the next converged solution.
                if let Some(k) = self.drifting_pressure_valve() {
                    self.sync_flows();
                    tracker.state[k] = LinkState::ValveClosed;
                    status_changes += 1;
                    states_stale = true;
                    since_change = 0;
                    head_change = f64::INFINITY;
                    continue;
                }
            }
            let assembled = Instant::now();
            let factored = self.factor.factor(&self.pattern);
            let clock = Instant::now();
            self.timings.factorization += clock - assembled;
            factored.map_err(|e| SolveError::Numerical {
                iteration: iterations,
                detail: match self.pattern.node_of_unknown.get(e.unknown) {
                    Some(&node) => format!("pivot of node '{}' is not positive", nodes[node as usize].id),
                    None => "a pivot is not positive".to_owned(),
                },
            })?;
            self.factor.solve(&self.pattern, &mut self.rhs);
            let solved = Instant::now();
            self.timings.solves += solved - clock;
            std::mem::swap(&mut self.rhs, &mut self.delta);
            head_change = 0.0;
            let mut finite = true;
            for (u, &delta) in self.delta.iter().enumerate() {
                if self.free[u] {
                    finite &= delta.is_finite();
                    head_change = head_change.max(delta.abs());
                    self.unknown_head[u] += delta;
                }
            }
            if iterations == 1 {
                // No previous iterate to compare with.
                head_change = f64::INFINITY;
            }
            // The next step's matrix is filled as the new flows are computed.
            self.begin_assembly();
            let (change, energy_residual) = self.update_links(model, !warm && iterations < SECANT_STEPS);
            self.end_assembly();
            flow_change = change;
            self.timings.assembly += solved.elapsed();
            if !finite || !flow_change.is_finite() {
                // Name the element whose value overflowed: the first head, then the first flow.
                let node = (0..self.delta.len())
                    .find(|&u| self.free[u] && !self.unknown_head[u].is_finite())
                    .map(|u| (self.pattern.node_of_unknown[u] as usize, self.unknown_head[u]));
                if let Some((i, value)) = node {
                    return Err(SolveError::NonFinite {
                        element: Element::Node(nodes[i].id.to_string()),
                        quantity: "head",
                        value,
                    });
                }
                let link = self.pattern.core.iter().zip(&self.cq).find(|(_, q)| !q.is_finite());
                if let Some((c, &value)) = link {
                    return Err(SolveError::NonFinite {
                        element: Element::Link(links[c.link as usize].id.to_string()),
                        quantity: "flow",
                        value,
                    });
                }
                return Err(SolveError::Numerical {
                    iteration: iterations,
                    detail: "heads or flows became NaN".into(),
                });
            }
            let heads_settled = head_change <= options.head_tolerance
                // Heads that still move by more than a tight tolerance while every energy
                // equation already holds to it (possible when the tolerance is near the
                // floating-point floor of a large network): the energy residual decides.
                || (flow_change <= options.flow_tolerance && iterations > 1 && energy_residual <= options.head_tolerance);
            if heads_settled && flow_change <= options.flow_tolerance {
                if !tracker.has_devices() {
                    break;
                }
                let clock = Instant::now();
                self.sync_flows();
                let laws = &self.laws;
                let open_loss = |k: usize, q: f64| laws[k].evaluate_exact(q).0;
                let shutoff = |k: usize| laws[k].shutoff_head().unwrap_or(f64::INFINITY);
                let seen = status::Observed {
                    flow: &self.flow,
                    head: &self.head,
                    connected: &self.connected,
                    open_loss: &open_loss,
                    shutoff: &shutoff,
                    tolerance: options.head_tolerance,
                };
                let update = tracker.update(model, &seen);
                self.timings.status += clock.elapsed();
                match update {
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
                            links: cycling.into_iter().map(|k| links[k].id.to_string()).collect(),
                        })
                    }
                }
            }
        }
        self.sync_flows();
        let clock = Instant::now();
        self.tree_heads();
        self.timings.forest += clock.elapsed();
        let clock = Instant::now();
        let ending = tracker.ending(status_changes);
        let solution = self.finish(model, iterations, status_changes, head_change, flow_change, &tracker, ending);
        self.timings.results += clock.elapsed();
        self.timings.iterations = iterations;
        finite::check(model, &solution)?;
        Ok(solution)
    }

    /// Recomputes, for the current device states, which links carry flow, which nodes a fixed
    /// head reaches, which heads are pinned by active pressure valves, and how every core link
    /// enters the iteration.
    fn apply_states(&mut self, model: &Model, tracker: &mut StatusTracker) {
        let links = model.links();
        let nodes = model.nodes();
        loop {
            for (k, s) in tracker.state.iter().enumerate() {
                self.open[k] = s.carries_flow();
            }
            let pattern = &*self.pattern;
            topology::mark_connected(
                model,
                &pattern.adjacency,
                &pattern.ends,
                &self.open,
                &mut self.connected,
                &mut self.stack,
            );
            for (known, n) in self.known_head.iter_mut().zip(nodes) {
                *known = n.fixed_head().unwrap_or(f64::NAN);
            }
            for (k, &(from, to)) in self.pattern.ends.iter().enumerate() {
                self.open[k] &= self.connected[from as usize] && self.connected[to as usize];
                self.on_law[k] = self.open[k] && tracker.state[k].uses_law();
                if !self.open[k] {
                    self.flow[k] = 0.0;
                    continue;
                }
                if tracker.state[k] == LinkState::Active {
                    let l = &links[k];
                    if let LinkKind::Valve(v) = &l.kind {
                        match v.valve {
                            ValveType::PressureReducing => {
                                self.known_head[l.to] = nodes[l.to].elevation + v.setting;
                            }
                            ValveType::PressureSustaining => {
                                self.known_head[l.from] = nodes[l.from].elevation + v.setting;
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
            // (Nothing to look for when no valve is regulating.)
            if !tracker.state.contains(&LinkState::Active) {
                break;
            }
            topology::mark_reached(
                &self.pattern.adjacency,
                &self.pattern.ends,
                &self.on_law,
                self.known_head.iter().map(|h| !h.is_nan()),
                &mut self.anchored,
                &mut self.stack,
            );
            let mut forced = false;
            for i in 0..nodes.len() {
                if !self.connected[i] || self.anchored[i] {
                    continue;
                }
                let adjacent = self.pattern.adjacency.of(i);
                // The valve held open: of flow-control valves in series the one with the larger
                // setting (the smaller one limits the flow, the other cannot reach its setting);
                // otherwise the first active one.
                let flow_setting = |k: u32| {
                    links[k as usize].as_valve().filter(|v| v.valve == ValveType::FlowControl).map(|v| v.setting)
                };
                let active = adjacent.iter().copied().filter(|&k| tracker.state[k as usize] == LinkState::Active);
                let widest = active.clone().filter_map(|k| flow_setting(k).map(|s| (k, s))).fold(
                    None,
                    |best: Option<(u32, f64)>, (k, s)| match best {
                        Some((_, b)) if b >= s => best,
                        _ => Some((k, s)),
                    },
                );
                if let Some(k) = widest.map(|(k, _)| k).or_else(|| active.clone().next()) {
                    tracker.hold_open(model, k as usize);
                    forced = true;
                    break;
                }
            }
            if !forced {
                break;
            }
        }
        // Heads: pinned ones at their setting, cut-off ones undefined, newly reached ones from
        // any finite value (the mean of the others would do as well as this one).
        let fallback = self.head.iter().copied().find(|h| h.is_finite()).unwrap_or(0.0);
        for i in 0..nodes.len() {
            if !self.connected[i] {
                self.head[i] = f64::NAN;
            } else if !self.known_head[i].is_nan() {
                self.head[i] = self.known_head[i];
            } else if !self.head[i].is_finite() {
                self.head[i] = fallback;
            }
        }
        for (u, &node) in self.pattern.node_of_unknown.iter().enumerate() {
            let node = node as usize;
            self.free[u] = self.connected[node] && self.known_head[node].is_nan();
            self.unknown_head[u] = self.head[node];
        }
        self.pinned.clear();
        for (i, c) in self.pattern.core.iter().enumerate() {
            let k = c.link as usize;
            self.cq[i] = self.flow[k];
            let mut mode = if !self.open[k] {
                MODE_CLOSED
            } else if self.on_law[k] {
                MODE_LAW
            } else {
                MODE_FIXED_FLOW
            };
            if mode == MODE_FIXED_FLOW {
                let l = &links[k];
                let pinned = match l.as_valve().map(|v| v.valve) {
                    Some(ValveType::PressureReducing) => Some((l.to, 1.0)),
                    Some(ValveType::PressureSustaining) => Some((l.from, -1.0)),
                    _ => None,
                };
                if let Some((node, sign)) = pinned {
                    self.pinned.push(Pinned { core: i as u32, link: c.link, node: node as u32, sign, change: 0.0 });
                    mode = MODE_PINNED;
                }
            }
            if mode != MODE_CLOSED {
                let s = c.slots;
                if s.from != NONE && self.free[s.from as usize] {
                    mode |= FREE_FROM;
                }
                if s.to != NONE && self.free[s.to as usize] {
                    mode |= FREE_TO;
                }
            }
            self.mode[i] = mode;
        }
    }

    /// Flows of the tree pipes (the demand beyond each, leaves first) and the demand each core
    /// unknown then carries.
    fn tree_flows(&mut self, model: &Model) {
        let _ = model;
        self.subtree.iter_mut().for_each(|s| *s = 0.0);
        let mut sum = 0.0;
        for t in &self.pattern.trees {
            let (k, child, parent) = (t.link as usize, t.child as usize, t.parent as usize);
            if !self.open[k] {
                self.flow[k] = 0.0;
                continue;
            }
            let beyond = self.demand[child] + self.subtree[child];
            self.subtree[parent] += beyond;
            self.flow[k] = if t.downstream { beyond } else { -beyond };
            sum += beyond.abs();
        }
        self.tree_flow_sum = sum;
        for (u, &node) in self.pattern.node_of_unknown.iter().enumerate() {
            let node = node as usize;
            self.unknown_demand[u] = self.demand[node] + self.subtree[node];
        }
    }

    /// Heads of the tree junctions from their roots' heads, root to leaves, on the exact laws.
    fn tree_heads(&mut self) {
        for t in self.pattern.trees.iter().rev() {
            let (k, child, parent) = (t.link as usize, t.child as usize, t.parent as usize);
            self.head[child] = if self.connected[child] {
                let loss = self.laws[k].evaluate_exact(self.flow[k]).0;
                if t.downstream {
                    self.head[parent] - loss
                } else {
                    self.head[parent] + loss
                }
            } else {
                f64::NAN
            };
        }
    }

    /// Copies the core flows into the per-link flows, and the unknowns' heads into the nodes'.
    fn sync_flows(&mut self) {
        for (c, &q) in self.pattern.core.iter().zip(&self.cq) {
            self.flow[c.link as usize] = q;
        }
        for (&node, &h) in self.pattern.node_of_unknown.iter().zip(&self.unknown_head) {
            self.head[node as usize] = h;
        }
    }

    /// Head of a core link's end: its unknown's, or the node's fixed head.
    #[inline]
    fn end_head(&self, unknown: u32, node: u32) -> f64 {
        if unknown == NONE {
            self.head[node as usize]
        } else {
            self.unknown_head[unknown as usize]
        }
    }

    /// The active pressure valve whose flow changed most in the last step, if any.
    fn drifting_pressure_valve(&self) -> Option<usize> {
        self.pinned.iter().max_by(|a, b| a.change.total_cmp(&b.change)).map(|v| v.link as usize)
    }

    /// Linearises every core link at its current flow and the current heads.
    ///
    /// With `secant`, pipes take the secant `h(Q)/Q` through the origin instead of the tangent:
    /// the first step of the linear theory method (Wood & Charles 1972, "Hydraulic network
    /// analysis using linear theory", J. Hydraul. Div. 98(HY7)). A Newton step on
    /// `h = r|Q|^n` from a flow far above the answer shrinks it by at most the factor `1 − 1/n`
    /// ≈ 0.46, so a cold start from a common velocity several times too high costs a handful of
    /// iterations; the secant step's flows do not depend on the starting flows' scale (scaling
    /// every resistance alike leaves the flows of a linear network unchanged), and Newton's
    /// method takes over from there.
    fn linearise(&mut self, secant: bool) {
        for i in 0..self.pattern.core.len() {
            if self.mode[i] & MODE_MASK == MODE_LAW {
                let c = &self.pattern.core[i];
                let dh = self.end_head(c.slots.from, c.from) - self.end_head(c.slots.to, c.to);
                let q = self.cq[i];
                let (p, cc, _) = if secant { self.secant(i, q, dh) } else { self.coefficients(i, q, dh) };
                self.cp[i] = p;
                self.cc[i] = cc;
            } else {
                self.cp[i] = 0.0;
                self.cc[i] = self.cq[i];
            }
        }
    }

    /// Like [`Solver::coefficients`], with the secant slope `h(Q)/Q` for Hazen–Williams pipes.
    fn secant(&self, i: usize, q: f64, dh: f64) -> (f64, f64, f64) {
        let hot = self.hot[i];
        if hot.general() || q == 0.0 {
            return self.coefficients(i, q, dh);
        }
        let (y, _) = links::hazen_williams(hot.r, hot.minor, q);
        let p = 1.0 / (y / q).max(hot.min_slope);
        (p, q + p * (dh - y), (y - dh).abs())
    }

    /// Conductance p, constant c and energy residual of core link `i` at flow `q` and head
    /// difference `dh`.
    #[inline]
    fn coefficients(&self, i: usize, q: f64, dh: f64) -> (f64, f64, f64) {
        let hot = self.hot[i];
        let (y, g) = if hot.general() {
            let (y, g) = self.laws[self.pattern.core[i].link as usize].evaluate_exact(q);
            (y, g.max(hot.min_slope))
        } else {
            let (y, g) = links::hazen_williams(hot.r, hot.minor, q);
            (y, g.max(hot.min_slope))
        };
        let p = 1.0 / g;
        (p, q + p * (dh - y), (y - dh).abs())
    }

    /// New flows of the core links from the head corrections in `rhs`, linearised at once for
    /// the next step (one pass: each law evaluated once per iteration). Returns the relative
    /// flow change Σ|ΔQ| / Σ|Q| and the largest energy residual of the core links on their law
    /// (tree pipes meet theirs exactly by construction).
    ///
    /// Links on their law follow `Q = c + p (δ_from − δ_to)`. An active flow-control valve holds
    /// its setting. An active pressure valve's flow is whatever the mass balance of the node it
    /// pins requires; that flow enters the other node's balance at the next step, so at
    /// convergence both balances hold.
    fn update_links(&mut self, model: &Model, secant: bool) -> (f64, f64) {
        let (mut sum_dq, mut sum_q, mut residual) = (0.0, self.tree_flow_sum, 0.0f64);
        // One pass with the fields borrowed apart, so that the loop runs over plain slices.
        let pattern = &*self.pattern;
        let (laws, delta, unknown_head, head) = (&self.laws, &self.delta, &self.unknown_head, &self.head);
        let (values, rhs) = (&mut self.factor.values, &mut self.rhs);
        let states = self.hot.iter().zip(&self.mode).zip(self.cq.iter_mut().zip(&mut self.cp).zip(&mut self.cc));
        for (c, ((hot, &mode), ((cq, cp), cc))) in pattern.core.iter().zip(states) {
            match mode & MODE_MASK {
                MODE_LAW => {
                    let s = c.slots;
                    let (d_from, h_from) = if s.from == NONE {
                        (0.0, head[c.from as usize])
                    } else {
                        (delta[s.from as usize], unknown_head[s.from as usize])
                    };
                    let (d_to, h_to) = if s.to == NONE {
                        (0.0, head[c.to as usize])
                    } else {
                        (delta[s.to as usize], unknown_head[s.to as usize])
                    };
                    let q = *cc + *cp * (d_from - d_to);
                    let dh = h_from - h_to;
                    let (y, g) = if hot.general() {
                        laws[c.link as usize].evaluate_exact(q)
                    } else {
                        links::hazen_williams(hot.r, hot.minor, q)
                    };
                    let g = if secant && !hot.general() && q != 0.0 { y / q } else { g };
                    let p = 1.0 / g.max(hot.min_slope);
                    residual = residual.max((y - dh).abs());
                    sum_dq += (q - *cq).abs();
                    sum_q += q.abs();
                    *cq = q;
                    *cp = p;
                    *cc = q + p * (dh - y);
                }
                MODE_FIXED_FLOW => sum_q += cq.abs(),
                _ => continue,
            }
            let (p, c_value) = (*cp, *cc);
            if mode & FREE_FROM != 0 {
                values[c.diag_from as usize] += p;
                rhs[c.slots.from as usize] -= c_value;
            }
            if mode & FREE_TO != 0 {
                values[c.diag_to as usize] += p;
                rhs[c.slots.to as usize] += c_value;
            }
            if mode & (FREE_FROM | FREE_TO) == FREE_FROM | FREE_TO {
                values[c.slots.off as usize] -= p;
            }
        }
        if !self.pinned.is_empty() {
            let links = model.links();
            for v in 0..self.pinned.len() {
                let Pinned { core, link, node, sign, .. } = self.pinned[v];
                let (core, node) = (core as usize, node as usize);
                // Net inflow the pinned node needs from this valve: its demand plus its outflow
                // through every other link, minus its inflow through them.
                let mut need = self.demand[node];
                for &j in self.pattern.adjacency.of(node) {
                    if j == link {
                        continue;
                    }
                    let position = self.pattern.core_position[j as usize];
                    let q = if position == NONE { self.flow[j as usize] } else { self.cq[position as usize] };
                    if links[j as usize].from == node {
                        need += q;
                    } else {
                        need -= q;
                    }
                }
                // A pressure-sustaining valve pins its upstream node: its flow is what leaves it.
                let q = sign * need;
                sum_dq += (q - self.cq[core]).abs();
                sum_q += q.abs();
                self.pinned[v].change = (q - self.cq[core]).abs();
                self.cq[core] = q;
                self.cc[core] = q;
                self.scatter(core);
            }
        }
        // Relative to the water moving; a network with (almost) no flow is measured against the
        // total demand, or an absolute floor of 1 L/s, so that round-off in flows of nothing
        // does not count as change.
        (sum_dq / sum_q.max(self.demand_scale), residual)
    }

    /// Starts filling the matrix and right-hand side of the head corrections δ,
    /// `Σ p δ_i − Σ p δ_j = −d_i + Σ_in c − Σ_out c`: zero values, demands on the right.
    fn begin_assembly(&mut self) {
        self.factor.values.iter_mut().for_each(|v| *v = 0.0);
        for (r, &d) in self.rhs.iter_mut().zip(&self.unknown_demand) {
            *r = -d;
        }
    }

    /// Adds core link `i`, with its current `p` and `c`, to the matrix and right-hand side.
    #[inline]
    fn scatter(&mut self, i: usize) {
        let mode = self.mode[i];
        if mode & MODE_MASK == MODE_CLOSED {
            return;
        }
        let (p, cc) = (self.cp[i], self.cc[i]);
        let c = &self.pattern.core[i];
        let values = &mut self.factor.values;
        if mode & FREE_FROM != 0 {
            values[c.diag_from as usize] += p;
            self.rhs[c.slots.from as usize] -= cc;
        }
        if mode & FREE_TO != 0 {
            values[c.diag_to as usize] += p;
            self.rhs[c.slots.to as usize] += cc;
        }
        if mode & (FREE_FROM | FREE_TO) == FREE_FROM | FREE_TO {
            values[c.slots.off as usize] -= p;
        }
    }

    /// Ends the assembly: unit rows for pinned and cut-off unknowns (their δ is zero).
    fn end_assembly(&mut self) {
        let pattern = &*self.pattern;
        for u in 0..pattern.n {
            if !self.free[u] {
                self.factor.values[pattern.diag_slot[u] as usize] = 1.0;
                self.rhs[u] = 0.0;
            }
        }
    }

    fn not_converged(&self, model: &Model, iterations: u32, head_change: f64, flow_change: f64) -> SolveError {
        let energy: Vec<f64> =
            energy_residuals(&self.pattern.ends, &self.laws, &self.flow, &self.head, &self.on_law).collect();
        // The last head corrections are still in `delta`.
        let mut worst_nodes: Vec<Offender> = (0..self.pattern.n)
            .filter(|&u| self.free[u])
            .map(|u| {
                let node = self.pattern.node_of_unknown[u] as usize;
                Offender { id: model.nodes()[node].id.to_string(), value: self.delta[u].abs() }
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
            .map(|(k, l)| Offender { id: l.id.to_string(), value: energy[k] })
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
        &mut self,
        model: &Model,
        iterations: u32,
        status_changes: u32,
        last_head_change: f64,
        last_flow_change: f64,
        tracker: &StatusTracker,
        ending: Ending,
    ) -> Solution {
        let nodes = model.nodes();
        let links = model.links();
        // The mass balance's work array is dropped before the solution's arrays are made (at a
        // million junctions it is some 8 MB at the moment of the process's peak memory).
        let max_energy_residual =
            energy_residuals(&self.pattern.ends, &self.laws, &self.flow, &self.head, &self.on_law).fold(0.0, f64::max);
        let max_mass_residual = {
            let mut balance: Vec<f64> = self.demand.iter().map(|d| -d).collect();
            for (&(from, to), &q) in self.pattern.ends.iter().zip(&self.flow) {
                balance[to as usize] += q;
                balance[from as usize] -= q;
            }
            nodes
                .iter()
                .enumerate()
                .filter(|(i, n)| n.fixed_head().is_none() && self.connected[*i])
                .map(|(i, _)| balance[i].abs())
                .fold(0.0, f64::max)
        };
        let head = self.head.clone();
        let pressure: Vec<f64> = nodes.iter().zip(&head).map(|(n, h)| h - n.elevation).collect();
        let velocity: Vec<f64> = self
            .flow
            .iter()
            .zip(links)
            .map(|(q, link)| match links::flow_area(link) {
                a if a > 0.0 => q / a,
                _ => f64::NAN,
            })
            .collect();
        let headloss: Vec<f64> =
            self.pattern.ends.iter().map(|&(from, to)| (head[from as usize] - head[to as usize]).abs()).collect();
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
            let message = if self.demand[i] != 0.0 {
                "cut off from every reservoir and tank by closed links; its demand is not supplied".to_owned()
            } else {
                "cut off from every reservoir and tank by closed links; it has no head".to_owned()
            };
            warnings.push(Warning { element: Some(Element::Node(nodes[i].id.to_string())), message });
        }
        for (i, n) in nodes.iter().enumerate() {
            if n.fixed_head().is_none() && self.connected[i] && pressure[i] < 0.0 {
                warnings.push(Warning {
                    element: Some(Element::Node(n.id.to_string())),
                    message: "negative pressure: the demand cannot really be delivered at this head (consider a \
                              pressure-driven analysis)"
                        .to_owned(),
                });
            }
        }
        for r in &pumps {
            if r.beyond_curve {
                warnings.push(Warning {
                    element: Some(Element::Link(links[r.link].id.to_string())),
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
            // Taken, not copied: a solve rebuilds both from the model before using them.
            demand: std::mem::take(&mut self.demand),
            connected: std::mem::take(&mut self.connected),
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

/// |h(Q) − (H_from − H_to)| per link on its law (zero for closed and regulating links, whose
/// energy equation is replaced by their constraint).
fn energy_residuals<'a>(
    ends: &'a [(u32, u32)],
    laws: &'a [LinkLaw],
    flow: &'a [f64],
    head: &'a [f64],
    on_law: &'a [bool],
) -> impl Iterator<Item = f64> + 'a {
    ends.iter().enumerate().map(|(k, &(from, to))| {
        if on_law[k] {
            (laws[k].evaluate_exact(flow[k]).0 - (head[from as usize] - head[to as usize])).abs()
        } else {
            0.0
        }
    })
}

/// Checks a scenario against its model: a finite, non-negative demand factor and existing links.
fn check_scenario(model: &Model, scenario: &Scenario) -> Result<(), ModelError> {
    let m = scenario.demand_multiplier;
    if !(m.is_finite() && m >= 0.0) {
        return Err(ModelError::at(
            None,
            Some("demand_multiplier"),
            format!("must be a finite number, zero or more, found {m}"),
        ));
    }
    if let Some(&(k, _)) = scenario.statuses.iter().find(|(k, _)| *k >= model.links().len()) {
        return Err(ModelError::at(
            None,
            Some("statuses"),
            format!("link index {k} does not exist (the model has {} links)", model.links().len()),
        ));
    }
    Ok(())
}
