//! Closures one link at a time on a base case's factor: the engine of the each-pipe-closed
//! sweep ([`Solver::solve_closures`]).
//!
//! # Why a path of its own
//! A closure of one link in a network whose base case is solved is a small change: the base
//! case's Cholesky factor with a rank-one correction (Sherman–Morrison, see `chord.rs`) gives
//! its first Newton step, and chord steps on the same factor give the rest. What a general solve
//! adds around those steps (device states applied, which nodes a fixed head reaches, the tree
//! sweeps, every link's energy residual evaluated again, a new `Solution` of ten network-sized
//! arrays) cost more than the steps themselves. Here each worker keeps its buffers and a
//! `Solution` that it rewrites closure after closure, and the work that does not depend on the
//! closure is done once:
//!
//! * **Connectivity from a bridge table.** Closing a link that is not a bridge of the graph of
//!   open links (Tarjan's bridges, linear time, made once) cuts nobody off. A pipe of a dead-end
//!   tree is a bridge whose far side (its subtree, which holds no fixed head) is what it cuts
//!   off. A core link that is a bridge goes the general way.
//! * **Dead-end trees from the base case.** A tree pipe's flow is the demand beyond it and its
//!   head loss depends on nothing else, so a tree junction's head is the base case's plus the
//!   change of its core root's head; only the pipes between a closed tree pipe and the core
//!   carry a new flow (less by the demand cut off), and only the junctions below them take a
//!   further change of head.
//! * **A rank-k correction where the chord stalls.** When a chord step contracts by less than
//!   [`CHORD_CONTRACTION`], the links whose Newton conductance moved most from the base case's
//!   (scored by the flow their linearisation misses) join the closed link in a Woodbury
//!   correction of the base factor (at most [`WOODBURY_LINKS`] of them, chosen afresh at most
//!   [`WOODBURY_ROUNDS`] times), and the chord steps go on with that matrix. A core closure whose
//!   first step moved a few links far (at least [`WOODBURY_AT_ONCE`]) chooses it right away.
//! * **Passes without chains through memory.** A closure's passes gather each unknown's balance
//!   from its links' values ([`Incidence`]) rather than scatter each link's value into its two
//!   ends (consecutive links share ends, and the read-modify-writes of one balance wait on each
//!   other), split their sums in two, and take their largest values by plain comparisons (a
//!   NaN-aware `max` kept in memory was the longest chain of a step), and read each link's
//!   ends and expansion from arrays of their own ([`LinkPass`]); a closure writes the
//!   velocities of the core links (with their flows, in one pass, by the reciprocal of the flow
//!   area) and of the tree pipes whose flows it changed only.
//! * **Only the link results the callback reads** ([`Outputs`]): a sweep whose criteria read
//!   pressures alone writes no flows, velocities or head differences per closure; those are
//!   empty vectors in the closures' solutions, so that no read of them can find a value that
//!   was not computed.
//! * **Newton's steps where the chord cannot serve.** A closure whose first step moved the
//!   flows of more than [`NEWTON_AT_ONCE`] links far (more than a Woodbury correction covers)
//!   factors at its own point at once; one whose chord diverges or stays slow does so later.
//!   Once its steps are within [`OWN_CHORD_REACH`] head tolerances, it keeps its own factor for
//!   chord steps (by the reciprocals of that factor's diagonal, made after each
//!   factorization, as on the base factor), and factors again only where one contracts too
//!   slowly. The factor of a neighbouring closure's answer does not serve instead (tried: most
//!   closures that borrowed one stalled; see `benches/RESULTS.md`, branch `sweep7`).
//!
//! # When it serves, and when the general solve takes over
//! Only where the answer is that of the general solve by construction: the base case solved
//! with no device that has state rules (check valves, running pumps, regulating valves), no
//! pump, no relation of pressure and no held head; the closed link open, on its law and with
//! both ends supplied in the base case; a core link only when it is not a bridge. Every other
//! closure, and every closure whose chord does not settle, is solved by [`Solver::solve`] from
//! the base case's solution (warm, with its own chord and Newton steps). The acceptance test is
//! the general solve's chord test (the first step is an exact Newton step; a later one must have
//! contracted by [`CHORD_CONTRACTION`] and ends the iteration within [`CHORD_MARGIN`] of each
//! tolerance), followed by the same last gates (every value finite, mass balance to round-off).
//! `tests/conditions.rs` compares every closure with a fresh solve of the closed model.

use super::assemble::{law_at, link_ends, FREE_FROM, FREE_TO, MODE_CLOSED, MODE_LAW, MODE_MASK};
use super::chord::{
    backward_by_reciprocals, chord_rhs, forward, forward_path, ChordBase, Correction, Taylor, CHORD_CONTRACTION,
    CHORD_MARGIN, CHORD_STEPS,
};
use super::iterate::{FLOOR_HEAD_CHANGE, MASS_GATE};
use super::status::{LinkState, StatusTracker};
use super::structure::NONE;
use super::{Conditions, Solution, SolveOptions, Solver};
use crate::error::SolveError;
use crate::model::{LinkStatus, Model};
use std::sync::Arc;

/// Most links (besides the closed one) in a closure's Woodbury correction.
pub(super) const WOODBURY_LINKS: usize = 12;

/// How many times a closure may choose its Woodbury links afresh before it takes a
/// factorization of its own.
pub(super) const WOODBURY_ROUNDS: u32 = 3;

/// Most core links whose flow the first step moved far (see `Solver::far_links`) for a closure
/// to go on with chord steps; beyond it the closure takes Newton's steps at once. Measured on
/// the generated network of 10,000 junctions (seed 7): of the closures with more than 30 such
/// links, 1,448 of 1,562 ended on Newton's steps after two to ten chord steps that did not settle.
pub(super) const NEWTON_AT_ONCE: usize = 30;

/// Largest head change of a step on the closure's own factor, in head tolerances, after which
/// the next steps keep that factor (chord steps; a factorization again only where one
/// contracts by less than [`CHORD_CONTRACTION`]). Measured on the generated network of 10,000
/// junctions (seed 7): the closures on Newton's steps took a fifth less time with 10 than
/// with a factorization at every step (3 did about as well, 100 worse).
pub(super) const OWN_CHORD_REACH: f64 = 10.0;

/// Fewest core links whose flow the first step of a core closure moved far (see
/// `Solver::far_links`) for the closure to choose its Woodbury correction right after that step
/// (up to [`NEWTON_AT_ONCE`] of them), instead of after chord steps that contract too slowly.
/// Measured on the generated network of 10,000 junctions (seed 7, one thread, one run each under
/// load): with 3, the 7,742 core closures took 36,013 steps and 4,678 factorizations instead of
/// 39,391 and 5,749 (1,832 instead of 2,296 of them ended on Newton's steps), and their steps
/// 6 % less CPU time; with 0 (every core closure) 35,652 steps but 5 % less time, since a
/// closure that would settle in two steps then takes three; with 3 and [`NEWTON_AT_ONCE`] at 60
/// instead of 30, 2 % less.
pub(super) const WOODBURY_AT_ONCE: usize = 3;

/// Ratio of flows beyond which a link counts as moved far (`|Q|/|Q₀|` above it or below its
/// inverse): a Hazen–Williams conductance `1/h'(Q)` ∝ `|Q|^-0.852` then differs by a factor of
/// about two.
const FAR_FLOW: f64 = 2.25;

/// Which of a closure's link results the callback of a sweep reads
/// ([`Solver::solve_closures_reading`]). Heads, pressures, link states, connectivity and
/// demands are always written; each of the three results below only where it is asked for. One
/// not asked for is an empty vector in the `Solution` the callback sees (on the fast path and
/// after the general solve alike), so that a read of it fails at once instead of finding the
/// base case's values or another closure's. Within the crate only (the criteria of
/// `analysis::sweep_pipes` say what they read): a `Solution` handed outside is always whole, so
/// that no caller of the library meets one with results missing.
///
/// A sweep whose criteria read pressures only (a minimum pressure, supply lost) spares a pass
/// over the core links (flows and velocities) and one over every link (head differences) per
/// closure: on the generated network of 10,000 junctions (seed 7, one thread, `perf record`),
/// some two fifths of the writing of each closure's answer. Velocities come with the flows
/// they are made from.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Outputs {
    /// Flows of the links (`Solution::flow`).
    pub flows: bool,
    /// Mean velocities of the links (`Solution::velocity`).
    pub velocities: bool,
    /// Head differences across the links (`Solution::headloss`).
    pub head_differences: bool,
}

impl Outputs {
    /// Every result.
    pub(crate) const ALL: Outputs = Outputs { flows: true, velocities: true, head_differences: true };

    /// Leaves the results not asked for out of `solution` (empty vectors).
    fn strip(&self, solution: &mut Solution) {
        if !self.flows {
            solution.flow = Vec::new();
        }
        if !self.velocities {
            solution.velocity = Vec::new();
        }
        if !self.head_differences {
            solution.headloss = Vec::new();
        }
    }
}

/// What every closure of a sweep shares: the base case's factor and linearisation, its
/// solution, the bridge table and the dead-end trees' layout.
#[derive(Debug)]
pub(super) struct SweepBase {
    chord: Arc<ChordBase>,
    /// The base case's solution, which each worker rewrites closure by closure.
    solution: Solution,
    /// Per core position: whether the link is a bridge of the base case's open links.
    bridge: Vec<bool>,
    /// Per link: its index in `structure.trees`, or `NONE`.
    tree_index: Vec<u32>,
    /// Per node: the tree links whose parent it is (`child_start` indexes `child_trees`).
    child_start: Vec<u32>,
    child_trees: Vec<u32>,
    /// Per node: the tree link whose child it is, or `NONE`.
    tree_above: Vec<u32>,
    /// Per tree link: the base case's outflow beyond it (its flow's size, signed by demand).
    beyond: Vec<f64>,
    /// Per node: the core unknown whose head change a tree junction (or the unknown itself)
    /// follows, or `NONE` (fixed heads, trees hanging off a fixed head).
    root_unknown: Vec<u32>,
    /// Per node: whether it is an unknown of the matrix itself (its head is the iteration's; a
    /// tree junction's is the base case's moved by its root's change).
    is_unknown: Vec<bool>,
    /// Per unknown: the outflow it carries in the base case (its own and its trees').
    unknown_demand: Vec<f64>,
    /// Σ|Q| over the tree pipes in the base case.
    tree_flow_sum: f64,
    /// Σ|demand| floored (the scale of relative flow changes).
    demand_scale: f64,
    /// Per link: flow area, m² (zero for pumps).
    area: Vec<f64>,
    /// Per core position: the reciprocal of its link's flow area, 1/m², where it is a finite
    /// number (NaN elsewhere: pumps, and areas too small for one). The velocities of the core
    /// links, which every closure writes, take a multiplication where a division cost a fifth of
    /// the writing; they differ from `Q / A` by round-off only.
    core_reciprocal_area: Vec<f64>,
    /// `L⁻¹ r₀`, the forward solve of the base case's chord right-hand side `r₀`. A closure
    /// changes `r₀` in one entry (a tree closure: its root's outflow) or along one link's
    /// columns `u` (a core closure: the closed link's constant leaves the balance), so its first
    /// step's forward solve is `y₀` plus a multiple of `L⁻¹ e_root` or `L⁻¹ u`, both non-zero
    /// only on elimination-tree paths, instead of a forward solve over every column.
    y0: Vec<f64>,
    /// Per node: elevation, m.
    elevation: Vec<f64>,
    /// Per unknown, the core links on their law whose free ends it is (see [`Incidence`]).
    incidence: Incidence,
    /// What a closure's link pass reads of each core link (see [`LinkPass`]).
    pass: LinkPass,
}

/// What a closure's link pass ([`Solver::closure_pass`]) reads of each core link besides its
/// conductance, constant and flow, in arrays of their own: its two ends, and its expansion.
/// The pass streams these arrays from memory at every step; read from the structure's link
/// records and the base case's `Option`al expansions it took 80 bytes per link, here 48.
/// Measured on the generated network of 10,000 junctions (seed 7, one thread, `perf record`):
/// the closures' steps took 2.11 factorizations' worth of samples instead of 2.37.
#[derive(Debug)]
struct LinkPass {
    /// Per core link, its `from` and `to` ends: the unknown, or the node with [`FIXED_END`] set
    /// where the end is a fixed head.
    ends: Vec<[u32; 2]>,
    /// Per core link, its expansion or [`Taylor::NONE`].
    expansion: Vec<Taylor>,
}

/// The bit of [`LinkPass::ends`] that marks a fixed head's node.
const FIXED_END: u32 = 1 << 31;

impl LinkPass {
    fn new(structure: &super::Structure, chord: &ChordBase) -> LinkPass {
        let end = |slot: u32, node: u32| if slot == NONE { node | FIXED_END } else { slot };
        LinkPass {
            ends: structure.core.iter().map(|c| [end(c.slots.from, c.from), end(c.slots.to, c.to)]).collect(),
            expansion: chord.taylor.iter().map(|t| t.unwrap_or(Taylor::NONE)).collect(),
        }
    }
}

/// Per unknown, the core links on their law in the base case with a free end there, each with
/// its sign in the unknown's balance (−1 for a link that leaves it, +1 for one that enters it).
/// A closure's passes gather each balance from its links' values instead of scattering each
/// link's value into its two ends: consecutive links of a street network share ends, and a
/// scatter's read-modify-writes of one balance wait on each other through memory. The first
/// [`INCIDENT`] links of an unknown sit in fixed places (unused places have sign 0), so that the
/// gather takes no branch on how many there are; the rest (few: junctions where more than four
/// pipes meet) are in `extra`.
#[derive(Debug)]
struct Incidence {
    links: Vec<[u32; INCIDENT]>,
    signs: Vec<[f64; INCIDENT]>,
    /// `(unknown, link, sign)` beyond the first [`INCIDENT`] of an unknown.
    extra: Vec<(u32, u32, f64)>,
}

/// Links of an unknown held in [`Incidence`]'s fixed places: a street network's junctions join
/// at most four pipes but for a few (in the generated network of 10,000 junctions, seed 7, 276
/// of its 10,000 nodes join five to seven links).
const INCIDENT: usize = 4;

impl Incidence {
    /// The incidence of the core links on their law under `mode` (the base case's).
    fn new(structure: &super::Structure, mode: &[u8]) -> Incidence {
        let n = structure.n;
        let mut links = vec![[0u32; INCIDENT]; n];
        let mut signs = vec![[0.0f64; INCIDENT]; n];
        let mut count = vec![0usize; n];
        let mut extra = Vec::new();
        for (i, (c, &m)) in structure.core.iter().zip(mode).enumerate() {
            if m & MODE_MASK != MODE_LAW {
                continue;
            }
            for (bit, slot, sign) in [(FREE_FROM, c.slots.from, -1.0), (FREE_TO, c.slots.to, 1.0)] {
                if m & bit == 0 {
                    continue;
                }
                let u = slot as usize;
                if count[u] < INCIDENT {
                    links[u][count[u]] = i as u32;
                    signs[u][count[u]] = sign;
                    count[u] += 1;
                } else {
                    extra.push((slot, i as u32, sign));
                }
            }
        }
        Incidence { links, signs, extra }
    }

    /// `balance[u] = −outflow[u] − Σ value (links leaving u) + Σ value (links entering u)` for
    /// every free unknown, zero for the others. Every value must be finite (an unused place
    /// multiplies one by zero).
    fn gather(&self, value: &[f64], outflow: &[f64], free: &[bool], balance: &mut [f64]) {
        let places = self.links.iter().zip(&self.signs);
        for ((b, (&d, &f)), (l, sg)) in balance.iter_mut().zip(outflow.iter().zip(free)).zip(places) {
            let v = (sg[0] * value[l[0] as usize] + sg[1] * value[l[1] as usize])
                + (sg[2] * value[l[2] as usize] + sg[3] * value[l[3] as usize]);
            *b = if f { v - d } else { 0.0 };
        }
        for &(u, i, sign) in &self.extra {
            if free[u as usize] {
                balance[u as usize] += sign * value[i as usize];
            }
        }
    }
}

/// A worker's state between closures: its solver (the base case's buffers), the `Solution` it
/// rewrites, the conditions the general solve changes, and what the last closure changed.
struct Worker {
    solver: Solver,
    /// The closure's answer; the results not in `outputs` are empty.
    solution: Solution,
    outputs: Outputs,
    conditions: Conditions,
    /// The general solve ran since the buffers were last reset from the base case.
    dirty: bool,
    /// Nodes and links the last closure changed in `solution` beyond the full passes.
    touched_nodes: Vec<u32>,
    touched_links: Vec<u32>,
    /// Scratch: a tree walk's stack, and the tree pipes above a closed one.
    stack: Vec<u32>,
    above: Vec<u32>,
    /// Scratch of the path solves (see [`forward_path`]): zeros between them.
    path: Vec<f64>,
    /// The Woodbury correction of the current closure.
    correction: Correction,
    /// Closures settled on the base factor alone, with a Woodbury correction, with Newton's
    /// steps, with both (for the tests).
    paths: [u32; 4],
    /// Closures that took Newton's steps at once, that chose their Woodbury correction right
    /// after the first step, and chord steps on closures' own factors (for the tests).
    at_once: u32,
    woodbury_at_once: u32,
    own_chord: u32,
}

/// How a closure's steps ended: its iterations, its last head and flow changes, how many times
/// it chose a Woodbury correction and whether it took Newton's steps.
#[derive(Clone, Copy, Debug)]
struct Settled {
    iterations: u32,
    head_change: f64,
    flow_change: f64,
    /// The largest energy residual of the core links at the answer, m.
    residual: f64,
    rounds: u32,
    newton: bool,
    /// It took Newton's steps right after the first step (see [`NEWTON_AT_ONCE`]).
    at_once: bool,
    /// It chose its Woodbury correction right after the first step (see [`WOODBURY_AT_ONCE`]).
    woodbury_at_once: bool,
    /// Chord steps it took on a factor of its own (see [`OWN_CHORD_REACH`]).
    own_chord: u32,
}

/// How a closure enters the fast path.
enum Closure {
    /// A core link (its core position), not a bridge.
    Core(usize),
    /// A dead-end tree pipe (its tree index).
    Tree(usize),
}

impl Solver {
    /// Solves `model` under `conditions` (the base case, a cold start), then the closure of each
    /// link of `links`, one at a time, on every thread of rayon's pool, each handed to `reduce`
    /// with its position in `links` on the thread that solved it. `on_base` sees the base case's
    /// result before any closure is solved. Returns the base case's result and `reduce`'s values
    /// in the order of `links`.
    ///
    /// Every closure's answer is that of a fresh solve of the model with that link closed, within
    /// the tolerances of `options` (see the docs of `solve/sweep.rs` for how it is found). The
    /// `Solution` handed to `reduce` lives only during the call: heads, pressures, flows,
    /// velocities, head differences, link states, connectivity and demands are the closure's;
    /// it carries no warnings, and pump results only where the general solve gave them.
    pub fn solve_closures<T: Send>(
        &mut self,
        model: &Model,
        conditions: &Conditions,
        options: &SolveOptions,
        links: &[usize],
        on_base: &mut dyn FnMut(&Result<Solution, SolveError>),
        reduce: &(dyn Fn(usize, Result<&Solution, SolveError>) -> T + Sync),
    ) -> (Result<Solution, SolveError>, Vec<T>) {
        self.solve_closures_reading(model, conditions, options, links, Outputs::ALL, on_base, reduce)
    }

    /// [`Solver::solve_closures`] with only the link results of `outputs` in the closures'
    /// solutions (see [`Outputs`]): the others are empty vectors there. The base case's result
    /// handed to `on_base` and returned is whole.
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn solve_closures_reading<T: Send>(
        &mut self,
        model: &Model,
        conditions: &Conditions,
        options: &SolveOptions,
        links: &[usize],
        outputs: Outputs,
        on_base: &mut dyn FnMut(&Result<Solution, SolveError>),
        reduce: &(dyn Fn(usize, Result<&Solution, SolveError>) -> T + Sync),
    ) -> (Result<Solution, SolveError>, Vec<T>) {
        use rayon::prelude::*;
        // Velocities are made from the flows.
        let outputs = Outputs { flows: outputs.flows || outputs.velocities, ..outputs };
        let cold = SolveOptions { warm_start: false, ..*options };
        let base = self.solve(model, conditions, &cold);
        on_base(&base);
        let warm = SolveOptions { warm_start: true, ..cold };
        let Ok(solution) = &base else {
            // No base case to start from: every closure is a cold general solve.
            let out = links
                .par_iter()
                .enumerate()
                .map_init(
                    || (self.clone(), conditions.clone()),
                    |(solver, local), (i, &k)| {
                        hand(i, general(solver, model, local, conditions, &cold, k), outputs, reduce)
                    },
                )
                .collect();
            return (base, out);
        };
        let sweep = self.sweep_base(model, conditions, solution).map(Arc::new);
        let chord = sweep.as_ref().map(|s| s.chord.clone()).or_else(|| self.chord_base());
        let this = &*self;
        let out = links
            .par_iter()
            .enumerate()
            .map_init(
                || {
                    let mut solver = this.clone();
                    solver.use_chord(chord.clone());
                    let start = sweep.as_ref().map_or(solution, |s| &s.solution).clone();
                    Worker::new(solver, start, conditions.clone(), outputs)
                },
                |w, (i, &k)| {
                    if let Some(sweep) = &sweep {
                        if w.close(this, sweep, k, &warm) {
                            let value = reduce(i, Ok(&w.solution));
                            w.restore(sweep);
                            return value;
                        }
                    }
                    w.solver.start_from(this);
                    w.dirty = true;
                    hand(i, general(&mut w.solver, model, &mut w.conditions, conditions, &warm, k), outputs, reduce)
                },
            )
            .collect();
        (base, out)
    }

    /// What the closures of a sweep share, from this solver's base case (`solution` its last
    /// answer); `None` when the fast path does not serve this base case (see the module docs).
    fn sweep_base(&self, model: &Model, conditions: &Conditions, solution: &Solution) -> Option<SweepBase> {
        if !self.has_previous || !self.relations.is_empty() || !self.pinned.is_empty() || self.holding() {
            return None;
        }
        if model.links().iter().any(|l| l.as_pump().is_some()) || StatusTracker::new(model, conditions).has_devices() {
            return None;
        }
        let chord = self.chord_base()?;
        let structure = &*self.structure;
        let (n_nodes, n_links) = (model.nodes().len(), model.links().len());
        let open: Vec<bool> = solution.link_state.iter().map(|s| s.carries_flow()).collect();
        let is_bridge = bridges(n_nodes, &structure.ends, &open);
        let bridge = structure.core.iter().map(|c| is_bridge[c.link as usize]).collect();
        let mut tree_index = vec![NONE; n_links];
        let mut tree_above = vec![NONE; n_nodes];
        let mut child_start = vec![0u32; n_nodes + 1];
        for (t, tree) in structure.trees.iter().enumerate() {
            tree_index[tree.link as usize] = t as u32;
            tree_above[tree.child as usize] = t as u32;
            child_start[tree.parent as usize + 1] += 1;
        }
        for i in 0..n_nodes {
            child_start[i + 1] += child_start[i];
        }
        let mut fill: Vec<u32> = child_start[..n_nodes].to_vec();
        let mut child_trees = vec![0u32; structure.trees.len()];
        for (t, tree) in structure.trees.iter().enumerate() {
            child_trees[fill[tree.parent as usize] as usize] = t as u32;
            fill[tree.parent as usize] += 1;
        }
        // Beyond each tree pipe, leaves first (as `tree_flows` sums them).
        let mut beyond = vec![0.0; structure.trees.len()];
        let mut subtree = vec![0.0; n_nodes];
        for (t, tree) in structure.trees.iter().enumerate() {
            if !open[tree.link as usize] {
                continue;
            }
            let b = self.demand[tree.child as usize] + subtree[tree.child as usize];
            subtree[tree.parent as usize] += b;
            beyond[t] = b;
        }
        // Roots, root first (the trees are stored leaves first).
        let mut root_unknown: Vec<u32> = structure.unknown_of_node.clone();
        for tree in structure.trees.iter().rev() {
            root_unknown[tree.child as usize] = root_unknown[tree.parent as usize];
        }
        // What a closure's solution carries of the base case's: no warnings (see
        // `solve_closures`).
        let mut solution = solution.clone();
        solution.warnings.clear();
        let mut y0 = vec![0.0; structure.n];
        chord_rhs(structure, &chord.mode, &chord.cc, &self.unknown_demand, &chord.free, &mut y0);
        forward(structure, &chord.l_values, &mut y0, 0);
        Some(SweepBase {
            y0,
            solution,
            bridge,
            tree_index,
            child_start,
            child_trees,
            tree_above,
            beyond,
            is_unknown: structure.unknown_of_node.iter().map(|&u| u != NONE).collect(),
            root_unknown,
            unknown_demand: self.unknown_demand.clone(),
            tree_flow_sum: self.tree_flow_sum,
            demand_scale: self.demand_scale,
            core_reciprocal_area: structure
                .core
                .iter()
                .map(|c| {
                    let area = conditions.flow_area(c.link as usize);
                    let r = area.recip();
                    if area > 0.0 && r.is_finite() {
                        r
                    } else {
                        f64::NAN
                    }
                })
                .collect(),
            area: (0..n_links).map(|k| conditions.flow_area(k)).collect(),
            elevation: model.nodes().iter().map(|n| n.elevation).collect(),
            incidence: Incidence::new(structure, &chord.mode),
            pass: LinkPass::new(structure, &chord),
            chord,
        })
    }
}

/// Hands an owned result to `reduce` as a borrowed one, with the results of `outputs` only.
fn hand<T>(
    i: usize,
    result: Result<Solution, SolveError>,
    outputs: Outputs,
    reduce: &dyn Fn(usize, Result<&Solution, SolveError>) -> T,
) -> T {
    match result {
        Ok(mut solution) => {
            outputs.strip(&mut solution);
            reduce(i, Ok(&solution))
        }
        Err(e) => reduce(i, Err(e)),
    }
}

/// The general solve of the closure of link `k`: `local` (a copy of `base`) changed for it and
/// changed back.
fn general(
    solver: &mut Solver,
    model: &Model,
    local: &mut Conditions,
    base: &Conditions,
    options: &SolveOptions,
    k: usize,
) -> Result<Solution, SolveError> {
    if let Err(e) = local.set_status(model, k, LinkStatus::Closed) {
        return Err(SolveError::Model(e));
    }
    let result = solver.solve(model, local, options);
    if local.set_status(model, k, base.status(k)).is_err() {
        local.restore_from(base);
    }
    result
}

impl Worker {
    fn new(solver: Solver, mut solution: Solution, conditions: Conditions, outputs: Outputs) -> Self {
        outputs.strip(&mut solution);
        Worker {
            solver,
            solution,
            outputs,
            conditions,
            dirty: true,
            touched_nodes: Vec::new(),
            touched_links: Vec::new(),
            stack: Vec::new(),
            above: Vec::new(),
            path: Vec::new(),
            correction: Correction::default(),
            paths: [0; 4],
            at_once: 0,
            woodbury_at_once: 0,
            own_chord: 0,
        }
    }

    /// Solves the closure of link `k` on the fast path into `self.solution`; false when the
    /// fast path does not serve it (the worker's solution is then as the base case's).
    fn close(&mut self, base: &Solver, sweep: &SweepBase, k: usize, options: &SolveOptions) -> bool {
        let structure = base.structure.clone();
        let chord = &sweep.chord;
        let solution = &sweep.solution;
        let (from, to) = structure.ends[k];
        if solution.link_state[k] != LinkState::Open
            || !solution.connected[from as usize]
            || !solution.connected[to as usize]
        {
            return false;
        }
        let closure = match structure.core_position[k] {
            NONE => match sweep.tree_index[k] {
                NONE => return false,
                t => Closure::Tree(t as usize),
            },
            i => {
                let i = i as usize;
                if chord.mode[i] & MODE_MASK != MODE_LAW || sweep.bridge[i] {
                    return false;
                }
                Closure::Core(i)
            }
        };
        if self.dirty {
            self.solver.reset_from(base, sweep);
            self.dirty = false;
        }
        // The closure's change of the base case's equations.
        let s = &mut self.solver;
        let (mut cut_demand, mut root) = (0.0, NONE);
        s.tree_flow_sum = sweep.tree_flow_sum;
        self.above.clear();
        match closure {
            Closure::Core(i) => s.mode[i] = MODE_CLOSED,
            Closure::Tree(t) => {
                let tree = structure.trees[t];
                cut_demand = sweep.beyond[t];
                // The pipes between it and the core carry the demand cut off less.
                let mut node = tree.parent;
                s.tree_flow_sum -= sweep.beyond[t].abs();
                while sweep.tree_above[node as usize] != NONE {
                    let a = sweep.tree_above[node as usize];
                    self.above.push(a);
                    let b = sweep.beyond[a as usize];
                    s.tree_flow_sum += (b - cut_demand).abs() - b.abs();
                    node = structure.trees[a as usize].parent;
                }
                // Pipes cut off carry nothing (they no longer count in the flow scale).
                self.stack.clear();
                self.stack.push(tree.child);
                while let Some(v) = self.stack.pop() {
                    let v = v as usize;
                    let children = sweep.child_start[v] as usize..sweep.child_start[v + 1] as usize;
                    for &c in &sweep.child_trees[children] {
                        s.tree_flow_sum -= sweep.beyond[c as usize].abs();
                        self.stack.push(structure.trees[c as usize].child);
                    }
                }
                root = structure.unknown_of_node[node as usize];
                if root != NONE {
                    s.unknown_demand[root as usize] -= cut_demand;
                }
            }
        }
        self.path.resize(structure.n, 0.0);
        let answer =
            s.closure_steps(sweep, &closure, (root, cut_demand), (&mut self.correction, &mut self.path), options);
        let written = match answer {
            Some(settled) => {
                self.paths[usize::from(settled.rounds > 0) + 2 * usize::from(settled.newton)] += 1;
                self.at_once += u32::from(settled.at_once);
                self.woodbury_at_once += u32::from(settled.woodbury_at_once);
                self.own_chord += settled.own_chord;
                self.write(&structure, sweep, k, &closure, cut_demand, &settled)
            }
            None => false,
        };
        // Back to the base case's equations.
        let s = &mut self.solver;
        match closure {
            Closure::Core(i) => s.mode[i] = chord.mode[i],
            Closure::Tree(_) => {
                if root != NONE {
                    s.unknown_demand[root as usize] = sweep.unknown_demand[root as usize];
                }
            }
        }
        if !written {
            self.restore(sweep);
        }
        written
    }

    /// Writes the closure's answer into `self.solution` (the base case's, changed); false when a
    /// value is not finite or the mass balance does not hold (the general solve then decides).
    #[allow(clippy::too_many_arguments)]
    fn write(
        &mut self,
        structure: &super::Structure,
        sweep: &SweepBase,
        k: usize,
        closure: &Closure,
        cut_demand: f64,
        settled: &Settled,
    ) -> bool {
        let s = &mut self.solver;
        let out = &mut self.solution;
        let chord = &sweep.chord;
        // The last gate of the general solve: the mass balance of every free unknown (the tree
        // pipes' flows are in its outflow) holds to round-off.
        if let Closure::Core(i) = *closure {
            // Closed: it carries nothing (its flow is the base case's until now).
            s.cq[i] = 0.0;
        }
        sweep.incidence.gather(&s.cq, &s.unknown_demand, &s.free, &mut s.rhs);
        // (The gather left the other unknowns' balances zero; plain comparisons, with a number
        // that is not one caught apart.)
        let (mut worst, mut nan) = (0.0f64, false);
        for r in &s.rhs {
            let a = r.abs();
            nan |= a.is_nan();
            if a > worst {
                worst = a;
            }
        }
        if nan || worst > MASS_GATE * sweep.demand_scale {
            return false;
        }
        // Heads and pressures (one pass): tree junctions follow their core root; the unknowns
        // are the iteration's. Every value finite where it is defined.
        for (i, (h, p)) in out.head.iter_mut().zip(out.pressure.iter_mut()).enumerate() {
            let base_head = sweep.solution.head[i];
            *h = match sweep.root_unknown[i] {
                NONE => base_head,
                u if sweep.is_unknown[i] => s.unknown_head[u as usize],
                u => base_head + (s.unknown_head[u as usize] - chord.head0[u as usize]),
            };
            *p = *h - sweep.elevation[i];
            if out.connected[i] && !p.is_finite() {
                return false;
            }
        }
        let (flows, velocities) = (self.outputs.flows, self.outputs.velocities);
        if flows {
            out.flow[k] = 0.0;
        }
        out.link_state[k] = LinkState::Closed;
        self.touched_links.push(k as u32);
        if let Closure::Tree(t) = *closure {
            let tree = structure.trees[t];
            // The junctions beyond it are cut off, their pipes carry nothing.
            self.stack.clear();
            self.stack.push(tree.child);
            while let Some(v) = self.stack.pop() {
                let v = v as usize;
                out.connected[v] = false;
                out.head[v] = f64::NAN;
                out.pressure[v] = f64::NAN;
                self.touched_nodes.push(v as u32);
                let children = sweep.child_start[v] as usize..sweep.child_start[v + 1] as usize;
                for &c in &sweep.child_trees[children] {
                    let tc = structure.trees[c as usize];
                    let l = tc.link as usize;
                    if flows {
                        out.flow[l] = 0.0;
                    }
                    if out.link_state[l].carries_flow() {
                        out.link_state[l] = LinkState::Disconnected;
                    }
                    self.touched_links.push(l as u32);
                    self.stack.push(tc.child);
                }
            }
            // The pipes above it carry the demand cut off less: new flows and head losses, and
            // every junction below each of them moves by its change of head loss.
            for &a in &self.above {
                let ta = structure.trees[a as usize];
                let l = ta.link as usize;
                let b = sweep.beyond[a as usize] - cut_demand;
                let q = if ta.downstream { b } else { -b };
                let old = sweep.solution.flow[l];
                if flows {
                    out.flow[l] = q;
                }
                self.touched_links.push(l as u32);
                let change = s.laws[l].evaluate_exact(q).0 - s.laws[l].evaluate_exact(old).0;
                // head[child] = head[parent] − h(Q) when the pipe points away from the core.
                let shift = if ta.downstream { -change } else { change };
                self.stack.clear();
                self.stack.push(ta.child);
                while let Some(v) = self.stack.pop() {
                    let v = v as usize;
                    if !out.connected[v] {
                        continue;
                    }
                    out.head[v] += shift;
                    out.pressure[v] = out.head[v] - sweep.elevation[v];
                    if !out.pressure[v].is_finite() {
                        return false;
                    }
                    let children = sweep.child_start[v] as usize..sweep.child_start[v + 1] as usize;
                    for &c in &sweep.child_trees[children] {
                        self.stack.push(structure.trees[c as usize].child);
                    }
                }
            }
        }
        // Core flows and velocities in one pass (the tree pipes' are the base case's but for
        // those the closure touched); every value finite where it is defined. (Flows not asked
        // for are finite all the same: a flow that is not makes the steps' flow change one that
        // is not, and the closure is not accepted.)
        let velocity = |l: usize, q: f64| {
            let area = sweep.area[l];
            let v = if area > 0.0 { q / area } else { f64::NAN };
            (v, q.is_finite() && (area <= 0.0 || v.is_finite()))
        };
        let mut finite = true;
        if velocities {
            for ((c, &q), &r) in structure.core.iter().zip(&s.cq).zip(&sweep.core_reciprocal_area) {
                let l = c.link as usize;
                // The closed link's flow is zero already.
                let q = if l != k { q } else { out.flow[l] };
                out.flow[l] = q;
                let (v, ok) = if r.is_nan() { velocity(l, q) } else { (q * r, (q * r).is_finite()) };
                out.velocity[l] = v;
                finite &= ok;
            }
            for &l in &self.touched_links {
                let l = l as usize;
                let (v, ok) = velocity(l, out.flow[l]);
                out.velocity[l] = v;
                finite &= ok;
            }
        } else if flows {
            for (c, &q) in structure.core.iter().zip(&s.cq) {
                let l = c.link as usize;
                let q = if l != k { q } else { out.flow[l] };
                out.flow[l] = q;
                finite &= q.is_finite();
            }
        }
        if !finite {
            return false;
        }
        // Head differences: every junction's head moved.
        if self.outputs.head_differences {
            for (h, &(a, b)) in out.headloss.iter_mut().zip(&structure.ends) {
                *h = (out.head[a as usize] - out.head[b as usize]).abs();
            }
        }
        out.iterations = settled.iterations;
        out.last_head_change = settled.head_change;
        out.last_flow_change = settled.flow_change;
        out.max_mass_residual = worst;
        // Tree pipes meet their energy equations exactly by construction.
        out.max_energy_residual = settled.residual;
        true
    }

    /// Undoes what the last closure changed in `self.solution` beyond the full passes.
    fn restore(&mut self, sweep: &SweepBase) {
        let base = &sweep.solution;
        for &v in &self.touched_nodes {
            self.solution.connected[v as usize] = base.connected[v as usize];
        }
        for &l in &self.touched_links {
            let l = l as usize;
            self.solution.link_state[l] = base.link_state[l];
            if self.outputs.flows {
                self.solution.flow[l] = base.flow[l];
            }
            if self.outputs.velocities {
                self.solution.velocity[l] = base.velocity[l];
            }
        }
        self.touched_nodes.clear();
        self.touched_links.clear();
    }
}

impl Solver {
    /// Back to the base case's iteration state after a general solve used these buffers.
    fn reset_from(&mut self, base: &Solver, sweep: &SweepBase) {
        let chord = &sweep.chord;
        self.mode.copy_from_slice(&chord.mode);
        self.cp.copy_from_slice(&chord.cp);
        self.free.copy_from_slice(&chord.free);
        self.head.copy_from_slice(&base.head);
        self.unknown_demand.copy_from_slice(&sweep.unknown_demand);
        self.demand_scale = sweep.demand_scale;
    }

    /// The chord steps of one closure from the base case's point (its change of the equations
    /// already made): `(iterations, last head change, last flow change)`, or `None` when they do
    /// not settle. Every conductance the correction changed is the base case's again after it.
    ///
    /// `(root, cut)` is a tree closure's core root (or `NONE`) and the outflow it no longer
    /// carries; `path` is scratch for [`forward_path`] (zeros).
    fn closure_steps(
        &mut self,
        sweep: &SweepBase,
        closure: &Closure,
        (root, cut): (u32, f64),
        (correction, path): (&mut Correction, &mut [f64]),
        options: &SolveOptions,
    ) -> Option<Settled> {
        let chord = &*sweep.chord;
        self.cq.copy_from_slice(&chord.q0);
        self.cc.copy_from_slice(&chord.cc);
        self.unknown_head.copy_from_slice(&chord.head0);
        correction.clear();
        if let Closure::Core(i) = *closure {
            correction.push(i, -chord.cp[i]);
            // The closed link leaves the balances its constant is gathered into.
            self.cc[i] = 0.0;
        }
        let result = if correction.build(&self.structure, chord, &chord.mode) {
            // The first step's forward solve (see `SweepBase::y0`): the closed link's constant
            // leaves the balances of its free ends, or the root carries `cut` less.
            self.rhs.copy_from_slice(&sweep.y0);
            match *closure {
                Closure::Core(i) => correction.add_column(0, chord.cc[i], &mut self.rhs),
                Closure::Tree(_) if root != NONE && self.free[root as usize] => forward_path(
                    &self.structure,
                    &chord.l_values,
                    &chord.parent,
                    &mut self.rhs,
                    path,
                    root as usize,
                    cut,
                ),
                Closure::Tree(_) => {}
            }
            self.chord_loop(chord, sweep, closure, correction, options)
        } else {
            None
        };
        // The conductances a correction or a factorization changed.
        self.cp.copy_from_slice(&chord.cp);
        result
    }

    /// The loop of [`Solver::closure_steps`]: the general solve's chord test on the base factor,
    /// with a Woodbury correction chosen afresh where the chord contracts too slowly, and a
    /// factorization of its own at the current point where it diverges or the correction does
    /// not help (then Newton's step, and chord steps on that factor).
    fn chord_loop(
        &mut self,
        chord: &ChordBase,
        sweep: &SweepBase,
        closure: &Closure,
        correction: &mut Correction,
        options: &SolveOptions,
    ) -> Option<Settled> {
        let mut iterations = 0u32;
        // Steps on the current matrix, and the largest head correction of the last one.
        let mut on_matrix = 0u32;
        let mut previous = f64::INFINITY;
        let mut rounds = 0u32;
        let mut own = false;
        let (mut at_once, mut woodbury_at_once, mut own_chord) = (false, false, 0u32);
        loop {
            if iterations >= options.max_iterations {
                return None;
            }
            if !own && iterations >= CHORD_STEPS {
                // A chord that ran its course without settling: Newton's steps.
                if !self.refactor(chord) {
                    return None;
                }
                own = true;
                on_matrix = 0;
                previous = f64::INFINITY;
            }
            iterations += 1;
            if own {
                self.own_factor_solve();
            } else if iterations == 1 {
                // Its forward solve is made already (`closure_steps`).
                correction.apply(&mut self.rhs);
                backward_by_reciprocals(&self.structure, &chord.l_values, &chord.recip, &mut self.rhs);
            } else {
                self.correction_solve(chord, correction);
            }
            std::mem::swap(&mut self.rhs, &mut self.delta);
            // The largest correction by a plain comparison in two halves (the values are
            // checked finite apart), so that no chain of dependent operations runs through it.
            let (mut change, mut finite) = ([0.0f64; 2], true);
            let heads =
                self.unknown_head.chunks_exact_mut(2).zip(self.delta.chunks_exact(2).zip(self.free.chunks_exact(2)));
            for (h, (d, f)) in heads {
                for e in 0..2 {
                    if f[e] {
                        finite &= d[e].is_finite();
                        if d[e].abs() > change[e] {
                            change[e] = d[e].abs();
                        }
                        h[e] += d[e];
                    }
                }
            }
            let n = self.delta.len();
            if n % 2 == 1 && self.free[n - 1] {
                let d = self.delta[n - 1];
                finite &= d.is_finite();
                change[0] = change[0].max(d.abs());
                self.unknown_head[n - 1] += d;
            }
            if !finite {
                return None;
            }
            let mut head_change = change[0].max(change[1]);
            on_matrix += 1;
            // An exact Newton step (the first, or the first on a factor of its own) ends the
            // iteration on the solver's own test; a later one only if it contracted on its
            // matrix, within CHORD_MARGIN of the tolerances (see `chord.rs`).
            let stalled = on_matrix > 1 && head_change > CHORD_CONTRACTION * previous;
            let diverging = on_matrix > 1 && head_change > previous;
            let share = if on_matrix == 1 && (iterations == 1 || own) {
                1.0
            } else if on_matrix > 1 && !stalled {
                CHORD_MARGIN
            } else {
                0.0
            };
            previous = head_change;
            if iterations == 1 {
                // No previous iterate to compare with.
                head_change = f64::INFINITY;
            }
            let (flow_change, residual) = self.closure_pass(&sweep.pass);
            sweep.incidence.gather(&self.cc, &self.unknown_demand, &self.free, &mut self.rhs);
            if !flow_change.is_finite() {
                return None;
            }
            let (head_tolerance, flow_tolerance) = (share * options.head_tolerance, share * options.flow_tolerance);
            let heads_settled = head_change <= head_tolerance
                || (flow_change <= flow_tolerance
                    && iterations > 1
                    && residual <= head_tolerance
                    && head_change < FLOOR_HEAD_CHANGE);
            if heads_settled && flow_change <= flow_tolerance {
                return Some(Settled {
                    iterations,
                    head_change,
                    flow_change,
                    residual,
                    rounds,
                    newton: own,
                    at_once,
                    woodbury_at_once,
                    own_chord,
                });
            }
            // How many links the first step moved far (see `far_links`) chooses the path.
            let far = if iterations == 1 && !own { self.far_links(chord) } else { 0 };
            if own && (stalled || previous > OWN_CHORD_REACH * options.head_tolerance) {
                // Newton's steps while the steps are large: a chord on a factor of the closure's
                // own point contracts slowly where the closure moved flows far (flows reversed in
                // mains). Near the answer it contracts fast, and its steps take no factorization.
                if !self.refactor(chord) {
                    return None;
                }
                on_matrix = 0;
                previous = f64::INFINITY;
            } else if own {
                // Chord steps on the closure's own factor.
                own_chord += 1;
            } else if far > NEWTON_AT_ONCE {
                // The first step moved many links' conductances far from the base case's: more
                // than a Woodbury correction covers, so the chord would only find out by
                // diverging. Newton's steps at once.
                if !self.refactor(chord) {
                    return None;
                }
                own = true;
                at_once = true;
                on_matrix = 0;
                previous = f64::INFINITY;
            } else if far >= WOODBURY_AT_ONCE && matches!(closure, Closure::Core(_)) {
                // A few: the Woodbury correction of the links that moved most at once, rather
                // than after chord steps that contract too slowly.
                rounds += 1;
                woodbury_at_once = true;
                if !self.reselect(chord, closure, correction) {
                    if !self.refactor(chord) {
                        return None;
                    }
                    own = true;
                }
                on_matrix = 0;
                previous = f64::INFINITY;
            } else if stalled {
                // A chord that contracts slowly takes a Woodbury correction of the links that
                // moved most; one that diverges, or is still slow after it, takes Newton's steps.
                let corrected = !diverging && rounds < WOODBURY_ROUNDS && {
                    rounds += 1;
                    self.reselect(chord, closure, correction)
                };
                if !corrected {
                    if !self.refactor(chord) {
                        return None;
                    }
                    own = true;
                }
                on_matrix = 0;
                previous = f64::INFINITY;
            }
        }
    }

    /// The link pass after a closure's step: [`Solver::chord_pass`] without the scatter into
    /// the right-hand side (the caller gathers it, see [`Incidence`]), its sums kept in two
    /// halves (odd and even links) and the largest residual taken by a plain comparison, so that
    /// the chains of dependent operations of consecutive links overlap. Returns the relative
    /// flow change and the largest energy residual of the core links; a flow that is not a
    /// number makes the flow change one (the caller's test then fails).
    fn closure_pass(&mut self, pass: &LinkPass) -> (f64, f64) {
        let structure = &*self.structure;
        let n = structure.core.len();
        let (laws, delta, unknown_head, head, hot) =
            (&self.laws, &self.delta, &self.unknown_head, &self.head, &self.hot);
        let (cp, cc, cq, mode, ends, expansion) = (
            &self.cp[..n],
            &mut self.cc[..n],
            &mut self.cq[..n],
            &self.mode[..n],
            &pass.ends[..n],
            &pass.expansion[..n],
        );
        let end = |e: u32| {
            if e & FIXED_END != 0 {
                (0.0, head[(e & !FIXED_END) as usize])
            } else {
                (delta[e as usize], unknown_head[e as usize])
            }
        };
        // One link: its largest residual, Σ|ΔQ| and Σ|Q| into the accumulators named.
        macro_rules! link {
            ($i:expr, $r:ident, $dq:ident, $q:ident) => {{
                let i = $i;
                let m = mode[i];
                if m & MODE_MASK == MODE_LAW {
                    let [from, to] = ends[i];
                    let ((d_from, h_from), (d_to, h_to)) = (end(from), end(to));
                    let p = cp[i];
                    let q = cc[i] + p * (d_from - d_to);
                    let dh = h_from - h_to;
                    let y = match expansion[i].at(q) {
                        Some(y) => y,
                        None => law_at(laws, structure.core[i].link, m, &hot[i], q).0,
                    };
                    let r = (y - dh).abs();
                    if r > $r {
                        $r = r;
                    }
                    $dq += (q - cq[i]).abs();
                    $q += q.abs();
                    cq[i] = q;
                    cc[i] = q + p * (dh - y);
                }
            }};
        }
        let (mut r0, mut dq0, mut q0) = (0.0f64, 0.0, self.tree_flow_sum);
        let (mut r1, mut dq1, mut q1) = (0.0f64, 0.0, 0.0);
        for i in (0..n - n % 2).step_by(2) {
            link!(i, r0, dq0, q0);
            link!(i + 1, r1, dq1, q1);
        }
        if n % 2 == 1 {
            link!(n - 1, r0, dq0, q0);
        }
        ((dq0 + dq1) / (q0 + q1).max(self.demand_scale), r0.max(r1))
    }

    /// How many core links on their law carry a flow far from the base case's: reversed, or more
    /// than [`FAR_FLOW`] times it or less than its inverse (their Newton conductance then
    /// differs from the base case's by a factor of about two or more).
    fn far_links(&self, chord: &ChordBase) -> usize {
        let mut far = 0;
        for ((&mode, &q), &q0) in self.mode.iter().zip(&self.cq).zip(&chord.q0) {
            if mode & MODE_MASK == MODE_LAW {
                let (a, a0) = (q.abs(), q0.abs());
                far += usize::from(q * q0 < 0.0 || a > FAR_FLOW * a0 || a * FAR_FLOW < a0);
            }
        }
        far
    }

    /// Linearises every link on its law at the current point (Newton's conductances, the
    /// [`Taylor`](super::chord) expansion where it serves) and factors the matrix, the closed
    /// link left out; the right-hand side is filled to match. False when it does not factor.
    fn refactor(&mut self, chord: &ChordBase) -> bool {
        let structure = self.structure.clone();
        for (i, c) in structure.core.iter().enumerate() {
            let mode = self.mode[i];
            if mode & MODE_MASK != MODE_LAW {
                continue;
            }
            let q = self.cq[i];
            let (y, g) = chord.taylor[i].and_then(|t| t.both_at(q)).unwrap_or_else(|| self.core_law(i, q));
            let p = 1.0 / g.max(self.hot[i].min_slope);
            let dh = self.end_head(c.slots.from, c.from) - self.end_head(c.slots.to, c.to);
            self.cp[i] = p;
            self.cc[i] = q + p * (dh - y);
        }
        self.begin_assembly();
        for i in 0..structure.core.len() {
            self.scatter(i);
        }
        self.end_assembly();
        if self.factor.factor(&structure).is_err() {
            return false;
        }
        self.own_reciprocals();
        true
    }

    /// Chooses the links of the Woodbury correction afresh at the current point: the
    /// [`WOODBURY_LINKS`] whose Newton conductance `1/h'(Q)` differs most from the base case's,
    /// scored by the flow their linearisation misses over the last step (`Δp (δ_from − δ_to)`);
    /// their conductances and constants are changed with the right-hand side, so that the next
    /// step is consistent with the new matrix. False when the correction cannot be factored.
    fn reselect(&mut self, chord: &ChordBase, closure: &Closure, correction: &mut Correction) -> bool {
        let mut best = [(0.0f64, NONE, 0.0f64); WOODBURY_LINKS];
        let structure = &*self.structure;
        for (i, c) in structure.core.iter().enumerate() {
            let mode = self.mode[i];
            if mode & MODE_MASK != MODE_LAW {
                continue;
            }
            let q = self.cq[i];
            let g = chord.taylor[i].and_then(|t| t.slope_at(q)).unwrap_or_else(|| self.core_law(i, q).1);
            let d = 1.0 / g.max(self.hot[i].min_slope) - chord.cp[i];
            let ((d_from, _), (d_to, _)) = link_ends(c, &self.delta, &self.unknown_head, &self.head);
            let score = (d * (d_from - d_to)).abs();
            if score > best[WOODBURY_LINKS - 1].0 {
                let at = best.partition_point(|b| b.0 >= score);
                best.copy_within(at..WOODBURY_LINKS - 1, at + 1);
                best[at] = (score, i as u32, d);
            }
        }
        // The previous links back to the base case's conductance, the new ones to theirs.
        let closed = match *closure {
            Closure::Core(i) => i as u32,
            Closure::Tree(_) => NONE,
        };
        for at in 0..correction.links.len() {
            let i = correction.links[at];
            if i != closed {
                self.set_conductance(i as usize, chord.cp[i as usize]);
            }
        }
        correction.clear();
        if closed != NONE {
            correction.push(closed as usize, -chord.cp[closed as usize]);
        }
        for &(score, i, d) in &best {
            if i == NONE || score == 0.0 || d.abs() <= 1e-12 * chord.cp[i as usize] {
                continue;
            }
            self.set_conductance(i as usize, chord.cp[i as usize] + d);
            correction.push(i as usize, d);
        }
        correction.build(&self.structure, chord, &chord.mode)
    }

    /// Sets core link `i`'s conductance in a chord iteration, with its constant
    /// `c = Q + p (ΔH − h(Q))` and the right-hand side to match.
    fn set_conductance(&mut self, i: usize, p: f64) {
        let (q, old_p, old_c) = (self.cq[i], self.cp[i], self.cc[i]);
        let c = q + p * (old_c - q) / old_p;
        self.cp[i] = p;
        self.cc[i] = c;
        let (mode, slots) = (self.mode[i], self.structure.core[i].slots);
        if mode & FREE_FROM != 0 {
            self.rhs[slots.from as usize] -= c - old_c;
        }
        if mode & FREE_TO != 0 {
            self.rhs[slots.to as usize] += c - old_c;
        }
    }
}

/// Which links of a graph with `nodes` nodes and links `ends` are bridges among the links with
/// `open[k]` (Tarjan's algorithm, iterative: a link is a bridge when no path of other open links
/// joins its ends).
fn bridges(nodes: usize, ends: &[(u32, u32)], open: &[bool]) -> Vec<bool> {
    // Adjacency of the open links.
    let mut start = vec![0u32; nodes + 1];
    for (k, &(a, b)) in ends.iter().enumerate() {
        if open[k] && a != b {
            start[a as usize + 1] += 1;
            start[b as usize + 1] += 1;
        }
    }
    for i in 0..nodes {
        start[i + 1] += start[i];
    }
    let mut fill: Vec<u32> = start[..nodes].to_vec();
    let mut adjacent = vec![0u32; start[nodes] as usize];
    for (k, &(a, b)) in ends.iter().enumerate() {
        if open[k] && a != b {
            adjacent[fill[a as usize] as usize] = k as u32;
            fill[a as usize] += 1;
            adjacent[fill[b as usize] as usize] = k as u32;
            fill[b as usize] += 1;
        }
    }
    let mut bridge = vec![false; ends.len()];
    let mut order = vec![u32::MAX; nodes];
    let mut low = vec![0u32; nodes];
    // (node, the link it was reached by, next adjacency position)
    let mut stack: Vec<(u32, u32, u32)> = Vec::new();
    let mut counter = 0u32;
    for root in 0..nodes {
        if order[root] != u32::MAX {
            continue;
        }
        order[root] = counter;
        low[root] = counter;
        counter += 1;
        stack.push((root as u32, NONE, start[root]));
        while let Some(top) = stack.last_mut() {
            let (v, via, next) = *top;
            if next < start[v as usize + 1] {
                top.2 += 1;
                let k = adjacent[next as usize];
                if k == via {
                    continue;
                }
                let (a, b) = ends[k as usize];
                let w = if a == v { b } else { a };
                if order[w as usize] == u32::MAX {
                    order[w as usize] = counter;
                    low[w as usize] = counter;
                    counter += 1;
                    stack.push((w, k, start[w as usize]));
                } else {
                    low[v as usize] = low[v as usize].min(order[w as usize]);
                }
            } else {
                stack.pop();
                if let Some(&(parent, _, _)) = stack.last() {
                    low[parent as usize] = low[parent as usize].min(low[v as usize]);
                    if low[v as usize] > order[parent as usize] {
                        bridge[via as usize] = true;
                    }
                }
            }
        }
    }
    bridge
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::generate::{generate, NetworkSpec};

    /// The conditions of `m`, a solver with its base case solved, that solution, and the
    /// sweep's shared part made from it (the fast path must serve it).
    fn swept(m: &Model) -> (Conditions, Solver, Solution, SweepBase) {
        let conditions = Conditions::from_model(m);
        let mut base = Solver::new(m).unwrap();
        let solution = base.solve(m, &conditions, &SolveOptions::from_model(m)).unwrap();
        let sweep = base.sweep_base(m, &conditions, &solution).expect("the fast path serves this base case");
        (conditions, base, solution, sweep)
    }

    /// Every closure of a generated network (invented: see `crate::generate`) that the fast path
    /// serves equals a fresh solve of the closed model (heads to 1e-6 m, flows to 1e-9 m³/s,
    /// connectivity and link states exactly), with tolerances tight enough that every path is
    /// taken: dead-end tree pipes, core pipes on the base factor alone, with a Woodbury
    /// correction (some chosen right after the first step), and with Newton's steps (chosen at
    /// once after the first step, and with chord steps on the closure's own factor near the
    /// answer).
    #[test]
    fn each_closure_on_the_fast_path_equals_a_fresh_solve() {
        let mut m = generate(&NetworkSpec::new(400, 11)).unwrap();
        m.options.head_tolerance = 1e-9;
        m.options.flow_tolerance = 1e-12;
        let (conditions, base, solution, sweep) = swept(&m);
        let options = SolveOptions::from_model(&m);
        let mut solver = base.clone();
        solver.use_chord(Some(sweep.chord.clone()));
        let mut w = Worker::new(solver, solution.clone(), conditions.clone(), Outputs::ALL);
        let warm = SolveOptions { warm_start: true, ..options };
        let (mut fast, mut trees) = (0, 0);
        for k in 0..m.links().len() {
            if !w.close(&base, &sweep, k, &warm) {
                continue;
            }
            fast += 1;
            trees += usize::from(base.structure.core_position[k] == NONE);
            let mut closed = m.clone();
            closed.set_status(k, LinkStatus::Closed).unwrap();
            let want = crate::solve::solve(&closed).unwrap();
            let got = &w.solution;
            let id = &m.links()[k].id;
            for (i, (a, b)) in got.head.iter().zip(&want.head).enumerate() {
                assert!((a - b).abs() <= 1e-6 || (a.is_nan() && b.is_nan()), "{id} closed: head of {i}: {a} vs {b}");
            }
            for (i, (a, b)) in got.pressure.iter().zip(&want.pressure).enumerate() {
                assert!(
                    (a - b).abs() <= 1e-6 || (a.is_nan() && b.is_nan()),
                    "{id} closed: pressure of {i}: {a} vs {b}"
                );
            }
            for (j, (a, b)) in got.flow.iter().zip(&want.flow).enumerate() {
                assert!((a - b).abs() <= 1e-9, "{id} closed: flow of {j}: {a} vs {b}");
            }
            for (j, (a, b)) in got.velocity.iter().zip(&want.velocity).enumerate() {
                assert!((a - b).abs() <= 1e-7, "{id} closed: velocity of {j}: {a} vs {b}");
            }
            for (j, (a, b)) in got.headloss.iter().zip(&want.headloss).enumerate() {
                assert!(
                    (a - b).abs() <= 2e-6 || (a.is_nan() && b.is_nan()),
                    "{id} closed: head loss of {j}: {a} vs {b}"
                );
            }
            assert!((got.max_energy_residual - want.max_energy_residual).abs() <= 1e-6, "{id} closed: energy residual");
            assert!(got.warnings.is_empty(), "{id} closed: a closure's solution carries no warnings");
            assert_eq!(got.connected, want.connected, "{id} closed");
            assert_eq!(got.link_state, want.link_state, "{id} closed");
            assert!(got.max_mass_residual <= 1e-7 * 1e-3f64.max(want.demand.iter().map(|d| d.abs()).sum()));
            w.restore(&sweep);
            // Restored: the next closure starts from the base case's solution.
            assert_eq!(w.solution.connected, solution.connected);
            assert_eq!(w.solution.link_state, solution.link_state);
        }
        let n = m.links().len();
        assert!(fast * 10 >= n * 9, "{fast} of {n} closures on the fast path");
        assert!(trees > 20, "{trees} tree pipes");
        let p = w.paths;
        assert!(p[0] > 0 && p[1] + p[3] > 0 && p[2] + p[3] > 0, "paths taken: {p:?}");
        assert!(
            w.at_once > 0 && w.woodbury_at_once > 0 && w.own_chord > 0,
            "Newton at once {}, Woodbury at once {}, chord steps on own factors {}",
            w.at_once,
            w.woodbury_at_once,
            w.own_chord
        );
    }

    /// The first step's forward solve from `SweepBase::y0` and a path solve equals the forward
    /// solve of the closure's whole right-hand side, for every core and tree closure of a
    /// generated network (invented: see `crate::generate`), to round-off.
    #[test]
    fn the_first_forward_solve_from_the_base_case_equals_the_whole_one() {
        let m = generate(&NetworkSpec::new(400, 5)).unwrap();
        let (_, base, _, sweep) = swept(&m);
        let chord = &*sweep.chord;
        let structure = base.structure.clone();
        let mut s = base.clone();
        s.reset_from(&base, &sweep);
        s.cc.copy_from_slice(&chord.cc);
        let mut path = vec![0.0; structure.n];
        let mut correction = Correction::default();
        let (mut cores, mut trees) = (0, 0);
        for k in 0..m.links().len() {
            let mut want = vec![0.0; structure.n];
            let mut got = sweep.y0.clone();
            match (structure.core_position[k], sweep.tree_index[k]) {
                (NONE, NONE) => continue,
                (NONE, t) => {
                    let root = sweep.root_unknown[structure.trees[t as usize].parent as usize];
                    if root == NONE {
                        continue;
                    }
                    let cut = sweep.beyond[t as usize];
                    s.unknown_demand[root as usize] -= cut;
                    chord_rhs(&structure, &s.mode, &s.cc, &s.unknown_demand, &s.free, &mut want);
                    s.unknown_demand[root as usize] += cut;
                    forward_path(&structure, &chord.l_values, &chord.parent, &mut got, &mut path, root as usize, cut);
                    trees += 1;
                }
                (i, _) => {
                    let i = i as usize;
                    if chord.mode[i] & MODE_MASK != MODE_LAW {
                        continue;
                    }
                    s.mode[i] = MODE_CLOSED;
                    chord_rhs(&structure, &s.mode, &s.cc, &s.unknown_demand, &s.free, &mut want);
                    s.mode[i] = chord.mode[i];
                    correction.clear();
                    correction.push(i, -chord.cp[i]);
                    if !correction.build(&structure, chord, &chord.mode) {
                        continue;
                    }
                    correction.add_column(0, chord.cc[i], &mut got);
                    cores += 1;
                }
            }
            forward(&structure, &chord.l_values, &mut want, 0);
            // The right-hand side's entries are sums of link constants of the size of the
            // flows that cancel to round-off: their round-off is relative to the flows.
            let scale = chord.cc.iter().fold(0.0f64, |a, x| a.max(x.abs()));
            for (j, (a, b)) in got.iter().zip(&want).enumerate() {
                assert!((a - b).abs() <= 1e-12 * scale, "link {k}, column {j}: {a} vs {b}");
            }
            assert!(path.iter().all(|&x| x == 0.0), "link {k}: the scratch is zeros again");
        }
        assert!(cores > 100 && trees > 20, "{cores} core and {trees} tree closures");
    }

    /// A hub where seven pipes meet (more than [`INCIDENT`]) in an invented network: a reservoir
    /// feeding a hub junction whose six spokes end in a ring of junctions.
    fn hub_network() -> Model {
        use crate::model::{Link, LinkKind, Node, Pipe};
        let mut m = Model::default();
        m.add_node(Node::reservoir("R", 60.0)).unwrap();
        m.add_node(Node::junction("H", 12.0, 0.002)).unwrap();
        for r in 0..6 {
            m.add_node(Node::junction(format!("N{r}"), 10.0 + r as f64, 0.003)).unwrap();
        }
        let pipe = |id: String, from: usize, to: usize| Link {
            id: id.into(),
            from,
            to,
            status: LinkStatus::Open,
            kind: LinkKind::Pipe(Pipe {
                length: 300.0,
                diameter: 0.2,
                roughness: 110.0,
                minor_loss: 0.0,
                check_valve: false,
            }),
        };
        m.add_link(pipe("RH".into(), 0, 1)).unwrap();
        for r in 0..6 {
            m.add_link(pipe(format!("S{r}"), 1, 2 + r)).unwrap();
            m.add_link(pipe(format!("C{r}"), 2 + r, 2 + (r + 1) % 6)).unwrap();
        }
        m
    }

    /// The balances a closure gathers (see [`Incidence`]) equal those `chord_rhs` scatters from
    /// the same constants, with every core link closed in turn (its constant then leaves the
    /// balances), to round-off: on a generated network (invented: see `crate::generate`) and on
    /// a hub where more links meet than [`INCIDENT`] holds in place.
    #[test]
    fn the_gathered_balances_equal_the_scattered_ones() {
        let mut extras = 0;
        for m in [generate(&NetworkSpec::new(300, 4)).unwrap(), hub_network()] {
            let (_, base, _, sweep) = swept(&m);
            let chord = &*sweep.chord;
            let structure = base.structure.clone();
            extras += sweep.incidence.extra.len();
            let (n, core) = (structure.n, structure.core.len());
            // Constants of the size of the flows, of both signs, and outflows.
            let cc: Vec<f64> = (0..core).map(|i| 1e-3 * (((i * 7919) % 211) as f64 - 105.0)).collect();
            let demand: Vec<f64> = (0..n).map(|u| 1e-4 * ((u * 104_729) % 97) as f64).collect();
            let mut mode = chord.mode.clone();
            let (mut want, mut got) = (vec![0.0; n], vec![0.0; n]);
            for closed in (0..core).filter(|&i| chord.mode[i] & MODE_MASK == MODE_LAW) {
                mode[closed] = MODE_CLOSED;
                let mut value = cc.clone();
                value[closed] = 0.0;
                chord_rhs(&structure, &mode, &cc, &demand, &chord.free, &mut want);
                sweep.incidence.gather(&value, &demand, &chord.free, &mut got);
                mode[closed] = chord.mode[closed];
                for (u, (a, b)) in got.iter().zip(&want).enumerate() {
                    assert!((a - b).abs() <= 1e-15, "link {closed} closed, unknown {u}: {a} vs {b}");
                }
            }
        }
        assert!(extras > 0, "a junction with more links than the fixed places");
    }

    /// A sweep that reads pressures only gives every closure the heads, pressures, states,
    /// connectivity, demands and iterations of a sweep that reads everything, with flows,
    /// velocities and head differences empty (on the fast path and after the general solve); one
    /// that asks for velocities gets the flows too. On a generated network (invented: see
    /// `crate::generate`) with a pipe closed in the model, whose closure takes the general solve.
    #[test]
    fn a_sweep_reading_pressures_only_leaves_the_rest_empty() {
        let mut m = generate(&NetworkSpec::new(300, 6)).unwrap();
        let closed = (0..m.links().len()).find(|&k| k % 5 == 3).unwrap();
        m.set_status(closed, LinkStatus::Closed).unwrap();
        let conditions = Conditions::from_model(&m);
        let options = SolveOptions::from_model(&m);
        let links: Vec<usize> = (0..m.links().len()).collect();
        let sweep = |outputs: Outputs| {
            let mut solver = Solver::new(&m).unwrap();
            solver.solve_closures_reading(&m, &conditions, &options, &links, outputs, &mut |_| {}, &|_, r| r.cloned()).1
        };
        let all = sweep(Outputs::ALL);
        let none = Outputs { flows: false, velocities: false, head_differences: false };
        let pressures = sweep(none);
        let velocities = sweep(Outputs { velocities: true, ..none });
        // The same values to the last bit (NaN where a junction is cut off).
        let bits = |x: &[f64]| x.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
        let mut solved = 0;
        for (k, ((a, p), v)) in all.iter().zip(&pressures).zip(&velocities).enumerate() {
            let (Ok(a), Ok(p), Ok(v)) = (a, p, v) else {
                assert!(a.is_err() && p.is_err() && v.is_err(), "link {k}");
                continue;
            };
            solved += 1;
            assert_eq!(a.flow.len(), m.links().len(), "link {k}");
            assert!(p.flow.is_empty() && p.velocity.is_empty() && p.headloss.is_empty(), "link {k}");
            assert!(bits(&v.flow) == bits(&a.flow) && bits(&v.velocity) == bits(&a.velocity), "link {k}");
            assert!(v.headloss.is_empty(), "link {k}");
            for b in [p, v] {
                for (x, y) in [(&b.head, &a.head), (&b.pressure, &a.pressure), (&b.demand, &a.demand)] {
                    assert!(bits(x) == bits(y), "link {k}");
                }
                assert_eq!((&b.connected, &b.link_state), (&a.connected, &a.link_state), "link {k}");
                assert_eq!((b.iterations, b.max_energy_residual), (a.iterations, a.max_energy_residual), "link {k}");
            }
        }
        assert!(solved > 300, "{solved} closures solved");
    }

    /// The link pass's own arrays (see [`LinkPass`]) give every core link the ends and the
    /// expansion of the structure's record and the base case's: on a generated network
    /// (invented: see `crate::generate`) with a link to a fixed head, a fixed head at either end.
    #[test]
    fn the_link_pass_reads_each_links_ends_and_expansion() {
        let m = generate(&NetworkSpec::new(300, 9)).unwrap();
        let (_, base, _, sweep) = swept(&m);
        let structure = &*base.structure;
        let n = structure.n;
        let delta: Vec<f64> = (0..n).map(|u| u as f64 * 1e-3).collect();
        let unknown_head: Vec<f64> = (0..n).map(|u| 50.0 + u as f64 * 1e-2).collect();
        let mut fixed = 0;
        for (i, c) in structure.core.iter().enumerate() {
            let end = |e: u32| {
                if e & FIXED_END != 0 {
                    (0.0, base.head[(e & !FIXED_END) as usize])
                } else {
                    (delta[e as usize], unknown_head[e as usize])
                }
            };
            let [from, to] = sweep.pass.ends[i];
            assert_eq!((end(from), end(to)), link_ends(c, &delta, &unknown_head, &base.head), "core link {i}");
            fixed += usize::from((from | to) & FIXED_END != 0);
            match sweep.chord.taylor[i] {
                Some(t) => assert_eq!(sweep.pass.expansion[i], t, "core link {i}"),
                None => assert!(sweep.pass.expansion[i].at(sweep.chord.q0[i]).is_none(), "core link {i}"),
            }
        }
        assert!(fixed > 0, "a link to a fixed head");
    }

    /// Tarjan's bridges on small graphs worked by hand: a triangle with a tail, parallel links
    /// (never bridges) and a closed link (not a link of the graph).
    #[test]
    fn bridges_of_small_graphs() {
        // 0-1-2-0 triangle, 2-3 tail, 3-4 twice (parallel), 4-5 closed.
        let ends = [(0, 1), (1, 2), (2, 0), (2, 3), (3, 4), (4, 3), (4, 5)];
        let open = [true, true, true, true, true, true, false];
        let b = bridges(6, &ends, &open);
        assert_eq!(b, [false, false, false, true, false, false, false]);
        // A path: every link a bridge.
        let ends = [(0, 1), (1, 2), (2, 3)];
        assert_eq!(bridges(4, &ends, &[true; 3]), [true, true, true]);
    }
}
