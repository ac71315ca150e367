//! Chord steps on a base case's factor: how a batch of scenarios near one base case (the
//! each-pipe-closed sweep above all) avoids most numeric factorizations.
//!
//! # Why
//! A scenario of a batch starts from the base case's solution. At that point every link's
//! linearisation is the base case's, so the first Newton step of a scenario that changes only
//! demands uses the base case's matrix `A₀`, and that of a scenario closing one core link `k`
//! (conductance `p₀ₖ`, matrix columns `u = e_from − e_to`, fixed ends left out) uses
//! `A₀ − p₀ₖ u uᵀ`, a rank-one change. Both are solved with the base case's Cholesky factor:
//! the second by the Sherman–Morrison formula,
//!
//! ```text
//! (A₀ − p u uᵀ)⁻¹ r = A₀⁻¹ r + w · p (uᵀ A₀⁻¹ r) / (1 − p uᵀ w),   w = A₀⁻¹ u,
//! ```
//!
//! with `w` solved once per scenario. The steps after the first keep that matrix (the *chord*
//! method: the conductances `p` of every link stay the base case's, in the matrix and in the
//! constants `c = Q + p (ΔH − h(Q))` alike), so each costs one pass over the links and two
//! triangular solves, and no factorization. The fixed point of such steps is the exact solution
//! (they stop moving only where every energy equation and every mass balance holds), but they
//! converge linearly, at a rate set by how far the conductances moved from the base case's.
//!
//! # When, and how an answer leaves
//! Chord steps are taken only while the device states, the junctions cut off and every link's
//! mode are the base case's but for the one closed link (see `Solver::chord_eligible`), with
//! no relation of pressure and no active pressure valve. The first is an exact Newton step and
//! passes the solver's convergence test as one. Each later one must shrink the largest head
//! correction to at most [`CHORD_CONTRACTION`] of the one before; then the distance to the
//! fixed point is at most the last change, and the step passes the same test with
//! [`CHORD_MARGIN`] of each tolerance (the flow change, the head change or the energy residual,
//! every law evaluated exactly at the new point). A chord that contracts more slowly, or runs
//! [`CHORD_STEPS`] steps, gives way to Newton steps, each with its own factorization, until the
//! solver's own test passes. Either way the answer is the one a fresh solve converges to,
//! within the tolerances (`tests/conditions.rs` compares them closure by closure).

use super::assemble::{FREE_FROM, FREE_TO, MODE_CLOSED, MODE_LAW, MODE_MASK};
use super::structure::NONE;
use super::Solver;
use std::sync::Arc;

/// Most chord steps in one scenario before Newton steps take over.
pub(super) const CHORD_STEPS: u32 = 30;

/// Largest ratio of a chord step's largest head correction to the previous step's: a chord
/// that contracts more slowly than this gives way to Newton steps.
pub(super) const CHORD_CONTRACTION: f64 = 0.5;

/// Share of the tolerances within which a chord step's changes must be for its point to be an
/// answer: with a contraction of at most [`CHORD_CONTRACTION`], the distance to the fixed point
/// is at most the last change.
pub(super) const CHORD_MARGIN: f64 = 0.5;

/// The base case's factor and the linearisation it was made from, shared by the workers of a
/// batch.
#[derive(Debug)]
pub(super) struct ChordBase {
    /// Values of the Cholesky factor of the base case's matrix.
    l_values: Vec<f64>,
    /// Conductance of every core link in that matrix.
    cp: Vec<f64>,
    /// Mode byte of every core link (see `assemble.rs`).
    mode: Vec<u8>,
    /// Which unknowns were free.
    free: Vec<bool>,
}

/// The rank-one change of one scenario: the core link closed, its base conductance, and
/// `1 − p uᵀ w` (with `w = A₀⁻¹ u` in the solver's `chord_w`).
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) struct RankOne {
    core: usize,
    p: f64,
    denominator: f64,
}

/// Whether this iteration takes chord steps, and with which rank-one change.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) enum Chord {
    /// Newton steps.
    Off,
    /// Chord steps on the base factor, with the closed link's change if there is one.
    On(Option<RankOne>),
}

impl Solver {
    /// The base case's factor for chord steps, made from this solver's last solution (a
    /// relinearisation at it and one factorization); `None` when this solver has no solution,
    /// or one whose iteration chord steps do not serve (relations of pressure, active pressure
    /// valves), or when the matrix does not factor.
    pub(super) fn chord_base(&self) -> Option<Arc<ChordBase>> {
        if !self.has_previous || !self.relations.is_empty() || !self.pinned.is_empty() {
            return None;
        }
        let mut s = self.clone();
        s.linearise(false);
        s.begin_assembly();
        for i in 0..s.structure.core.len() {
            s.scatter(i);
        }
        s.end_assembly();
        s.factor.factor(&s.structure).ok()?;
        Some(Arc::new(ChordBase {
            l_values: s.factor.l_values().to_vec(),
            cp: s.cp.clone(),
            mode: s.mode.clone(),
            free: s.free.clone(),
        }))
    }

    /// Whether the iteration, its device states just applied and its links linearised at the
    /// starting point, may take chord steps on the base factor: every link's mode, conductance
    /// and free ends the base case's, but for at most one core link that the base case had on
    /// its law and that is now closed (closed, not cut off: its ends' unknowns are as free as
    /// they were). For such a link, `w = A₀⁻¹ u` is solved into `chord_w`.
    pub(super) fn chord_eligible(&mut self) -> Chord {
        let Some(base) = self.chord.clone() else { return Chord::Off };
        if !self.relations.is_empty() || !self.pinned.is_empty() || base.free != self.free {
            return Chord::Off;
        }
        let mut closed = None;
        for i in 0..self.mode.len() {
            let (now, was) = (self.mode[i], base.mode[i]);
            if now == was && (now & MODE_MASK != MODE_LAW || self.cp[i] == base.cp[i]) {
                continue;
            }
            if closed.is_some() || now & MODE_MASK != MODE_CLOSED || was & MODE_MASK != MODE_LAW {
                return Chord::Off;
            }
            closed = Some(i);
        }
        let Some(i) = closed else { return Chord::On(None) };
        let (mode, p) = (base.mode[i], base.cp[i]);
        let slots = self.structure.core[i].slots;
        self.chord_w.clear();
        self.chord_w.resize(self.structure.n, 0.0);
        if mode & FREE_FROM != 0 {
            self.chord_w[slots.from as usize] = 1.0;
        }
        if mode & FREE_TO != 0 {
            self.chord_w[slots.to as usize] = -1.0;
        }
        self.factor.solve_with(&self.structure, &base.l_values, &mut self.chord_w);
        let denominator = 1.0 - p * self.u_dot(mode, slots.from, slots.to, &self.chord_w);
        // A link whose closure leaves the matrix singular would cut junctions off, which the
        // comparison of free unknowns above has excluded; the guard keeps round-off out.
        if !(denominator > 1e-9) {
            return Chord::Off;
        }
        Chord::On(Some(RankOne { core: i, p, denominator }))
    }

    /// `uᵀ x` for the columns of a core link with `mode`'s free ends.
    fn u_dot(&self, mode: u8, from: u32, to: u32, x: &[f64]) -> f64 {
        let mut d = 0.0;
        if mode & FREE_FROM != 0 && from != NONE {
            d += x[from as usize];
        }
        if mode & FREE_TO != 0 && to != NONE {
            d -= x[to as usize];
        }
        d
    }

    /// Solves the chord step's system in place in `rhs`: the base factor, then the rank-one
    /// change of the closed link (see the [module docs](self)).
    pub(super) fn chord_solve(&mut self, rank_one: Option<RankOne>) {
        let Some(base) = self.chord.clone() else { return };
        self.factor.solve_with(&self.structure, &base.l_values, &mut self.rhs);
        if let Some(RankOne { core, p, denominator }) = rank_one {
            let slots = self.structure.core[core].slots;
            let mode = base.mode[core];
            let scale = p * self.u_dot(mode, slots.from, slots.to, &self.rhs) / denominator;
            for (x, w) in self.rhs.iter_mut().zip(&self.chord_w) {
                *x += scale * w;
            }
        }
    }

    /// Uses `base` (from [`Solver::chord_base`] of a solver of the same structure) for the chord
    /// steps of this solver's next solves, or none.
    pub(super) fn use_chord(&mut self, base: Option<Arc<ChordBase>>) {
        self.chord = base;
    }
}
