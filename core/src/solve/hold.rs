//! A head held at one junction by a draw found at another: the bordered Newton step behind the
//! fire-flow analysis.
//!
//! The question "how much can be drawn at junction `a` before the head at junction `t` falls to
//! `T`?" is usually answered by a search on the draw, each trial a whole solve. Here the draw `Q`
//! is one more unknown of the Newton iteration and `H_t = T` one more equation: the system for
//! the head corrections is bordered,
//!
//! ```text
//! [ A    e_a ] [ δ  ]   [ r               ]
//! [ e_tᵀ  0  ] [ ΔQ ] = [ T − H_t (+ …)   ]
//! ```
//!
//! and solved with the factor the step already has: `δ₀ = A⁻¹ r` (the plain step) and
//! `w = A⁻¹ e_a` (one more pair of triangular solves); then
//! `ΔQ = (H_t + δ₀_t − T) / (w_t + L′)` and `δ = δ₀ − ΔQ w`. The answer is the draw and the
//! network state of one solve (about as many iterations as a plain warm-started solve), where a
//! search needs several. `A` is a weighted graph Laplacian with the fixed heads removed, an
//! M-matrix, so `A⁻¹ ≥ 0` and `w_t ≥ 0`; `w_t + L′ = 0` means the held head does not follow the
//! draw at all (a check valve or a regulating valve between them), which is an error, never an
//! answer.
//!
//! Dead-end trees stay outside the matrix: a draw at a tree junction reaches the core at its
//! tree's root (the unknown `e_a` is the root's) and adds `Q` to the flow of every tree pipe on
//! its way there; a held tree junction's head is its root's minus the losses on its path, and
//! `L′` is the sum of the slopes `dh/dQ` of the tree pipes its path shares with the draw's (zero
//! when they are in different trees).
//!
//! Device states and relations of pressure work as in a plain solve: the border only changes the
//! step's corrections and the draw; the damping of the iteration damps the draw's step as well.

use super::assemble::{law_at, link_ends, scatter_link, FREE_FROM, FREE_TO, MODE_FIXED_FLOW, MODE_LAW, MODE_MASK};
use super::chord::{backward, forward};
use super::iterate::MASS_GATE;
use super::status::StatusTracker;
use super::structure::NONE;
use super::{Solution, SolveOptions, Solver};
use crate::error::{Element, ModelError, SolveError};
use crate::model::{Model, NodeKind};
use crate::physics::friction::HW_FLOW_EXPONENT;
use crate::solve::Conditions;

/// What to hold: the head at junction `node` at `head` (m), by a draw at junction `draw_at`
/// (m³/s, on top of its outflows under the conditions) that the solve finds.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct HeldHead {
    /// The junction where the draw is taken.
    pub draw_at: usize,
    /// The junction whose head is held.
    pub node: usize,
    /// The head held there, m.
    pub head: f64,
    /// The draw to start from, m³/s (zero, or a guess: the draw found at a neighbouring
    /// junction). It does not change the answer.
    pub start: f64,
}

/// The border of the current solve, and its scratch (sized once per solver).
#[derive(Clone, Debug)]
pub(super) struct Hold {
    pub held: HeldHead,
    /// The extra draw found so far, m³/s (already in the solver's `demand[draw_at]`).
    pub draw: f64,
    /// |ΔQ| of the last step, m³/s.
    pub change: f64,
    /// [`LOOSE_BOUND`] times the largest head change of the last step when a light solve ended
    /// on its draw's tolerance (a bound on how far its heads may be from the held answer's),
    /// else zero, m.
    loose: f64,
    /// The unknown where the draw enters the matrix (the draw junction's, or its tree root's).
    draw_unknown: u32,
    /// The held junction's tree root (itself in the core) and its unknown (`NONE` for a fixed
    /// head).
    target_root: u32,
    target_unknown: u32,
    /// The tree pipes from the held junction to its root: (tree link position, shared with the
    /// draw's path).
    target_path: Vec<(u32, bool)>,
    /// `A⁻¹ e_a` (a light solve: `L⁻¹ e_a`).
    w: Vec<f64>,
    /// A light solve's `L⁻¹ e_t` (the held junction's unknown).
    z: Vec<f64>,
    /// The columns of the elimination tree's paths up from the draw's unknown and from the
    /// held one (where `w` and `z` of a light solve may differ from zero), ascending.
    path_u: Vec<u32>,
    path_v: Vec<u32>,
    /// The conductances of the core links in the solver's current factor (light solves), and
    /// whether that factor is one of a light solve that succeeded.
    cp_factored: Vec<f64>,
    factored: bool,
    /// For each node, the position in `Structure::trees` of the tree pipe to its parent
    /// (`NONE` for core nodes); made once per solver.
    parent: Vec<u32>,
    /// The last head loss a light solve evaluated on each core link's law, beside the flow it
    /// was evaluated at (`[q, h(q)]`, the flow's bits compared before reuse): the last pass of a
    /// solve evaluates every law at the flows the next solve starts from, so its first step
    /// ([`Solver::light_chord_start`]) need not evaluate them again.
    core_loss: Vec<[f64; 2]>,
    /// The same for the tree pipes (`[Q, h(Q)]`): their flows are the fixed outflows beyond
    /// them, the same at every answer but on the draw's path, so the tree heads of an answer
    /// evaluate only the laws of the pipes whose flow changed.
    tree_loss: Vec<[f64; 2]>,
}

impl Solver {
    /// Checks `held` and makes it the border of the next solve (scratch kept from the last).
    fn set_hold(&mut self, model: &Model, held: HeldHead) -> Result<(), SolveError> {
        for (i, key) in [(held.draw_at, "draw_at"), (held.node, "node")] {
            let node = model.nodes().get(i).ok_or_else(|| ModelError::at(None, Some(key), format!("no node {i}")))?;
            if !matches!(node.kind, NodeKind::Junction { .. }) {
                return Err(ModelError::at(
                    Some(Element::Node(node.id.to_string())),
                    Some(key),
                    format!("must be a junction; this node is a {}", node.kind.label()),
                )
                .into());
            }
        }
        if !held.head.is_finite() {
            let id = model.nodes()[held.node].id.to_string();
            return Err(
                ModelError::at(Some(Element::Node(id)), Some("head"), format!("is not finite: {}", held.head)).into()
            );
        }
        if !held.start.is_finite() {
            let id = model.nodes()[held.draw_at].id.to_string();
            return Err(ModelError::at(
                Some(Element::Node(id)),
                Some("draw"),
                format!("is not finite: {}", held.start),
            )
            .into());
        }
        // The scratch of the last held solve stays (its factor's conductances, the laws' last
        // values); the border is new.
        if let Some(h) = self.hold.as_mut() {
            h.held = held;
            h.draw = 0.0;
            h.change = 0.0;
            h.loose = 0.0;
            h.draw_unknown = NONE;
            h.target_root = NONE;
            h.target_unknown = NONE;
            h.target_path.clear();
        } else {
            self.hold = Some(Box::new(Hold {
                held,
                draw: 0.0,
                change: 0.0,
                loose: 0.0,
                draw_unknown: NONE,
                target_root: NONE,
                target_unknown: NONE,
                target_path: Vec::new(),
                w: Vec::new(),
                z: Vec::new(),
                path_u: Vec::new(),
                path_v: Vec::new(),
                parent: Vec::new(),
                cp_factored: Vec::new(),
                factored: false,
                core_loss: Vec::new(),
                tree_loss: Vec::new(),
            }));
        }
        Ok(())
    }

    /// Solves `model` under `conditions` with the head at `held.node` held at `held.head` by a
    /// draw at `held.draw_at` that the solve finds (see the [module docs](self)). Returns the
    /// solution (whose `demand` at `draw_at` includes the draw) and the draw, m³/s.
    ///
    /// Warm starts (`options.warm_start`) start from this solver's last solution, with the draw
    /// at zero. Errors: the two nodes must be junctions the network reaches; a held head that
    /// does not follow the draw is a [`SolveError::Numerical`] naming both.
    pub fn solve_holding(
        &mut self,
        model: &Model,
        conditions: &Conditions,
        options: &SolveOptions,
        held: HeldHead,
    ) -> Result<(Solution, f64), SolveError> {
        self.set_hold(model, held)?;
        let result = self.solve(model, conditions, options);
        let draw = self.hold.as_ref().map_or(0.0, |h| h.draw);
        // The scratch stays for the next call; the border does not.
        if let Some(h) = self.hold.as_mut() {
            h.held = HeldHead { draw_at: usize::MAX, ..h.held };
        }
        let mut solution = result?;
        solution.demand[held.draw_at] += draw;
        Ok((solution, draw))
    }

    /// The draw's last step in the last [`Solver::solve_holding`], m³/s: how far the draw found
    /// may still be from the one that holds the head exactly (infinite before any).
    pub fn held_draw_step(&self) -> f64 {
        self.hold.as_ref().map_or(f64::INFINITY, |h| h.change)
    }

    /// How far the heads of the last [`Solver::solve_holding_light`] may be from those of its
    /// held answer, m: zero when it ended on the solver's own test, else the largest head change
    /// of its last step times [`LOOSE_BOUND`] (it ended on its draw's tolerance with the heads'
    /// change contracting by at least [`LOOSE_CONTRACTION`] in that step).
    pub fn held_head_error(&self) -> f64 {
        self.hold.as_ref().map_or(f64::INFINITY, |h| h.loose)
    }

    /// Whether a border is active (a [`Solver::solve_holding`] in progress).
    pub(super) fn holding(&self) -> bool {
        self.hold.as_ref().is_some_and(|h| h.held.draw_at != usize::MAX)
    }

    /// Drops a border's draw (a fresh start of the iteration) and finds the paths of its two
    /// junctions in the current structure.
    pub(super) fn reset_hold(&mut self) {
        if !self.holding() {
            return;
        }
        let structure = &*self.structure;
        let Some(hold) = self.hold.as_mut() else { return };
        self.demand[hold.held.draw_at] += hold.held.start - hold.draw;
        hold.draw = hold.held.start;
        hold.change = 0.0;
        hold.loose = 0.0;
        let n_nodes = structure.unknown_of_node.len();
        if hold.parent.len() != n_nodes {
            hold.parent.clear();
            hold.parent.resize(n_nodes, NONE);
            for (position, t) in structure.trees.iter().enumerate() {
                hold.parent[t.child as usize] = position as u32;
            }
        }
        hold.w.resize(structure.n, 0.0);
        hold.z.resize(structure.n, 0.0);
        let root = |mut i: usize| {
            while hold.parent[i] != NONE {
                i = structure.trees[hold.parent[i] as usize].parent as usize;
            }
            i
        };
        let draw_root = root(hold.held.draw_at);
        hold.draw_unknown = structure.unknown_of_node[draw_root];
        let target_root = root(hold.held.node);
        hold.target_root = target_root as u32;
        hold.target_unknown = structure.unknown_of_node[target_root];
        // The draw's path, then the held junction's, each pipe marked when both share it.
        hold.target_path.clear();
        let mut i = hold.held.node;
        while hold.parent[i] != NONE {
            let position = hold.parent[i];
            hold.target_path.push((position, false));
            i = structure.trees[position as usize].parent as usize;
        }
        let mut i = hold.held.draw_at;
        while hold.parent[i] != NONE {
            let position = hold.parent[i];
            if let Some(entry) = hold.target_path.iter_mut().find(|(p, _)| *p == position) {
                entry.1 = true;
            }
            i = structure.trees[position as usize].parent as usize;
        }
    }

    /// The bordered correction of one Newton step: with the plain corrections `δ₀` in `delta`
    /// (undamped), finds the draw's step `ΔQ` and subtracts `ΔQ w` from `delta`. Returns `ΔQ`
    /// (zero without a border).
    pub(super) fn hold_step(&mut self, model: &Model, iteration: u32) -> Result<f64, SolveError> {
        if !self.holding() {
            return Ok(0.0);
        }
        let Some(mut hold) = self.hold.take() else { return Ok(0.0) };
        let result = self.hold_step_with(model, iteration, &mut hold);
        self.hold = Some(hold);
        result
    }

    /// An error naming the draw's junction or the held one if no fixed head reaches it.
    fn held_ends_reached(&self, model: &Model, held: &HeldHead) -> Result<(), SolveError> {
        for i in [held.draw_at, held.node] {
            if !self.connected[i] {
                return Err(SolveError::Model(ModelError::at(
                    Some(Element::Node(model.nodes()[i].id.to_string())),
                    None,
                    "no reservoir or tank reaches this junction: no head can be held by a draw here".to_owned(),
                )));
            }
        }
        Ok(())
    }

    fn hold_step_with(&mut self, model: &Model, iteration: u32, hold: &mut Hold) -> Result<f64, SolveError> {
        self.held_ends_reached(model, &hold.held)?;
        let structure = &*self.structure;
        let (u, v) = (hold.draw_unknown, hold.target_unknown);
        let ends_free = |x: u32| x != NONE && self.free[x as usize];
        // w = A⁻¹ e_u: the heads' response to one unit more outflow at u (zero where u is not an
        // unknown the matrix solves for: a draw from a tree on a fixed head).
        hold.w.iter_mut().for_each(|x| *x = 0.0);
        if ends_free(u) {
            hold.w[u as usize] = 1.0;
            self.factor.solve(structure, &mut hold.w);
        }
        let v_free = v != NONE && self.free[v as usize];
        let (delta0, w_v) = if v_free { (self.delta[v as usize], hold.w[v as usize]) } else { (0.0, 0.0) };
        let dq = self.border(model, iteration, hold, delta0, w_v)?;
        if dq != 0.0 {
            for (d, (w, &free)) in self.delta.iter_mut().zip(hold.w.iter().zip(&self.free)) {
                if free {
                    *d -= dq * w;
                }
            }
        }
        Ok(dq)
    }

    /// The border's equation: the draw's step `ΔQ` that brings the held junction's head to its
    /// target, given the plain correction `δ₀_v` of the held junction's unknown and the response
    /// `w_v = (A⁻¹ e_u)_v` of its head to the draw. The held junction's head is its root's less
    /// its path's losses; `L′` adds the slopes of the tree pipes its path shares with the draw's.
    fn border(&self, model: &Model, iteration: u32, hold: &Hold, delta0: f64, w_v: f64) -> Result<f64, SolveError> {
        let structure = &*self.structure;
        let v = hold.target_unknown;
        let root = hold.target_root as usize;
        let mut head = if v == NONE { self.head[root] } else { self.unknown_head[v as usize] };
        let mut slope = 0.0;
        for &(position, shared) in &hold.target_path {
            let t = structure.trees[position as usize];
            let (loss, g) = self.laws[t.link as usize].evaluate_exact(self.flow[t.link as usize]);
            head += if t.downstream { -loss } else { loss };
            if shared {
                slope += g;
            }
        }
        let response = w_v + slope;
        if !(response > 0.0 && response.is_finite()) {
            let nodes = model.nodes();
            return Err(SolveError::Numerical {
                iteration,
                detail: format!(
                    "the head held at '{}' does not follow the draw at '{}' (nothing joins them through links that \
                     carry flow)",
                    nodes[hold.held.node].id, nodes[hold.held.draw_at].id
                ),
            });
        }
        Ok((head + delta0 - hold.held.head) / response)
    }

    /// Takes the draw's step (already damped): the draw junction's outflow, and the tree flows
    /// and the outflow each unknown carries with it.
    pub(super) fn hold_apply(&mut self, dq: f64) {
        if !self.holding() {
            return;
        }
        let Some(hold) = self.hold.as_mut() else { return };
        hold.draw += dq;
        hold.change = dq.abs();
        self.demand[hold.held.draw_at] += dq;
        if dq != 0.0 {
            self.tree_flows();
        }
    }

    /// The draw's last step relative to the draw (or the flow scale of the solve), for the
    /// convergence test.
    pub(super) fn hold_change(&self) -> f64 {
        match self.hold.as_ref() {
            Some(h) if self.holding() => h.change / h.draw.abs().max(self.demand_scale),
            _ => 0.0,
        }
    }
}

/// The draw's step `ΔQ` of a light solve from the draw `q0`, given the step `linear` of the
/// bordered Newton step: where the draw is under way, the held head taken to fall as
/// `H(Q) = H₀ − k Q^n` (n the Hazen–Williams exponent; exact on a main that carries the draw
/// alone), with `k` from the step's own slope at `q0`. Newton's step on the draw falls short
/// by about half from a draw far above the answer (the loss grows as `Q^1.852`) and overshoots
/// from one far below; this one lands on the answer of such a main at once. The two agree to
/// second order in `ΔQ`, so the iteration converges as fast as Newton's near the answer, and
/// to the same point (the step is zero where the held head is met). A linear step that would
/// take the draw below `(1 − 1/n) q0`, which the power cannot reach, stays linear.
fn along_power(q0: f64, linear: f64) -> f64 {
    let x = HW_FLOW_EXPONENT * linear / q0;
    if q0 > 0.0 && x > -1.0 && x.is_finite() {
        q0 * (x.ln_1p() / HW_FLOW_EXPONENT).exp_m1()
    } else {
        linear
    }
}

/// Solves `L y = e_j` in place, `x` holding `e_j` (zeros elsewhere): [`forward`] from column
/// `j` on, but walking only the columns that can differ from zero, the path up the elimination
/// tree from `j` (each column's parent is its first row below the diagonal), which is written
/// into `path` in ascending order. The same operations as [`forward`] on those columns, so the
/// same values.
fn forward_up(structure: &super::Structure, l: &[f64], x: &mut [f64], j: usize, path: &mut Vec<u32>) {
    let (col_ptr, row_idx) = (structure.symbolic.col_ptr(), structure.symbolic.row_idx());
    let mut k = j;
    loop {
        path.push(k as u32);
        let (start, end) = (col_ptr[k] as usize, col_ptr[k + 1] as usize);
        if x[k] != 0.0 {
            let v = x[k] / l[start];
            x[k] = v;
            for p in start + 1..end {
                x[row_idx[p] as usize] -= l[p] * v;
            }
        }
        if end <= start + 1 {
            return;
        }
        k = row_idx[start + 1] as usize;
    }
}

/// Largest head change (m) of a light solve's step after which the next steps are chord steps
/// on its factor: conductances move by well under a percent in such a step.
pub const CHORD_HEAD: f64 = 0.05;
/// Largest ratio of a chord step's head change to the step before's for the chord to go on.
pub const CHORD_CONTRACTION: f64 = 0.5;
/// Share of the tolerances within which a chord step's changes must be to end the iteration.
pub const CHORD_MARGIN: f64 = 0.5;
/// Most chord steps in a row.
const CHORD_STEPS: u32 = 20;
/// Largest head change (m) of the step that ends a light solve on its draw's tolerance.
pub const LOOSE_HEAD: f64 = 1e-2;
/// Largest ratio of that step's head change to the step before's: the iteration must be
/// contracting, but linear contraction is enough. Newton's method converges only linearly, by
/// about `1 − 1/n` (0.46 for the Hazen–Williams exponent `n`), where a pipe's flow tends to
/// zero; a light solve that asked for a fifth went on for up to thirty steps of millimetres,
/// Newton and chord steps in turn, after its draw had settled.
pub const LOOSE_CONTRACTION: f64 = 0.5;
/// The bound on the heads of a light solve ended on its draw's tolerance, in multiples of its
/// last head change ([`Solver::held_head_error`]). A geometric contraction would make it one;
/// the steps are not that regular (a pipe near zero flow, Newton and chord steps in turn), and
/// on generated networks the heads were found up to 3.2 changes from the held answer's, with
/// contractions of a fifth and of a half alike. Ten leaves a margin; a larger bound only sends
/// more system limits on to the solver's own tolerances.
pub const LOOSE_BOUND: f64 = 10.0;

/// The base case of light held solves ([`Solver::solve_holding_light`]): its solution's flows
/// and heads, where a light solve may start, its fixed outflows and which junctions it reaches
/// (no draw changes them: the network it serves has no device states and no relations of
/// pressure). Made once per analysis by [`Solver::light_base`], shared by every worker.
#[derive(Clone, Debug)]
pub struct LightBase {
    demand: Vec<f64>,
    connected: Vec<bool>,
    flow: Vec<f64>,
    head: Vec<f64>,
    cq: Vec<f64>,
    unknown_head: Vec<f64>,
}

impl Solver {
    /// The base case of light held solves, from this solver's last solution (`base`, solved
    /// under `conditions`): `None` when light solves do not serve this network. They serve
    /// networks whose links have no state to decide (no check valves, no running pumps, no
    /// automatic control valves) and whose junctions draw fixed outflows only (no
    /// `[pressure_demand]`, outlets or leakage): there a draw changes neither which links carry
    /// flow nor which junctions the sources reach, and the Newton iteration needs no device
    /// logic, no damping and no full [`Solution`]. Elsewhere [`Solver::solve_holding`] answers.
    pub fn light_base(&self, model: &Model, conditions: &Conditions, base: &Solution) -> Option<LightBase> {
        if !self.has_previous
            || !self.relations.is_empty()
            || !self.pinned.is_empty()
            || self.holding()
            || base.connected.len() != model.nodes().len()
            || StatusTracker::new(model, conditions).has_devices()
        {
            return None;
        }
        Some(LightBase {
            demand: self.demand.clone(),
            connected: base.connected.clone(),
            flow: self.flow.clone(),
            head: self.head.clone(),
            cq: self.cq.clone(),
            unknown_head: self.unknown_head.clone(),
        })
    }

    /// A held solve as [`Solver::solve_holding`] (the same bordered Newton steps to the same
    /// tolerances), on a network that `base` ([`Solver::light_base`]) serves, without the
    /// general solve's per-solve work: the device states, the connectivity and the fixed
    /// outflows are the base case's, and the answer is the draw (m³/s) and the pressure head at
    /// every node (written into `pressure`; NaN where no source reaches), with no [`Solution`].
    /// Each step's border takes two sparse forward solves (`L⁻¹ e_a`, `L⁻¹ e_t`, along the
    /// elimination tree from those unknowns) between the halves of the plain step's solve,
    /// instead of a second full solve.
    ///
    /// The solve starts from the base case's point (`from_base`) or from this solver's last
    /// point (the answer at a neighbouring hydrant: flows of the size of its own), with the draw
    /// at `held.start`. On an error the solver is put back at the base case's point.
    ///
    /// Steps near the answer reuse the last factor (chord steps, as `chord.rs` takes them: the
    /// conductances of that factor in the matrix and in the constants alike, so that their fixed
    /// point is the exact solution): a step whose heads moved by at most [`CHORD_HEAD`] is
    /// followed by chord steps while each shrinks the head change to at most
    /// [`CHORD_CONTRACTION`] of the step before; one that does not gives way to Newton steps. A
    /// chord step may end the iteration with its changes within [`CHORD_MARGIN`] of the
    /// tolerances (the distance to the fixed point is then at most its last change). A solve
    /// that continues from the last light solve's answer starts with chord steps on its factor.
    /// The draw's step of each is taken along the Hazen–Williams power from the draw so far (see
    /// `along_power`): the same fixed point, fewer steps from a neighbour's draw far from it.
    ///
    /// With `draw_tolerance` above zero the iteration also ends once the draw's step is within it,
    /// the heads' change within [`LOOSE_HEAD`] and at most [`LOOSE_CONTRACTION`] of the step
    /// before: the draw is then within about its last step of the held answer, and the heads
    /// within [`LOOSE_BOUND`] times their last change.
    #[allow(clippy::too_many_arguments)]
    pub fn solve_holding_light(
        &mut self,
        model: &Model,
        base: &LightBase,
        options: &SolveOptions,
        held: HeldHead,
        from_base: bool,
        draw_tolerance: f64,
        pressure: &mut Vec<f64>,
    ) -> Result<f64, SolveError> {
        self.set_hold(model, held)?;
        if base.demand.len() != self.demand.len() || base.cq.len() != self.cq.len() {
            return Err(SolveError::Model(ModelError::new("the light base case is of another network")));
        }
        self.demand.copy_from_slice(&base.demand);
        self.connected.clear();
        self.connected.extend_from_slice(&base.connected);
        if from_base {
            self.restore(base);
        }
        self.keep_losses(from_base);
        self.reset_hold();
        // Zeros in the border's columns (a general held solve leaves them full); each light step
        // leaves zeros behind.
        if let Some(h) = self.hold.as_mut() {
            h.w.fill(0.0);
            h.z.fill(0.0);
        }
        self.demand_scale = self.demand.iter().map(|d| d.abs()).sum::<f64>().max(1e-3);
        self.tree_flows();
        let chord =
            !from_base && self.hold.as_ref().is_some_and(|h| h.factored && h.cp_factored.len() == self.cp.len());
        if chord {
            self.light_chord_start();
        } else {
            self.linearise(false);
            self.begin_assembly();
            for i in 0..self.structure.core.len() {
                self.scatter(i);
            }
            self.end_assembly();
        }
        let result =
            self.light_iterate(model, options, chord, draw_tolerance).and_then(|()| self.light_answer(model, pressure));
        if let Some(h) = self.hold.as_mut() {
            h.factored &= result.is_ok();
        }
        let draw = self.hold.as_ref().map_or(0.0, |h| h.draw);
        if let Some(h) = self.hold.as_mut() {
            h.held = HeldHead { draw_at: usize::MAX, ..h.held };
        }
        match result {
            Ok(()) => Ok(draw),
            Err(e) => {
                self.restore(base);
                Err(e)
            }
        }
    }

    /// Puts this solver at the base case's point.
    fn restore(&mut self, base: &LightBase) {
        self.flow.copy_from_slice(&base.flow);
        self.head.copy_from_slice(&base.head);
        self.cq.copy_from_slice(&base.cq);
        self.unknown_head.copy_from_slice(&base.unknown_head);
    }

    /// The bordered steps of a light held solve (Newton steps, chord steps near the answer),
    /// from the assembled first step to the solver's convergence test (as `iterate`'s, the
    /// draw's change included; see [`Solver::solve_holding_light`]).
    fn light_iterate(
        &mut self,
        model: &Model,
        options: &SolveOptions,
        mut chord: bool,
        draw_tolerance: f64,
    ) -> Result<(), SolveError> {
        let structure = self.structure.clone();
        let mut iterations = 0u32;
        let mut chord_steps = 0u32;
        let mut last_step = f64::INFINITY;
        loop {
            if iterations >= options.max_iterations {
                return Err(SolveError::Numerical {
                    iteration: iterations,
                    detail: "the held solve did not converge".to_owned(),
                });
            }
            iterations += 1;
            if chord {
                chord_steps += 1;
            } else {
                chord_steps = 0;
                self.factor.factor(&structure).map_err(|_| SolveError::Numerical {
                    iteration: iterations,
                    detail: "a pivot is not positive".to_owned(),
                })?;
                if let Some(h) = self.hold.as_mut() {
                    h.cp_factored.clear();
                    h.cp_factored.extend_from_slice(&self.cp);
                    h.factored = true;
                }
            }
            forward(&structure, self.factor.l_values(), &mut self.rhs, 0);
            let dq = self.light_border(model, iterations)?;
            backward(&structure, self.factor.l_values(), &mut self.rhs);
            std::mem::swap(&mut self.rhs, &mut self.delta);
            let mut step = 0.0f64;
            let mut finite = true;
            for (u, &delta) in self.delta.iter().enumerate() {
                if self.free[u] {
                    finite &= delta.is_finite();
                    step = step.max(delta.abs());
                    self.unknown_head[u] += delta;
                }
            }
            let head_change = if iterations == 1 { f64::INFINITY } else { step };
            self.light_hold_apply(dq);
            // A chord step that contracted too little (or a NaN) stalls the chord; it may not end
            // the iteration, and Newton steps follow.
            let contracted = step <= CHORD_CONTRACTION * last_step;
            let share = match (chord, contracted) {
                (false, _) => 1.0,
                (true, true) => CHORD_MARGIN,
                (true, false) => 0.0,
            };
            chord = (!chord || contracted) && step <= CHORD_HEAD && chord_steps < CHORD_STEPS;
            let (change, energy_residual) = if chord { self.light_chord_update() } else { self.light_newton_update() };
            let flow_change = change.max(self.hold_change());
            if !finite || !flow_change.is_finite() {
                return Err(SolveError::Numerical {
                    iteration: iterations,
                    detail: "heads or flows became NaN".into(),
                });
            }
            let (head_tolerance, flow_tolerance) = (share * options.head_tolerance, share * options.flow_tolerance);
            // As `iterate`'s test (its floor clause included).
            let heads_settled = head_change <= head_tolerance
                || (flow_change <= flow_tolerance
                    && iterations > 1
                    && energy_residual <= head_tolerance
                    && head_change < 1.0);
            if heads_settled && flow_change <= flow_tolerance {
                return Ok(());
            }
            let draw_step = self.hold.as_ref().map_or(f64::INFINITY, |h| h.change);
            if draw_tolerance > 0.0
                && iterations > 1
                && draw_step <= draw_tolerance
                && step <= LOOSE_HEAD
                && step <= LOOSE_CONTRACTION * last_step
            {
                if let Some(h) = self.hold.as_mut() {
                    h.loose = LOOSE_BOUND * step;
                }
                return Ok(());
            }
            last_step = step;
        }
    }

    /// [`Solver::hold_apply`] in a light solve, whose tree flows are those of the draw so far
    /// (`tree_flows` at its start and after every step): a draw in the core changes no tree flow
    /// and no subtree, only its own unknown's outflow, which is set as `tree_flows` sets it; a
    /// draw on a tree makes them again.
    fn light_hold_apply(&mut self, dq: f64) {
        let Some(hold) = self.hold.as_mut() else { return };
        let node = hold.held.draw_at;
        let u = self.structure.unknown_of_node[node];
        if self.structure.in_tree[node] || u == NONE {
            self.hold_apply(dq);
            return;
        }
        hold.draw += dq;
        hold.change = dq.abs();
        self.demand[node] += dq;
        self.unknown_demand[u as usize] = self.demand[node] + self.subtree[node];
    }

    /// The first step of a light solve that continues from the last one's answer, on its factor:
    /// the conductances of that factor, the constants `c = Q + p (ΔH − h(Q))` from them at the
    /// current point, and the right-hand side.
    fn light_chord_start(&mut self) {
        if let Some(h) = self.hold.as_ref() {
            self.cp.copy_from_slice(&h.cp_factored);
        }
        for (r, &d) in self.rhs.iter_mut().zip(&self.unknown_demand) {
            *r = -d;
        }
        let losses = self.hold.as_ref().map_or(&[][..], |h| &h.core_loss[..]);
        let structure = &*self.structure;
        for (i, c) in structure.core.iter().enumerate() {
            let mode = self.mode[i];
            match mode & MODE_MASK {
                MODE_LAW => {
                    let ((_, h_from), (_, h_to)) = link_ends(c, &self.delta, &self.unknown_head, &self.head);
                    let q = self.cq[i];
                    let y = match losses.get(i) {
                        Some(&[at, y]) if at.to_bits() == q.to_bits() => y,
                        _ => self.core_law(i, q).0,
                    };
                    self.cc[i] = q + self.cp[i] * (h_from - h_to - y);
                }
                MODE_FIXED_FLOW => self.cc[i] = self.cq[i],
                _ => continue,
            }
            if mode & FREE_FROM != 0 {
                self.rhs[c.slots.from as usize] -= self.cc[i];
            }
            if mode & FREE_TO != 0 {
                self.rhs[c.slots.to as usize] += self.cc[i];
            }
        }
        for (r, &free) in self.rhs.iter_mut().zip(&self.free) {
            if !free {
                *r = 0.0;
            }
        }
    }

    /// The pass after a step that prepares a chord step (as `update_links`, but every link keeps
    /// the conductance of the factor, and only the right-hand side is filled). Returns the
    /// relative flow change and the largest energy residual.
    fn light_chord_update(&mut self) -> (f64, f64) {
        let (mut sum_dq, mut sum_q, mut residual) = (0.0, self.tree_flow_sum, 0.0f64);
        for (r, &d) in self.rhs.iter_mut().zip(&self.unknown_demand) {
            *r = -d;
        }
        let structure = self.structure.clone();
        let mut losses = self.hold.as_mut().map(|h| std::mem::take(&mut h.core_loss)).unwrap_or_default();
        losses.resize(structure.core.len(), [f64::NAN; 2]);
        for (i, c) in structure.core.iter().enumerate() {
            let mode = self.mode[i];
            match mode & MODE_MASK {
                MODE_LAW => {
                    let ((d_from, h_from), (d_to, h_to)) = link_ends(c, &self.delta, &self.unknown_head, &self.head);
                    let p = self.cp[i];
                    let q = self.cc[i] + p * (d_from - d_to);
                    let dh = h_from - h_to;
                    let y = self.core_law(i, q).0;
                    losses[i] = [q, y];
                    residual = residual.max((y - dh).abs());
                    sum_dq += (q - self.cq[i]).abs();
                    sum_q += q.abs();
                    self.cq[i] = q;
                    self.cc[i] = q + p * (dh - y);
                }
                MODE_FIXED_FLOW => sum_q += self.cq[i].abs(),
                _ => continue,
            }
            if mode & FREE_FROM != 0 {
                self.rhs[c.slots.from as usize] -= self.cc[i];
            }
            if mode & FREE_TO != 0 {
                self.rhs[c.slots.to as usize] += self.cc[i];
            }
        }
        for (r, &free) in self.rhs.iter_mut().zip(&self.free) {
            if !free {
                *r = 0.0;
            }
        }
        if let Some(h) = self.hold.as_mut() {
            h.core_loss = losses;
        }
        (sum_dq / sum_q.max(self.demand_scale), residual)
    }

    /// Keeps the laws' last values for this light solve, or drops them when it starts from
    /// the base case (after anything but a light solve the laws may be others).
    fn keep_losses(&mut self, from_base: bool) {
        let (n_core, n_trees) = (self.structure.core.len(), self.structure.trees.len());
        if let Some(h) = self.hold.as_mut() {
            if from_base {
                h.core_loss.clear();
                h.tree_loss.clear();
            }
            h.core_loss.resize(n_core, [f64::NAN; 2]);
            h.tree_loss.resize(n_trees, [f64::NAN; 2]);
        }
    }

    /// The pass after a light Newton step: `update_links` for a network that light solves
    /// serve (no relations, no pinned valves, no damping, Newton's slopes), in the same
    /// operations, the matrix and right-hand side assembled; each law's value is also kept for
    /// the next solve's first step. Returns the relative flow change and the largest energy
    /// residual.
    fn light_newton_update(&mut self) -> (f64, f64) {
        self.begin_assembly();
        let mut losses = self.hold.as_mut().map(|h| std::mem::take(&mut h.core_loss)).unwrap_or_default();
        let structure = &*self.structure;
        losses.resize(structure.core.len(), [f64::NAN; 2]);
        let (mut sum_dq, mut sum_q, mut residual) = (0.0, self.tree_flow_sum + 0.0, 0.0f64);
        let (laws, delta, unknown_head, head) = (&self.laws, &self.delta, &self.unknown_head, &self.head);
        let (values, rhs) = (&mut self.factor.values, &mut self.rhs);
        let states = self.hot.iter().zip(&self.mode).zip(self.cq.iter_mut().zip(&mut self.cp).zip(&mut self.cc));
        for ((c, ((hot, &mode), ((cq, cp), cc))), loss) in structure.core.iter().zip(states).zip(losses.iter_mut()) {
            match mode & MODE_MASK {
                MODE_LAW => {
                    let ((d_from, h_from), (d_to, h_to)) = link_ends(c, delta, unknown_head, head);
                    let q = *cc + *cp * (d_from - d_to);
                    let dh = h_from - h_to;
                    let (y, g) = law_at(laws, c.link, mode, hot, q);
                    let p = 1.0 / g.max(hot.min_slope);
                    *loss = [q, y];
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
            scatter_link(values, rhs, c, mode, *cp, *cc);
        }
        if let Some(h) = self.hold.as_mut() {
            h.core_loss = losses;
        }
        self.end_assembly();
        (sum_dq / sum_q.max(self.demand_scale), residual)
    }

    /// `tree_heads` in the same operations, a tree pipe's law evaluated only where its flow is
    /// not the one of its last evaluation (the draw's path, in the analysis).
    fn light_tree_heads(&mut self) {
        let mut losses = self.hold.as_mut().map(|h| std::mem::take(&mut h.tree_loss)).unwrap_or_default();
        losses.resize(self.structure.trees.len(), [f64::NAN; 2]);
        for (t, loss) in self.structure.trees.iter().zip(losses.iter_mut()).rev() {
            let (k, child, parent) = (t.link as usize, t.child as usize, t.parent as usize);
            self.head[child] = if self.connected[child] {
                let q = self.flow[k];
                if loss[0].to_bits() != q.to_bits() {
                    *loss = [q, self.laws[k].evaluate_exact(q).0];
                }
                if t.downstream {
                    self.head[parent] - loss[1]
                } else {
                    self.head[parent] + loss[1]
                }
            } else {
                f64::NAN
            };
        }
        if let Some(h) = self.hold.as_mut() {
            h.tree_loss = losses;
        }
    }

    /// A light step's border, between the halves of the plain step's solve: with `y = L⁻¹ r` in
    /// `rhs`, `z_a = L⁻¹ e_a` and `z_t = L⁻¹ e_t`, the plain correction at the held unknown is
    /// `z_tᵀ y` and its response to the draw `z_tᵀ z_a`; the draw's step `ΔQ` then leaves
    /// `y − ΔQ z_a` for the backward half (`δ = L⁻ᵀ (y − ΔQ z_a) = A⁻¹ (r − ΔQ e_a)`).
    fn light_border(&mut self, model: &Model, iteration: u32) -> Result<f64, SolveError> {
        let Some(mut hold) = self.hold.take() else { return Ok(0.0) };
        let result = self.light_border_with(model, iteration, &mut hold);
        self.hold = Some(hold);
        result
    }

    fn light_border_with(&mut self, model: &Model, iteration: u32, hold: &mut Hold) -> Result<f64, SolveError> {
        self.held_ends_reached(model, &hold.held)?;
        let structure = &*self.structure;
        let l = self.factor.l_values();
        let (u, v) = (hold.draw_unknown, hold.target_unknown);
        let u_free = u != NONE && self.free[u as usize];
        let v_free = v != NONE && self.free[v as usize];
        // The columns of `L⁻¹ e_u` and `L⁻¹ e_v` that are not zero lie on the elimination tree's
        // paths up from u and from v: the solves, the dot products and the update of `rhs` walk
        // those paths only (in ascending order, as the full loops would meet them), and leave
        // zeros behind in `w` and `z`.
        let (mut path_u, mut path_v) = (std::mem::take(&mut hold.path_u), std::mem::take(&mut hold.path_v));
        path_u.clear();
        path_v.clear();
        let dot = |path: &[u32], a: &[f64], b: &[f64]| path.iter().map(|&k| a[k as usize] * b[k as usize]).sum::<f64>();
        if u_free {
            hold.w[u as usize] = 1.0;
            forward_up(structure, l, &mut hold.w, u as usize, &mut path_u);
        }
        let (delta0, w_v) = if !v_free {
            (0.0, 0.0)
        } else if v == u {
            (dot(&path_u, &hold.w, &self.rhs), dot(&path_u, &hold.w, &hold.w))
        } else {
            hold.z[v as usize] = 1.0;
            forward_up(structure, l, &mut hold.z, v as usize, &mut path_v);
            (dot(&path_v, &hold.z, &self.rhs), if u_free { dot(&path_v, &hold.z, &hold.w) } else { 0.0 })
        };
        let border = self.border(model, iteration, hold, delta0, w_v);
        let dq = match border {
            Ok(linear) => along_power(hold.draw, linear),
            Err(_) => 0.0,
        };
        if dq != 0.0 && u_free {
            for &k in &path_u {
                self.rhs[k as usize] -= dq * hold.w[k as usize];
            }
        }
        for &k in &path_u {
            hold.w[k as usize] = 0.0;
        }
        for &k in &path_v {
            hold.z[k as usize] = 0.0;
        }
        (hold.path_u, hold.path_v) = (path_u, path_v);
        border?;
        Ok(dq)
    }

    /// The end of a converged light solve: flows and heads of every link and node, the pressure
    /// heads into `pressure`, and the solver's last gates (every value finite, the mass balance
    /// to round-off).
    fn light_answer(&mut self, model: &Model, pressure: &mut Vec<f64>) -> Result<(), SolveError> {
        self.sync_flows();
        self.light_tree_heads();
        let nodes = model.nodes();
        pressure.clear();
        pressure.extend(nodes.iter().zip(&self.head).zip(&self.connected).map(|((n, h), &c)| {
            if c {
                h - n.elevation
            } else {
                f64::NAN
            }
        }));
        if let Some(i) = (0..nodes.len()).find(|&i| self.connected[i] && !pressure[i].is_finite()) {
            return Err(SolveError::NonFinite {
                element: Element::Node(nodes[i].id.to_string()),
                quantity: "head",
                value: self.head[i],
            });
        }
        let balance = &mut self.subtree;
        for (b, (&d, &c)) in balance.iter_mut().zip(self.demand.iter().zip(&self.connected)) {
            *b = if c { -d } else { 0.0 };
        }
        for (&(from, to), &q) in self.structure.ends.iter().zip(&self.flow) {
            balance[to as usize] += q;
            balance[from as usize] -= q;
        }
        let worst = nodes
            .iter()
            .zip(balance.iter())
            .filter(|(n, _)| n.fixed_head().is_none())
            .map(|(_, b)| b.abs())
            .fold(0.0, f64::max);
        if worst.is_nan() || worst > MASS_GATE * self.demand_scale {
            return Err(SolveError::Numerical {
                iteration: 0,
                detail: format!("the held solve's mass balance is off by {worst} m3/s"),
            });
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{HydraulicOptions, Link, LinkKind, LinkStatus, Node, Pipe};
    use crate::units::UnitSystem;

    fn pipe(id: &str, from: usize, to: usize, length: f64, diameter: f64, roughness: f64, check_valve: bool) -> Link {
        Link {
            id: id.into(),
            from,
            to,
            status: LinkStatus::Open,
            kind: LinkKind::Pipe(Pipe { length, diameter, roughness, minor_loss: 0.0, check_valve }),
        }
    }

    /// Hazen–Williams resistance r in h = r Q^1.852 (SI) from its velocity form
    /// V = 0.849 C R^0.63 S^0.54 with R = D/4 (any hydraulics handbook).
    fn resistance(length: f64, d: f64, c: f64) -> f64 {
        let area = std::f64::consts::PI * d * d / 4.0;
        let k = 0.849 * c * area * (d / 4.0).powf(0.63);
        length / k.powf(1.0 / 0.54)
    }

    /// Reservoir R (70 m) – A – B – C in a line (all dead-end tree), and a loop A – D – E – A
    /// (core), no demands.
    fn network(check_valve: bool) -> Model {
        let mut m = Model::new(UnitSystem::default(), HydraulicOptions { head_tolerance: 1e-8, ..Default::default() });
        m.add_node(Node::reservoir("R", 70.0)).unwrap();
        for (id, z) in [("A", 10.0), ("B", 14.0), ("C", 12.0), ("D", 11.0), ("E", 9.0)] {
            m.add_node(Node::junction(id, z, 0.0)).unwrap();
        }
        m.add_link(pipe("RA", 0, 1, 600.0, 0.2, 120.0, false)).unwrap();
        m.add_link(pipe("AB", 1, 2, 500.0, 0.15, 110.0, false)).unwrap();
        m.add_link(pipe("BC", 2, 3, 300.0, 0.1, 100.0, check_valve)).unwrap();
        m.add_link(pipe("AD", 1, 4, 400.0, 0.15, 120.0, false)).unwrap();
        m.add_link(pipe("DE", 4, 5, 400.0, 0.15, 120.0, false)).unwrap();
        m.add_link(pipe("EA", 5, 1, 400.0, 0.15, 120.0, false)).unwrap();
        m
    }

    fn hold(m: &Model, draw_at: &str, node: &str, head: f64) -> Result<(Solution, f64), SolveError> {
        let mut solver = Solver::new(m).unwrap();
        let options = SolveOptions::from_model(m);
        let held =
            HeldHead { draw_at: m.node_index(draw_at).unwrap(), node: m.node_index(node).unwrap(), head, start: 0.0 };
        solver.solve_holding(m, &Conditions::from_model(m), &options, held)
    }

    #[test]
    fn a_draw_on_a_dead_end_line_holds_heads_by_the_closed_form() {
        let m = network(false);
        let (r1, r2) = (resistance(600.0, 0.2, 120.0), resistance(500.0, 0.15, 110.0));
        // C's head held at 40 m by a draw at C: 30 m lost over RA, AB and BC.
        let r3 = resistance(300.0, 0.1, 100.0);
        let (s, q) = hold(&m, "C", "C", 40.0).unwrap();
        let want = (30.0 / (r1 + r2 + r3)).powf(0.54);
        assert!((q - want).abs() < 1e-9 * want, "{q} vs {want}");
        assert!((s.head[3] - 40.0).abs() < 1e-7);
        // B's head held at 50 m by the same draw at C (a shared path): 20 m over RA and AB.
        let (_, q) = hold(&m, "C", "B", 50.0).unwrap();
        let want = (20.0 / (r1 + r2)).powf(0.54);
        assert!((q - want).abs() < 1e-9 * want, "{q} vs {want}");
        // A draw in the core loop (at E) holding B on the branch: only RA carries it.
        let (s, q) = hold(&m, "E", "B", 50.0).unwrap();
        let want = (20.0 / r1).powf(0.54);
        assert!((q - want).abs() < 1e-9 * want, "{q} vs {want}");
        assert_eq!(s.demand[5], q);
    }

    #[test]
    fn a_held_head_that_does_not_follow_the_draw_is_an_error_naming_both() {
        // X hangs off a reservoir of its own: a draw at B does not reach its head.
        let mut m = network(false);
        let r2 = m.add_node(Node::reservoir("R2", 60.0)).unwrap();
        let x = m.add_node(Node::junction("X", 5.0, 0.0)).unwrap();
        m.add_link(pipe("R2X", r2, x, 100.0, 0.1, 100.0, false)).unwrap();
        let err = hold(&m, "B", "X", 40.0).unwrap_err().to_string();
        assert!(err.contains("'X'") && err.contains("'B'") && err.contains("does not follow"), "{err}");
        // A check valve that lets water towards the draw (BC) is no obstacle: C is peeled no
        // more (devices stay in the core), and its draw is found as before.
        let m = network(true);
        let (_, q) = hold(&m, "C", "C", 40.0).unwrap();
        assert!(q > 0.0);
        let err = hold(&m, "B", "R", 40.0).unwrap_err().to_string();
        assert!(err.contains("must be a junction"), "{err}");
    }

    /// On a main that carries the draw alone, `H(Q) = H₀ − k Q^n`: from any draw the step along
    /// the power lands on the held head at once, where Newton's step (`linear`) falls short from
    /// above and overshoots from below; near the answer the two agree.
    #[test]
    fn the_step_along_the_power_lands_on_a_single_mains_answer() {
        let n = HW_FLOW_EXPONENT;
        let (h0, k, target): (f64, f64, f64) = (70.0, 900.0, 40.0);
        let answer = ((h0 - target) / k).powf(1.0 / n);
        for q0 in [0.2 * answer, 0.7 * answer, 1.5 * answer, 4.0 * answer] {
            let (head, slope) = (h0 - k * q0.powf(n), n * k * q0.powf(n - 1.0));
            let linear = (head - target) / slope;
            let step = along_power(q0, linear);
            assert!((q0 + step - answer).abs() < 1e-12 * answer, "{q0}: {} vs {answer}", q0 + step);
            assert!((q0 + linear - answer).abs() > 0.01 * answer, "{q0}");
        }
        let q0 = answer * (1.0 + 1e-6);
        let linear = (h0 - k * q0.powf(n) - target) / (n * k * q0.powf(n - 1.0));
        assert!((along_power(q0, linear) - linear).abs() < 1e-5 * linear.abs());
        // No draw yet, or a linear step below what the power reaches: the linear step.
        assert_eq!(along_power(0.0, 0.3), 0.3);
        assert_eq!(along_power(1.0, -0.6), -0.6);
        assert_eq!(along_power(1.0, 0.0), 0.0);
    }

    #[test]
    fn light_held_solves_serve_only_networks_without_device_states_or_relations() {
        let base = |m: &Model| {
            let mut solver = Solver::new(m).unwrap();
            let c = Conditions::from_model(m);
            let s = solver.solve(m, &c, &SolveOptions::from_model(m)).unwrap();
            solver.light_base(m, &c, &s)
        };
        assert!(base(&network(false)).is_some());
        assert!(base(&network(true)).is_none());
    }

    /// A generated network, its options, a solver at its solution and the light base case there.
    fn generated_light(junctions: usize, seed: u64) -> (Model, SolveOptions, Solver, LightBase) {
        let m = crate::generate::generate(&crate::generate::NetworkSpec::new(junctions, seed)).unwrap();
        let conditions = Conditions::from_model(&m);
        let options = SolveOptions::from_model(&m);
        let mut solver = Solver::new(&m).unwrap();
        let solved = solver.solve(&m, &conditions, &options).unwrap();
        let base = solver.light_base(&m, &conditions, &solved).expect("no devices, no relations");
        (m, options, solver, base)
    }

    /// A light held solve that ends on its draw's tolerance is within its stated bounds of the
    /// one that goes on to the solver's own tolerances from the same start: the draw within
    /// about its last step (here a tenth of a fire flow's 0.1 L/s), every pressure within
    /// `held_head_error`. Hydrants in the order of the network, each from the last one's answer
    /// (the analysis's starts, where steps near a pipe of almost no flow contract only
    /// linearly).
    #[test]
    fn loose_light_held_solves_are_within_their_bounds_of_the_full_ones() {
        let (m, options, mut solver, base) = generated_light(600, 7);
        let junctions: Vec<usize> =
            (0..m.nodes().len()).filter(|&i| matches!(m.nodes()[i].kind, NodeKind::Junction { .. })).collect();
        let draw_tolerance = 1e-5;
        let (mut pressure, mut full_pressure, mut from_base, mut start) = (Vec::new(), Vec::new(), true, 0.0);
        let (mut loose_ends, mut compared) = (0, 0);
        for &h in junctions.iter().step_by(3) {
            let head = m.nodes()[h].elevation + 14.0;
            let held = HeldHead { draw_at: h, node: h, head, start };
            let mut full = solver.clone();
            let Ok(q) = solver.solve_holding_light(&m, &base, &options, held, from_base, draw_tolerance, &mut pressure)
            else {
                from_base = true;
                start = 0.0;
                continue;
            };
            let want = full.solve_holding_light(&m, &base, &options, held, from_base, 0.0, &mut full_pressure);
            let want = want.unwrap();
            let error = solver.held_head_error();
            loose_ends += usize::from(error > 0.0);
            assert!((q - want).abs() <= 2.0 * draw_tolerance, "{h}: {q} vs {want}");
            for (i, (a, b)) in pressure.iter().zip(&full_pressure).enumerate() {
                if a.is_finite() {
                    assert!((a - b).abs() <= error + 1e-6, "{h} at {i}: {a} vs {b} (bound {error})");
                }
            }
            compared += 1;
            (from_base, start) = (false, q);
        }
        assert!(compared * 10 >= junctions.len() / 3 * 9, "{compared}");
        assert!(loose_ends * 2 >= compared, "{loose_ends} of {compared} ended on the draw's tolerance");
    }

    /// The path solve gives `forward`'s values to the bit, and its path holds every column
    /// that is not zero, in ascending order.
    #[test]
    fn the_path_solve_is_the_forward_solve() {
        let (_, _, solver, _) = generated_light(600, 7);
        let (structure, l) = (&*solver.structure, solver.factor.l_values());
        let n = structure.n;
        let (mut path, mut compared) = (Vec::new(), 0);
        for j in (0..n).step_by(7) {
            let mut want = vec![0.0; n];
            want[j] = 1.0;
            forward(structure, l, &mut want, j);
            let mut got = vec![0.0; n];
            got[j] = 1.0;
            path.clear();
            forward_up(structure, l, &mut got, j, &mut path);
            assert!(want.iter().zip(&got).all(|(a, b)| a.to_bits() == b.to_bits()), "column {j}");
            assert!(path.windows(2).all(|p| p[0] < p[1]) && path[0] as usize == j, "column {j}: {path:?}");
            let nonzero = (0..n).filter(|&k| got[k] != 0.0);
            assert!(nonzero.into_iter().all(|k| path.contains(&(k as u32))), "column {j}");
            compared += 1;
        }
        assert!(compared > 20 && n > 140, "{compared} of {n}");
    }

    /// Light held solves give the general held solve's draw and pressures, from the base case
    /// and from the last hydrant's answer, holding the hydrant's own head and another's.
    #[test]
    fn light_held_solves_equal_the_general_ones() {
        let (m, options, solver, base) = generated_light(400, 11);
        let conditions = Conditions::from_model(&m);
        let junctions: Vec<usize> = (0..m.nodes().len())
            .filter(|&i| matches!(m.nodes()[i].kind, NodeKind::Junction { .. }))
            .step_by(9)
            .collect();
        let in_tree = junctions.iter().filter(|&&h| solver.structure.in_tree[h]).count();
        assert!(in_tree > 3 && in_tree + 3 < junctions.len());
        let (mut light, mut pressure, mut from_base, mut answered) = (solver.clone(), Vec::new(), true, 0);
        for (k, &h) in junctions.iter().enumerate() {
            let t = if k % 2 == 0 { h } else { junctions[(k + 3) % junctions.len()] };
            let head = m.nodes()[t].elevation + 14.0;
            let held = HeldHead { draw_at: h, node: t, head, start: 0.0 };
            let want = solver.clone().solve_holding(&m, &conditions, &options, held);
            let got = light.solve_holding_light(&m, &base, &options, held, from_base, 0.0, &mut pressure);
            match (want, got) {
                (Ok((s, q)), Ok(g)) => {
                    assert!((q - g).abs() <= 1e-7 * q.abs().max(1e-2), "{h} {t}: {q} vs {g}");
                    for (a, b) in s.pressure.iter().zip(&pressure) {
                        assert!((a - b).abs() <= 1e-5 * a.abs().max(1.0), "{h} {t}: {a} vs {b}");
                    }
                    from_base = k % 3 == 0;
                    answered += 1;
                }
                (Err(_), Err(_)) => from_base = true,
                (a, b) => panic!("{h} {t}: {a:?} vs {b:?}"),
            }
        }
        assert!(answered * 10 >= junctions.len() * 9, "{answered} of {}", junctions.len());
    }
}
