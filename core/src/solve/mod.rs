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
//! Dead-end trees (see [`structure`]) never enter the matrix: the flow of a tree pipe is the demand
//! beyond it, summed leaves to root once per set of device states; the tree junctions' demands
//! are added to their roots; after the core has converged one sweep from the roots gives the
//! tree heads on the exact laws.
//!
//! # Outflows that follow pressure
//! A junction's demand, outlet and leakage may be relations of its pressure ([`nodes`]). Each is
//! handled like a link from the junction to the atmosphere, in the inverse form (the pressure that
//! passes a flow), smoothed within the head tolerance: its conductance joins the junction's
//! diagonal and its constant the right-hand side, so the matrix stays symmetric positive
//! definite. Such junctions stay in the core. After a dozen full Newton steps in one set of
//! device states the steps are damped; an answer leaves only when every relation lies on its exact
//! curve (within the tolerances) and the mass balance holds to round-off.
//!
//! # One pass per iteration
//! Per step: factor and solve (`factor`), apply the corrections, then one pass over the core
//! links in matrix-column order that computes each new flow, evaluates its law once (value and
//! slope: the energy residual, and `p`, `c` for the next step) and scatters it into the next
//! matrix. Laws of Hazen–Williams pipes, the commonest by far, are evaluated inline from three
//! numbers per link; other laws through [`links::LinkLaw`]. Nothing is allocated in the loop.
//!
//! # Phases, in order, one file each
//! 1. **Structure** ([`structure`], with [`topology`]): forest-core split, ordering, symbolic
//!    analysis, scatter map. Once per network structure, in [`Solver::new`] (which also
//!    validates the model), shared between clones of a [`Solver`] behind an `Arc`.
//! 2. **Conditions** ([`conditions`]): the values of one solve (demands, fixed heads, statuses,
//!    pump speeds, valve settings, pipe data) as arrays, validated by their setters.
//! 3. **Preparation** (here, [`Solver::solve`]): the laws of the links whose inputs changed since
//!    this solver last saw the conditions ([`links`]), the junctions' outflows ([`nodes`]),
//!    statuses and starting values.
//! 4. **Iteration** (`iterate.rs`): device states applied (`apply_states`), then Newton steps,
//!    each one factor and solve ([`factor`]) and one assembly pass (`assemble.rs`); after each
//!    converged inner solve the device rules ([`status`]) decide whether to go on.
//! 5. **Forest** (`forest.rs`): tree flows before the core is assembled, tree heads after it
//!    has converged.
//! 6. **Solution** (`solution.rs`): residuals, pressures, velocities, pump results, warnings.
//!
//! Around them: `batch.rs` ([`Scenario`], many solves of one structure in parallel) and
//! `timings.rs` ([`Timings`], where the time went).
//!
//! Entry points: [`solve`] for one answer of a model as written; [`Solver::new`] then
//! [`Solver::solve`] with [`Conditions`] to solve a network many times reusing the analysis and
//! the laws; [`Solver::solve_batch`] / [`Solver::solve_batch_map`] for scenarios in parallel;
//! [`Solver::timings`] for where the time went. [`Solver::solve_model`] and
//! [`Solver::solve_with`] solve a model as written (they make its conditions afresh, so every law
//! is rebuilt: use them for one-off solves); [`Solver::solve_once`] does the same for a caller
//! that will not solve again, freeing the iteration's memory before the solution is made, and
//! [`Solver::analyse_and_solve_once`] analyses and solves a model in one call, making the
//! conditions and the links' laws on a second thread while this one analyses the structure.
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

mod assemble;
mod awake;
pub mod batch;
mod chord;
pub mod conditions;
pub mod factor;
pub mod finite;
mod forest;
pub mod hold;
mod iterate;
pub mod links;
pub mod nodes;
mod search;
mod solution;
pub mod status;
pub mod structure;
mod sweep;
mod timings;
pub mod topology;

pub use batch::Scenario;
pub use conditions::Conditions;
pub use hold::{HeldHead, LightBase};
pub use nodes::{NodeLaw, Relation};
pub use solution::{OutflowSummary, PumpResult, Solution, Warning, WarningKind};
pub(crate) use sweep::Outputs;
pub use timings::Timings;

use crate::error::{ModelError, SolveError};
use crate::model::{HeadLossLaw, Model, WaterSpec};
use crate::physics::WaterProperties;
use assemble::{HotLaw, LAW_GENERAL, MODE_CLOSED};
use conditions::LawsSeen;
use factor::Factor;
use links::LinkLaw;
use std::sync::Arc;
use std::time::{Duration, Instant};
use structure::Structure;

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

/// Solves one snapshot of `model` as written, with its own options.
pub fn solve(model: &Model) -> Result<Solution, SolveError> {
    Solver::analyse_and_solve_once(model).1
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

/// Makes `laws` the `n` links' laws, `law_of` of each link's index, in the room `laws` already
/// has when it is enough (a solver's reserved room: no second array at any time).
fn fill_laws(laws: &mut Vec<LinkLaw>, n: usize, law_of: impl Fn(usize) -> LinkLaw + Sync) {
    if laws.len() != n {
        laws.clear();
        laws.resize(n, LinkLaw::STOPPED);
    }
    let fill = |(k, law): (usize, &mut LinkLaw)| *law = law_of(k);
    if n >= PARALLEL_LAWS {
        use rayon::prelude::*;
        laws.par_iter_mut().enumerate().for_each(fill);
    } else {
        laws.iter_mut().enumerate().for_each(fill);
    }
}

/// The error of a network whose matrix 32-bit indices cannot number.
fn too_large() -> SolveError {
    SolveError::Model(ModelError::new("the network is too large for the solver's 32-bit matrix indices"))
}

/// A reusable solver: the analysis of one network structure, the laws of its links and its
/// workspaces.
///
/// Values that [`Conditions`] hold may change between solves at no cost but the laws they feed.
/// Everything else about the model (nodes and links, their kinds and end points, lengths, pump
/// curves, the head-loss formula, the water) is the structure this solver analysed: when the
/// structure changes (nodes or links added, a node's kind changed, a pipe turned into another
/// kind of link), the analysis is redone automatically; when the head-loss formula or the water
/// changes, every law is rebuilt. Cloning is cheap in analysis: the clones share one
/// [`Structure`] (behind an `Arc`) and only allocate their own workspaces, which is how
/// [`Solver::solve_batch`] gives every thread its solver.
#[derive(Debug, Clone)]
pub struct Solver {
    structure: Arc<Structure>,
    factor: Factor,
    /// Every link's law, as of `laws_seen`.
    laws: Vec<LinkLaw>,
    /// Which conditions the laws were built from, and how far into their change journal.
    laws_seen: Option<LawsSeen>,
    /// The head-loss formula and water the laws were built with.
    law_basis: Option<(HeadLossLaw, WaterSpec)>,
    /// Properties of the model's water.
    water: WaterProperties,
    /// Laws of the core links, in core order.
    hot: Vec<HotLaw>,
    /// Flow of every link (for core links, valid after `sync_flows`).
    flow: Vec<f64>,
    /// Head of every node: the current iterate, then the solution.
    head: Vec<f64>,
    has_previous: bool,
    // Core links, in core order: flow, conductance p = 1/g, and c = Q + p (ΔH − h(Q)), so that
    // the next flow is c + p (δ_from − δ_to) for head corrections δ; the mode byte of
    // `assemble.rs`.
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
    /// Outflow each unknown carries: its own and its trees'.
    unknown_demand: Vec<f64>,
    free: Vec<bool>,
    // Per link.
    open: Vec<bool>,
    on_law: Vec<bool>,
    // Per node.
    connected: Vec<bool>,
    known_head: Vec<f64>,
    /// Fixed outflow of every node in this solve (its demand when it does not follow pressure,
    /// and fixed draws; zero for fixed heads).
    demand: Vec<f64>,
    /// The junctions' relations of pressure, by node (see [`nodes`]).
    relations: Vec<nodes::NodeRelation>,
    /// Pressure tolerance of the relations' regularisation, m (the head tolerance).
    relation_tolerance: f64,
    subtree: Vec<f64>,
    pinned: Vec<Pinned>,
    /// Σ|Q| over the tree pipes (constant for a set of device states).
    tree_flow_sum: f64,
    /// Nodes a known head reaches through links on their law (scratch of `apply_states`).
    anchored: Vec<bool>,
    /// Σ|demand| floored at 1e-3 m³/s: the scale of relative flow changes.
    demand_scale: f64,
    /// Scratch of the union-find that marks the connected nodes (`topology::mark_reached`).
    reach_scratch: Vec<u32>,
    /// A head held by a draw the solve finds ([`Solver::solve_holding`]), with its scratch.
    hold: Option<Box<hold::Hold>>,
    /// The base case's factor for chord steps (batches near a base case; see `chord.rs`).
    chord: Option<Arc<chord::ChordBase>>,
    /// `A₀⁻¹ u` of the link a chord iteration closes.
    chord_w: Vec<f64>,
    /// Reciprocals of the diagonal of this solver's own factor, made after each factorization of
    /// a sweep's closure (see `sweep.rs`), for its chord steps' triangular solves.
    own_recip: Vec<f64>,
    /// The off-diagonal values of that factor row by row (see `chord::RowPattern`).
    own_row_values: Vec<f64>,
    timings: Timings,
    analysis_time: Duration,
    /// Set during [`Solver::solve_once`]: the solve frees the iteration's work arrays before the
    /// solution's arrays are made, and the solution takes the flows and heads.
    one_off: bool,
    /// A one-off solve freed the work arrays: the next solve makes them afresh.
    released: bool,
}

impl Solver {
    /// Validates `model` and analyses its structure.
    pub fn new(model: &Model) -> Result<Self, SolveError> {
        model.validate()?;
        let start = Instant::now();
        let structure = Structure::analyse(model).ok_or_else(too_large)?;
        let analysis_time = start.elapsed();
        // Filled by the first solve, in this room.
        let laws = Vec::with_capacity(model.links().len());
        Ok(Solver::with_structure(model, Arc::new(structure), analysis_time, laws))
    }

    /// Validates `model`, analyses it and solves it once, as [`Solver::new`] then
    /// [`Solver::solve_once`] do, with the same answer, bit for bit, and the same errors; but the
    /// solve's conditions and its links' laws, which need no analysis, are made on the second
    /// core while this one analyses (the ordering, a quarter of a first solve of a large
    /// network, is one thread's work). The solver comes back once the analysis is done (for its
    /// [`Solver::timings`]); its `preparation` time counts what was left after the analysis.
    ///
    /// The iteration of a large network runs as [`Solver::solve`]'s does (see the `awake`
    /// module); the analysis stays on the calling thread, beside its helper.
    pub fn analyse_and_solve_once(model: &Model) -> (Option<Solver>, Result<Solution, SolveError>) {
        if let Err(e) = model.validate() {
            return (None, Err(e.into()));
        }
        let water = model.options.water_properties();
        let prepare = || {
            let mut laws = Vec::new();
            fill_laws(&mut laws, model.links().len(), |k| LinkLaw::of_model_link(model, k, &water));
            (Conditions::from_model_without_law_inputs(model), laws)
        };
        // The analysis on this thread: its temporaries, freed here, are room for the iteration's
        // arrays (freed on a helper thread they stayed resident in its heap: +13 MB at the peak
        // of a million junctions). Without a helper thread, one after the other.
        let start = Instant::now();
        let (structure, analysis_time, (conditions, laws)) = std::thread::scope(|scope| {
            let helper = std::thread::Builder::new().spawn_scoped(scope, prepare).ok();
            let structure = Structure::analyse(model);
            let analysis_time = start.elapsed();
            let prepared = helper.and_then(|h| h.join().ok());
            (structure, analysis_time, prepared.unwrap_or_else(prepare))
        });
        // The preparation's time: from the end of the analysis (a wait for the helper included).
        let start = start + analysis_time;
        let Some(structure) = structure else { return (None, Err(too_large())) };
        let mut solver = Solver::with_structure(model, Arc::new(structure), analysis_time, Vec::new());
        // The structure is this model's own: nothing to check again.
        solver.timings = Timings { analysis: analysis_time, ..Timings::default() };
        solver.analysis_time = Duration::ZERO;
        solver.install_laws(model, laws);
        let result = solver.finish_once(model, &conditions, start);
        (Some(solver), result)
    }

    fn with_structure(model: &Model, structure: Arc<Structure>, analysis_time: Duration, laws: Vec<LinkLaw>) -> Self {
        let n_links = model.links().len();
        let n_nodes = model.nodes().len();
        let n_core = structure.core.len();
        Solver {
            factor: Factor::new(&structure),
            laws,
            laws_seen: None,
            law_basis: None,
            water: model.options.water_properties(),
            hot: vec![HotLaw { r: 0.0, minor: 0.0, min_slope: 0.0 }; n_core],
            flow: vec![0.0; n_links],
            head: vec![f64::NAN; n_nodes],
            has_previous: false,
            cq: vec![0.0; n_core],
            cp: vec![0.0; n_core],
            cc: vec![0.0; n_core],
            mode: vec![MODE_CLOSED; n_core],
            rhs: vec![0.0; structure.n],
            delta: vec![0.0; structure.n],
            unknown_head: vec![0.0; structure.n],
            unknown_demand: vec![0.0; structure.n],
            free: vec![false; structure.n],
            open: vec![false; n_links],
            on_law: vec![false; n_links],
            connected: vec![false; n_nodes],
            known_head: vec![f64::NAN; n_nodes],
            demand: vec![0.0; n_nodes],
            relations: Vec::new(),
            relation_tolerance: model.options.head_tolerance,
            subtree: vec![0.0; n_nodes],
            pinned: Vec::new(),
            tree_flow_sum: 0.0,
            anchored: vec![false; n_nodes],
            demand_scale: 0.0,
            reach_scratch: Vec::new(),
            hold: None,
            chord: None,
            chord_w: Vec::new(),
            own_recip: Vec::new(),
            own_row_values: Vec::new(),
            timings: Timings { analysis: analysis_time, ..Timings::default() },
            analysis_time,
            one_off: false,
            released: false,
            structure,
        }
    }

    /// The analysed structure (for statistics).
    pub fn structure(&self) -> &Structure {
        &self.structure
    }

    /// Where the time of the last solve went.
    pub fn timings(&self) -> &Timings {
        &self.timings
    }

    /// Solves `model` as written, with the options in its `[hydraulics]`. Makes the model's
    /// conditions afresh (every law is rebuilt): for repeated solves keep a [`Conditions`] and
    /// call [`Solver::solve`].
    pub fn solve_model(&mut self, model: &Model) -> Result<Solution, SolveError> {
        self.solve_with(model, &SolveOptions::from_model(model))
    }

    /// Solves `model` as written, with explicit options (see [`Solver::solve_model`]).
    pub fn solve_with(&mut self, model: &Model, options: &SolveOptions) -> Result<Solution, SolveError> {
        self.solve(model, &Conditions::from_model(model), options)
    }

    /// Solves `model` as written, with the options in its `[hydraulics]`, for a caller that will
    /// not solve with this solver again (the command-line `solve`, [`solve`]): the peak memory
    /// of a one-off solve of a large network is the iteration's, not the iteration's and the
    /// solution's together. The laws are built from the model itself, so its conditions are made
    /// without the pipes' roughness and minor-loss arrays; once the iteration has converged,
    /// the factor, the laws and every work array are freed before the solution's arrays are
    /// made, and the
    /// solution takes this solver's flows and heads instead of copying them (at a million
    /// junctions some 150 MB, a quarter of the process). The answer is the same, bit for bit,
    /// as [`Solver::solve_model`]'s. A later solve with this solver still works: it makes its
    /// work arrays and laws afresh and starts cold.
    pub fn solve_once(&mut self, model: &Model) -> Result<Solution, SolveError> {
        let conditions = Conditions::from_model_without_law_inputs(model);
        let start = self.prepare(model, &conditions, true)?;
        self.finish_once(model, &conditions, start)
    }

    /// The rest of a one-off solve once the laws are built from the model (see
    /// [`Solver::solve_once`]).
    fn finish_once(&mut self, model: &Model, conditions: &Conditions, start: Instant) -> Result<Solution, SolveError> {
        let options = SolveOptions::from_model(model);
        self.one_off = true;
        let result = awake::with_second_worker_awake(awake::shares_work(&self.structure), || {
            self.run(model, conditions, &options, start)
        });
        self.one_off = false;
        result
    }

    /// Solves `model` under `conditions`. Only the laws of links whose inputs changed since this
    /// solver last saw these conditions are rebuilt; nothing of the model is validated again
    /// ([`Solver::new`] and the setters of [`Conditions`] did it), but a model whose structure no
    /// longer fits the analysis is analysed (and validated) afresh.
    ///
    /// Where the solve shares work between two threads (a large network), it runs on a worker of
    /// rayon's pool with a second worker awake (see the `awake` module), unless the caller is
    /// one of the pool's workers already; the answer is the same to the last bit.
    pub fn solve(
        &mut self,
        model: &Model,
        conditions: &Conditions,
        options: &SolveOptions,
    ) -> Result<Solution, SolveError> {
        let start = self.prepare(model, conditions, false)?;
        awake::with_second_worker_awake(awake::shares_work(&self.structure), || {
            self.run(model, conditions, options, start)
        })
    }

    /// The first part of a solve: checks that `conditions` and the analysis fit `model`, makes
    /// the work arrays a one-off solve freed, and brings the laws up to date: from the model
    /// itself when `laws_from_model` (`conditions` are then the model's own, without the law
    /// inputs), else from `conditions`. Returns when the preparation started.
    fn prepare(
        &mut self,
        model: &Model,
        conditions: &Conditions,
        laws_from_model: bool,
    ) -> Result<Instant, SolveError> {
        if !conditions.fits(model) {
            return Err(SolveError::Model(conditions.mismatch(model)));
        }
        if !self.structure.fits(model) {
            *self = Solver::new(model)?;
        }
        if self.released {
            // As a new solver of this structure (the analysis is kept, and its time not counted
            // again).
            let laws = Vec::with_capacity(model.links().len());
            *self = Solver::with_structure(model, Arc::clone(&self.structure), Duration::ZERO, laws);
        }
        let start = Instant::now();
        self.timings = Timings { analysis: self.analysis_time, ..Timings::default() };
        self.analysis_time = Duration::ZERO;
        if laws_from_model {
            let water = model.options.water_properties();
            self.rebuild_laws(model, |k| LinkLaw::of_model_link(model, k, &water));
            // Built from no conditions: any later solve rebuilds them.
            self.laws_seen = None;
        } else {
            self.refresh_laws(model, conditions);
        }
        Ok(start)
    }

    /// The rest of a solve, after [`Solver::prepare`]: outflows, starting values, the iteration.
    fn run(
        &mut self,
        model: &Model,
        conditions: &Conditions,
        options: &SolveOptions,
        start: Instant,
    ) -> Result<Solution, SolveError> {
        // The last solution took these two arrays.
        self.demand.resize(model.nodes().len(), 0.0);
        self.connected.resize(model.nodes().len(), false);
        // The junctions' fixed outflows and their relations of pressure (see `nodes`).
        nodes::build(model, conditions, options.head_tolerance, &mut self.demand, &mut self.relations);
        self.relation_tolerance = options.head_tolerance;
        let warm = options.warm_start && self.has_previous;
        self.start_values(model, conditions, warm);
        self.timings.preparation += start.elapsed();
        let mut result = self.iterate(model, conditions, options, warm);
        if warm
            && !self.released
            && matches!(result, Err(SolveError::NotConverged { .. } | SolveError::StatusCycle { .. }))
        {
            // A start far from the answer (a previous solution of very different conditions: a
            // dry network before a full one) may not converge where a cold start does, whose
            // first step does not depend on the starting flows' scale: start again, cold.
            // (A solution refused by the last gates took the connectivity array.)
            self.connected.resize(model.nodes().len(), false);
            self.start_values(model, conditions, false);
            result = self.iterate(model, conditions, options, false);
        }
        self.has_previous = result.is_ok() && !self.released;
        result
    }

    /// Frees the factor, the laws and the work arrays of the iteration (a one-off solve, once
    /// the solution no longer needs them; see [`Solver::solve_once`]).
    fn release_workspaces(&mut self) {
        self.factor.release();
        for v in [
            &mut self.cq,
            &mut self.cp,
            &mut self.cc,
            &mut self.rhs,
            &mut self.delta,
            &mut self.unknown_head,
            &mut self.unknown_demand,
            &mut self.known_head,
            &mut self.subtree,
            &mut self.chord_w,
        ] {
            *v = Vec::new();
        }
        for v in [&mut self.free, &mut self.open, &mut self.on_law, &mut self.anchored] {
            *v = Vec::new();
        }
        self.laws = Vec::new();
        self.laws_seen = None;
        self.hot = Vec::new();
        self.mode = Vec::new();
        self.reach_scratch = Vec::new();
        self.released = true;
    }

    /// Starting flows, heads and relation flows: from the previous solution on a warm start,
    /// else from the laws' initial flows and the mean fixed head.
    fn start_values(&mut self, model: &Model, conditions: &Conditions, warm: bool) {
        if !warm {
            for (k, (q, law)) in self.flow.iter_mut().zip(&self.laws).enumerate() {
                *q = law.initial_flow(conditions.flow_area(k));
            }
        }
        // Heads: fixed ones as given; junctions from the previous solution on a warm start, else
        // the mean fixed head. (The Newton step does not depend on the heads it starts from; a
        // good start only keeps the first correction small.)
        let (sum, count) = (0..model.nodes().len())
            .filter_map(|i| conditions.fixed_head(i))
            .fold((0.0, 0usize), |(s, c), h| (s + h, c + 1));
        let start_head = sum / count.max(1) as f64;
        for (i, h) in self.head.iter_mut().enumerate() {
            *h = match conditions.fixed_head(i) {
                Some(fixed) => fixed,
                None if warm && h.is_finite() => *h,
                None => start_head,
            };
        }
        // A held head's draw starts from zero on every start.
        self.reset_hold();
        // Relations start on their exact flow at the starting pressure.
        for r in &mut self.relations {
            let p = self.head[r.node as usize] - r.elevation;
            r.q = if p.is_finite() { r.law().flow(p) } else { 0.0 };
        }
        self.demand_scale = (self.demand.iter().map(|d| d.abs()).sum::<f64>()
            + self.relations.iter().map(|r| if r.law().capped { r.law().flow } else { r.q }).sum::<f64>())
        .max(1e-3);
    }

    /// Takes `other`'s last solution (a solver of the same structure) as this solver's starting
    /// point for a warm start.
    fn start_from(&mut self, other: &Solver) {
        self.flow.copy_from_slice(&other.flow);
        self.head.copy_from_slice(&other.head);
        self.has_previous = other.has_previous;
    }

    /// Rebuilds the laws whose inputs changed since this solver last saw `conditions` (every law
    /// for other conditions, or when the head-loss formula or the water changed).
    fn refresh_laws(&mut self, model: &Model, conditions: &Conditions) {
        let basis = (model.options.headloss, model.options.water);
        let stale = if self.law_basis == Some(basis) && self.laws.len() == model.links().len() {
            conditions.stale_since(self.laws_seen)
        } else {
            None
        };
        match stale {
            Some(changed) => {
                for &k in changed {
                    let k = k as usize;
                    self.laws[k] = LinkLaw::from_conditions(model, k, conditions, &self.water);
                    let position = self.structure.core_position[k];
                    if position != structure::NONE {
                        self.set_hot(position as usize);
                    }
                }
            }
            None => {
                let water = model.options.water_properties();
                self.rebuild_laws(model, |k| LinkLaw::from_conditions(model, k, conditions, &water));
            }
        }
        self.laws_seen = Some(conditions.laws_seen());
    }

    /// Builds every link's law with `law_of` (of the link's index), and their inline forms.
    fn rebuild_laws(&mut self, model: &Model, law_of: impl Fn(usize) -> LinkLaw + Sync) {
        let mut laws = std::mem::take(&mut self.laws);
        fill_laws(&mut laws, model.links().len(), law_of);
        self.install_laws(model, laws);
    }

    /// Takes `laws` (every link's, built from `model` or its conditions) as this solver's, with
    /// their inline forms.
    fn install_laws(&mut self, model: &Model, laws: Vec<LinkLaw>) {
        self.water = model.options.water_properties();
        self.laws = laws;
        for i in 0..self.structure.core.len() {
            self.set_hot(i);
        }
        self.law_basis = Some((model.options.headloss, model.options.water));
    }

    /// The inline form of core link `i`'s law, and its law bit.
    fn set_hot(&mut self, i: usize) {
        let law = &self.laws[self.structure.core[i].link as usize];
        match law.hazen_williams_parts() {
            Some((r, minor)) => {
                self.hot[i] = HotLaw { r, minor, min_slope: law.min_slope };
                self.mode[i] &= !LAW_GENERAL;
            }
            None => {
                self.hot[i] = HotLaw { r: 0.0, minor: 0.0, min_slope: law.min_slope };
                self.mode[i] |= LAW_GENERAL;
            }
        }
    }
}
