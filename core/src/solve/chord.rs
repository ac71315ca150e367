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
//! mode are the base case's but for the one closed link (see `Solver::chord_start`), with
//! no relation of pressure, no active pressure valve and no held head. The first is an exact
//! Newton step and passes the solver's convergence test as one. Each later one must shrink the largest head
//! correction to at most [`CHORD_CONTRACTION`] of the one before; then the distance to the
//! fixed point is at most the last change, and the step passes the same test with
//! [`CHORD_MARGIN`] of each tolerance (the flow change, the head change or the energy residual,
//! every law evaluated exactly at the new point). A chord that contracts more slowly, or runs
//! [`CHORD_STEPS`] steps, gives way to Newton steps, each with its own factorization, until the
//! solver's own test passes. Either way the answer is the one a fresh solve converges to,
//! within the tolerances (`tests/conditions.rs` compares them closure by closure).

use super::assemble::{
    law_at, link_ends, FREE_FROM, FREE_TO, LAW_GENERAL, MODE_CLOSED, MODE_FIXED_FLOW, MODE_LAW, MODE_MASK,
};
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
    pub(super) l_values: Vec<f64>,
    /// Reciprocals of its diagonal (see [`forward_by_reciprocals`]).
    pub(super) recip: Vec<f64>,
    /// Conductance of every core link in that matrix.
    pub(super) cp: Vec<f64>,
    /// Mode byte of every core link (see `assemble.rs`).
    pub(super) mode: Vec<u8>,
    /// Which unknowns were free.
    pub(super) free: Vec<bool>,
    /// Flow of every core link at the base case's point.
    pub(super) q0: Vec<f64>,
    /// Head of every unknown at that point.
    pub(super) head0: Vec<f64>,
    /// Constant `c` of every core link there.
    pub(super) cc: Vec<f64>,
    /// Per core link, the expansion of its law around the base flow (Hazen–Williams pipes on
    /// their law with a flow).
    pub(super) taylor: Vec<Option<Taylor>>,
    /// The factor's pattern row by row, and its off-diagonal values in that order (see
    /// [`forward_by_rows`]).
    pub(super) rows: RowPattern,
    pub(super) row_values: Vec<f64>,
    /// Parent of every column in the factor's elimination tree (`NONE` for a root): the columns
    /// `L⁻¹ e_j` touches are `j`'s ancestors.
    pub(super) parent: Vec<u32>,
}

/// The rank-one change of one scenario: the closed link's base conductance `p`, and
/// `1 − p zᵀz` (with `z = L⁻¹ u` in the solver's `chord_w`).
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) struct RankOne {
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
        let taylor = (0..s.structure.core.len())
            .map(|i| {
                let mode = s.mode[i];
                if mode & MODE_MASK != MODE_LAW || mode & LAW_GENERAL != 0 {
                    return None;
                }
                Taylor::new(s.hot[i].r, s.hot[i].minor, s.cq[i])
            })
            .collect();
        let (col_ptr, row_idx) = (s.structure.symbolic.col_ptr(), s.structure.symbolic.row_idx());
        let parent = (0..s.structure.n)
            .map(|j| {
                // The smallest row below the diagonal (the rows are stored in order; taking the
                // least does not depend on it).
                let (start, end) = (col_ptr[j] as usize, col_ptr[j + 1] as usize);
                row_idx[start + 1..end].iter().copied().min().unwrap_or(NONE)
            })
            .collect();
        let rows = RowPattern::new(&s.structure);
        let mut row_values = Vec::new();
        rows.values(s.factor.l_values(), &mut row_values);
        Some(Arc::new(ChordBase {
            rows,
            row_values,
            parent,
            taylor,
            recip: {
                let mut recip = Vec::new();
                diagonal_reciprocals(&s.structure, s.factor.l_values(), &mut recip);
                recip
            },
            l_values: s.factor.l_values().to_vec(),
            cp: s.cp.clone(),
            q0: s.cq.clone(),
            head0: s.unknown_head.clone(),
            cc: s.cc.clone(),
            mode: s.mode.clone(),
            free: s.free.clone(),
        }))
    }

    /// Whether the iteration, its device states just applied, may take chord steps on the base
    /// factor from here: it stands at the base case's point (the same flows and heads), with
    /// every link's mode and free ends the base case's, but for at most one core link that the
    /// base case had on its law and that is now closed (closed, not cut off: the unknowns are as
    /// free as they were). Then the base case's linearisation is taken as it is (the closed
    /// link's left out), the right-hand side is filled from it, and for a closed link
    /// `z = L⁻¹ u` is solved into `chord_w` (a sparse right-hand side: only the columns on the
    /// elimination-tree paths from its ends are touched).
    pub(super) fn chord_start(&mut self) -> Chord {
        let Some(base) = self.chord.clone() else { return Chord::Off };
        // A held head's border needs the factor of the step itself (`hold.rs`).
        if !self.relations.is_empty() || !self.pinned.is_empty() || self.holding() || base.free != self.free {
            return Chord::Off;
        }
        let mut closed = None;
        for i in 0..self.mode.len() {
            let (now, was) = (self.mode[i], base.mode[i]);
            if now == was {
                if self.cq[i] != base.q0[i] {
                    return Chord::Off;
                }
                continue;
            }
            if closed.is_some() || now & MODE_MASK != MODE_CLOSED || was & MODE_MASK != MODE_LAW {
                return Chord::Off;
            }
            closed = Some(i);
        }
        if (0..self.structure.n).any(|u| self.free[u] && self.unknown_head[u] != base.head0[u]) {
            return Chord::Off;
        }
        self.cp.copy_from_slice(&base.cp);
        self.cc.copy_from_slice(&base.cc);
        if let Some(i) = closed {
            // As `linearise` leaves a link off its law.
            self.cp[i] = 0.0;
            self.cc[i] = self.cq[i];
        }
        self.fill_chord_rhs();
        let Some(i) = closed else { return Chord::On(None) };
        let (mode, p) = (base.mode[i], base.cp[i]);
        let slots = self.structure.core[i].slots;
        self.chord_w.clear();
        self.chord_w.resize(self.structure.n, 0.0);
        let mut first = self.structure.n;
        if mode & FREE_FROM != 0 {
            self.chord_w[slots.from as usize] = 1.0;
            first = first.min(slots.from as usize);
        }
        if mode & FREE_TO != 0 {
            self.chord_w[slots.to as usize] = -1.0;
            first = first.min(slots.to as usize);
        }
        forward(&self.structure, &base.l_values, &mut self.chord_w, first);
        let denominator = 1.0 - p * self.chord_w.iter().map(|z| z * z).sum::<f64>();
        // A closure that left the matrix singular would cut junctions off, which the comparison
        // of free unknowns above has excluded; the guard keeps round-off out.
        if denominator.is_nan() || denominator <= 1e-9 {
            return Chord::Off;
        }
        Chord::On(Some(RankOne { p, denominator }))
    }

    /// The right-hand side of a chord step from the current constants `c` (the matrix is the
    /// base case's).
    pub(super) fn fill_chord_rhs(&mut self) {
        chord_rhs(&self.structure, &self.mode, &self.cc, &self.unknown_demand, &self.free, &mut self.rhs);
    }

    /// Solves the chord step's system in place in `rhs`: with `y = L⁻¹ r` and `z = L⁻¹ u`,
    /// `(A₀ − p u uᵀ)⁻¹ r = L⁻ᵀ (y + z · p zᵀy / (1 − p zᵀz))` (see the [module docs](self)).
    pub(super) fn chord_solve(&mut self, rank_one: Option<RankOne>) {
        let Some(base) = self.chord.clone() else { return };
        forward(&self.structure, &base.l_values, &mut self.rhs, 0);
        if let Some(RankOne { p, denominator }) = rank_one {
            let dot: f64 = self.rhs.iter().zip(&self.chord_w).map(|(y, z)| y * z).sum();
            let scale = p * dot / denominator;
            for (y, z) in self.rhs.iter_mut().zip(&self.chord_w) {
                *y += scale * z;
            }
        }
        backward(&self.structure, &base.l_values, &mut self.rhs);
    }

    /// Uses `base` (from [`Solver::chord_base`] of a solver of the same structure) for the chord
    /// steps of this solver's next solves, or none.
    pub(super) fn use_chord(&mut self, base: Option<Arc<ChordBase>>) {
        self.chord = base;
    }
}

/// Taylor expansion of a Hazen–Williams pipe's head loss around the base case's flow, for the
/// chord steps' passes: `h(q₀ + Δ) ≈ h₀ + g₀ Δ + ½ h₂ Δ² + ⅙ h₃ Δ³` where
/// `|Δ| ≤ TAYLOR_REACH |q₀|`. The next term is `h⁗ Δ⁴ / 24 = n (n−1) (n−2) (n−3) / 24 · h (Δ/q)⁴`
/// of the friction part (n = 1.852: about 0.011 h (Δ/q)⁴; the minor-loss part `m q|q|` is a
/// quadratic, exact already), so within the reach of 1 % the expansion is exact to some 1e-10
/// of the head loss, far inside any head tolerance; the step that ends the iteration is judged on
/// these values, and the reported residuals are evaluated exactly from the answer
/// (`solution.rs`). The slope's error is some 5e-8 of the slope, which moves only the rate of
/// the chord steps, never their fixed point.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) struct Taylor {
    q0: f64,
    h0: f64,
    g0: f64,
    half_h2: f64,
    sixth_h3: f64,
}

impl Taylor {
    /// No expansion: one that serves no flow (its base flow is not a number, so that no flow is
    /// within its reach), for arrays of expansions without an `Option`'s tag.
    pub(super) const NONE: Taylor =
        Taylor { q0: f64::NAN, h0: f64::NAN, g0: f64::NAN, half_h2: f64::NAN, sixth_h3: f64::NAN };
}

/// Largest |Δq / q₀| the expansion of [`Taylor`] serves.
const TAYLOR_REACH: f64 = 1e-2;

impl Taylor {
    /// The expansion of `h = r |q|^n sign(q) + m q|q|` around `q0`; `None` at zero flow.
    fn new(r: f64, m: f64, q0: f64) -> Option<Taylor> {
        if q0 == 0.0 || !q0.is_finite() {
            return None;
        }
        let (h0, g0) = super::links::hazen_williams(r, m, q0);
        let n = crate::physics::friction::HW_FLOW_EXPONENT;
        let a = q0.abs();
        // With g_hw = n r |q|^(n−1) the friction slope: the second derivative is
        // (n − 1) g_hw / q + 2 m sign(q), the third (n − 2) / q times the friction part of the
        // second (the minor loss adds nothing past the second derivative).
        let h2_friction = (n - 1.0) * (g0 - 2.0 * m * a) / q0;
        let h2 = h2_friction + 2.0 * m * q0.signum();
        let h3 = (n - 2.0) * h2_friction / q0;
        Some(Taylor { q0, h0, g0, half_h2: 0.5 * h2, sixth_h3: h3 / 6.0 })
    }

    /// The slope `dh/dQ` at `q`, when `q` is within reach.
    #[inline]
    pub(super) fn slope_at(&self, q: f64) -> Option<f64> {
        let d = q - self.q0;
        (d.abs() <= TAYLOR_REACH * self.q0.abs())
            .then_some(self.g0 + d * (2.0 * self.half_h2 + 3.0 * self.sixth_h3 * d))
    }

    /// The head loss at `q`, when `q` is within reach.
    #[inline]
    pub(super) fn at(&self, q: f64) -> Option<f64> {
        let d = q - self.q0;
        (d.abs() <= TAYLOR_REACH * self.q0.abs())
            .then_some(self.h0 + d * (self.g0 + d * (self.half_h2 + d * self.sixth_h3)))
    }

    /// The head loss and slope at `q`, when `q` is within reach.
    #[inline]
    pub(super) fn both_at(&self, q: f64) -> Option<(f64, f64)> {
        let d = q - self.q0;
        (d.abs() <= TAYLOR_REACH * self.q0.abs()).then_some((
            self.h0 + d * (self.g0 + d * (self.half_h2 + d * self.sixth_h3)),
            self.g0 + d * (2.0 * self.half_h2 + 3.0 * self.sixth_h3 * d),
        ))
    }
}

impl Solver {
    /// The pass after a step that prepares a chord step: like `update_links` (the new flows,
    /// their change, the energy residuals at the new point), but every link keeps the base
    /// case's conductance, Hazen–Williams pipes near their base flow take the [`Taylor`]
    /// expansion, and only the right-hand side is filled (the matrix is the base case's).
    /// Chord steps run without relations of pressure, pinned heads or damping.
    pub(super) fn chord_update(&mut self) -> (f64, f64) {
        let Some(base) = self.chord.clone() else { return (f64::INFINITY, f64::INFINITY) };
        let (mut sum_dq, mut sum_q, mut residual) = (0.0, self.tree_flow_sum, 0.0f64);
        for (r, &d) in self.rhs.iter_mut().zip(&self.unknown_demand) {
            *r = -d;
        }
        let structure = &*self.structure;
        let (laws, delta, unknown_head, head, rhs) =
            (&self.laws, &self.delta, &self.unknown_head, &self.head, &mut self.rhs);
        for i in 0..structure.core.len() {
            let mode = self.mode[i];
            match mode & MODE_MASK {
                MODE_LAW => {
                    let c = &structure.core[i];
                    let ((d_from, h_from), (d_to, h_to)) = link_ends(c, delta, unknown_head, head);
                    let p = self.cp[i];
                    let q = self.cc[i] + p * (d_from - d_to);
                    let dh = h_from - h_to;
                    let y = match base.taylor[i].and_then(|t| t.at(q)) {
                        Some(y) => y,
                        None => law_at(laws, c.link, mode, &self.hot[i], q).0,
                    };
                    residual = residual.max((y - dh).abs());
                    sum_dq += (q - self.cq[i]).abs();
                    sum_q += q.abs();
                    self.cq[i] = q;
                    self.cc[i] = q + p * (dh - y);
                }
                MODE_FIXED_FLOW => sum_q += self.cq[i].abs(),
                _ => continue,
            }
            let (c, cc) = (&structure.core[i], self.cc[i]);
            if mode & FREE_FROM != 0 {
                rhs[c.slots.from as usize] -= cc;
            }
            if mode & FREE_TO != 0 {
                rhs[c.slots.to as usize] += cc;
            }
        }
        for (r, &free) in rhs.iter_mut().zip(&self.free) {
            if !free {
                *r = 0.0;
            }
        }
        (sum_dq / sum_q.max(self.demand_scale), residual)
    }
}

/// The right-hand side of a chord step into `rhs`, from the links' modes and constants `c`, the
/// unknowns' outflows and which unknowns are free (see [`Solver::fill_chord_rhs`]).
pub(super) fn chord_rhs(
    structure: &super::Structure,
    mode: &[u8],
    cc: &[f64],
    unknown_demand: &[f64],
    free: &[bool],
    rhs: &mut [f64],
) {
    for (r, &d) in rhs.iter_mut().zip(unknown_demand) {
        *r = -d;
    }
    for (i, c) in structure.core.iter().enumerate() {
        let mode = mode[i];
        if mode & MODE_MASK == MODE_CLOSED {
            continue;
        }
        if mode & FREE_FROM != 0 {
            rhs[c.slots.from as usize] -= cc[i];
        }
        if mode & FREE_TO != 0 {
            rhs[c.slots.to as usize] += cc[i];
        }
    }
    for (r, &free) in rhs.iter_mut().zip(free) {
        if !free {
            *r = 0.0;
        }
    }
}

/// Adds `value · L⁻¹ e_j` to `y` (`L` the factor with values `l`, `parent` its elimination
/// tree): only the columns on the path from `j` to its root are touched. `scratch` holds zeros
/// over the whole column range, and holds them again after the call.
pub(super) fn forward_path(
    structure: &super::Structure,
    l: &[f64],
    parent: &[u32],
    y: &mut [f64],
    scratch: &mut [f64],
    j: usize,
    value: f64,
) {
    let (col_ptr, row_idx) = (structure.symbolic.col_ptr(), structure.symbolic.row_idx());
    scratch[j] = value;
    let mut k = j as u32;
    // Every row of column k lies on the path above it, so each is visited (and zeroed) later.
    while k != NONE {
        let ku = k as usize;
        let (start, end) = (col_ptr[ku] as usize, col_ptr[ku + 1] as usize);
        let v = scratch[ku] / l[start];
        scratch[ku] = 0.0;
        y[ku] += v;
        for p in start + 1..end {
            scratch[row_idx[p] as usize] -= l[p] * v;
        }
        k = parent[ku];
    }
}

/// Solves `L y = x` in place (`L` the factor with values `l`, in faer's simplicial layout: each
/// column's diagonal first, then the rows below it), skipping the columns before `first` (all
/// zero in `x`) and those whose value is zero.
pub(super) fn forward(structure: &super::Structure, l: &[f64], x: &mut [f64], first: usize) {
    forward_with(structure, l, x, first, |_, start, v| v / l[start]);
}

/// Solves `Lᵀ x = y` in place (layout as in [`forward`]).
pub(super) fn backward(structure: &super::Structure, l: &[f64], x: &mut [f64]) {
    backward_with(structure, l, x, |_, start, v| v / l[start]);
}

/// [`forward`] with the reciprocals of the factor's diagonal (`recip[j]` of column `j`, made
/// once per factor by [`diagonal_reciprocals`]): a division lies on each solve's chain of
/// dependent columns (a column's value is final only once its descendants in the elimination
/// tree are), a multiplication takes a fraction of its latency. The result differs from the
/// dividing solve's by round-off only.
pub(super) fn forward_by_reciprocals(structure: &super::Structure, l: &[f64], recip: &[f64], x: &mut [f64]) {
    forward_with(structure, l, x, 0, |j, _, v| v * recip[j]);
}

/// The off-diagonal entries of a factor of the structure's pattern row by row, each row's in
/// the order of its columns, and where each sits in the factor's values (column by column): the
/// layout [`forward_by_rows`] reads. Made once per sweep (in [`ChordBase`]); the values of a
/// factor are copied into it once per factorization ([`RowPattern::values`]).
#[derive(Debug)]
pub(super) struct RowPattern {
    /// Row `i`'s entries are `columns[start[i]..start[i + 1]]`.
    start: Vec<u32>,
    columns: Vec<u32>,
    /// The place of each entry in the factor's values (column by column).
    at: Vec<u32>,
}

impl RowPattern {
    /// The rows of `structure`'s factor.
    pub(super) fn new(structure: &super::Structure) -> RowPattern {
        let (col_ptr, row_idx) = (structure.symbolic.col_ptr(), structure.symbolic.row_idx());
        let n = structure.n;
        let mut start = vec![0u32; n + 1];
        for j in 0..n {
            for p in col_ptr[j] as usize + 1..col_ptr[j + 1] as usize {
                start[row_idx[p] as usize + 1] += 1;
            }
        }
        for i in 0..n {
            start[i + 1] += start[i];
        }
        let mut fill: Vec<u32> = start[..n].to_vec();
        let entries = start[n] as usize;
        let (mut columns, mut at) = (vec![0u32; entries], vec![0u32; entries]);
        for j in 0..n {
            let below = col_ptr[j] as usize + 1..col_ptr[j + 1] as usize;
            for (p, &i) in below.clone().zip(&row_idx[below]) {
                let i = i as usize;
                columns[fill[i] as usize] = j as u32;
                at[fill[i] as usize] = p as u32;
                fill[i] += 1;
            }
        }
        RowPattern { start, columns, at }
    }

    /// The off-diagonal values of the factor with values `l`, row by row, into `out`.
    pub(super) fn values(&self, l: &[f64], out: &mut Vec<f64>) {
        out.clear();
        out.extend(self.at.iter().map(|&p| l[p as usize]));
    }
}

/// [`forward_by_reciprocals`] row by row (up-looking): `x_i = (b_i − Σ_j L_ij x_j) · (1/L_ii)`
/// over the columns `j` of row `i` in order, with `values` from [`RowPattern::values`] and
/// `recip` the reciprocals of the diagonal.
///
/// The column solve subtracts each column's multiple from the rows below it, so the next column
/// (in the postordered elimination tree most often the parent of the one just done) reads a value
/// written an instant before, through memory. Here row `i` sums into a register and writes its
/// value once; its last term is the column just before it (in order, the largest), the one most
/// likely to have just been made, so that the other terms' products wait on nothing. The
/// subtractions are the column solve's, in the same order: the values are the same to the last
/// bit (a column whose value is zero adds a zero product where the column solve skips it).
/// Measured on the generated network of 10,000 junctions (seed 7, one thread, `perf record`,
/// samples against the unchanged factorization's): 0.92 against 0.97.
pub(super) fn forward_by_rows(pattern: &RowPattern, values: &[f64], recip: &[f64], x: &mut [f64]) {
    let (start, columns) = (&pattern.start, &pattern.columns);
    for i in 0..recip.len() {
        let mut v = x[i];
        for k in start[i] as usize..start[i + 1] as usize {
            v -= values[k] * x[columns[k] as usize];
        }
        x[i] = v * recip[i];
    }
}

/// [`backward`] with the reciprocals of the factor's diagonal (see [`forward_by_reciprocals`]),
/// each column's rows taken last to first: the first row below the diagonal is the column's
/// parent in the elimination tree, in the postordered tree most often the column just made, so
/// that its product, taken last, is the only one that waits for it (the others' columns are
/// further up, made long before). The sums differ from [`backward`]'s in order, by round-off
/// only. Measured on the generated network of 10,000 junctions (seed 7, one thread, `perf
/// record`, samples against the unchanged factorization's): 1.04 against 1.23.
pub(super) fn backward_by_reciprocals(structure: &super::Structure, l: &[f64], recip: &[f64], x: &mut [f64]) {
    let (col_ptr, row_idx) = (structure.symbolic.col_ptr(), structure.symbolic.row_idx());
    for j in (0..structure.n).rev() {
        let (start, end) = (col_ptr[j] as usize, col_ptr[j + 1] as usize);
        let mut v = x[j];
        for p in (start + 1..end).rev() {
            v -= l[p] * x[row_idx[p] as usize];
        }
        x[j] = v * recip[j];
    }
}

/// The reciprocals of the diagonal of a factor with values `l`, into `recip` (see
/// [`forward_by_reciprocals`]): the base case's factor once, a sweep closure's own factor after
/// each factorization (reusing the buffer).
fn diagonal_reciprocals(structure: &super::Structure, l: &[f64], recip: &mut Vec<f64>) {
    let col_ptr = structure.symbolic.col_ptr();
    recip.clear();
    recip.extend((0..structure.n).map(|j| l[col_ptr[j] as usize].recip()));
}

/// [`forward`], with `scale(j, start, v)` the division of column `j`'s value `v` by its diagonal
/// (at `l[start]`).
#[inline(always)]
fn forward_with(
    structure: &super::Structure,
    l: &[f64],
    x: &mut [f64],
    first: usize,
    scale: impl Fn(usize, usize, f64) -> f64,
) {
    let (col_ptr, row_idx) = (structure.symbolic.col_ptr(), structure.symbolic.row_idx());
    for j in first..structure.n {
        if x[j] == 0.0 {
            continue;
        }
        let (start, end) = (col_ptr[j] as usize, col_ptr[j + 1] as usize);
        let v = scale(j, start, x[j]);
        x[j] = v;
        for p in start + 1..end {
            x[row_idx[p] as usize] -= l[p] * v;
        }
    }
}

/// [`backward`], with `scale` as in [`forward_with`].
#[inline(always)]
fn backward_with(structure: &super::Structure, l: &[f64], x: &mut [f64], scale: impl Fn(usize, usize, f64) -> f64) {
    let (col_ptr, row_idx) = (structure.symbolic.col_ptr(), structure.symbolic.row_idx());
    for j in (0..structure.n).rev() {
        let (start, end) = (col_ptr[j] as usize, col_ptr[j + 1] as usize);
        let mut v = x[j];
        for p in start + 1..end {
            v -= l[p] * x[row_idx[p] as usize];
        }
        x[j] = scale(j, start, v);
    }
}

/// A Woodbury correction of the base factor for a few core links: the matrix
/// `A = A₀ + U D Uᵀ`, each column of `U` a link's `e_from − e_to` (its free ends only) and `D`
/// the change of its conductance (`−p₀` for a closed link). With `A₀ = L Lᵀ`, `Z = L⁻¹ U` and
/// `C = D⁻¹ + Zᵀ Z`,
///
/// ```text
/// A⁻¹ r = L⁻ᵀ (y − Z C⁻¹ Zᵀ y),   y = L⁻¹ r.
/// ```
///
/// `L⁻¹ e_j` is non-zero only on the ancestors of column `j` in the elimination tree (some tens
/// of columns in a street network), so `Z` is kept dense over the union of those paths only, and
/// `C` (at most a dozen rows) is factored by Gaussian elimination with partial pivoting. With the
/// closed link alone this is the Sherman–Morrison step of [`Solver::chord_solve`].
#[derive(Clone, Debug, Default)]
pub(super) struct Correction {
    /// Core positions of the links, and their conductance changes.
    pub(super) links: Vec<u32>,
    pub(super) change: Vec<f64>,
    /// The columns `Z` touches (closed under elimination-tree ancestors), in order.
    rows: Vec<u32>,
    /// `Z`, link by link over `rows`.
    z: Vec<f64>,
    /// LU factors of `C` (row-major) and their row order.
    lu: Vec<f64>,
    order: Vec<usize>,
    /// Scratch: `Zᵀ y`, `C⁻¹ Zᵀ y`, and the place of each column in `rows` (`NONE` elsewhere; reset after
    /// each build).
    t: Vec<f64>,
    s: Vec<f64>,
    place: Vec<u32>,
}

/// Smallest pivot of `C`, relative to its largest entry, before a correction is refused.
const PIVOT_FLOOR: f64 = 1e-13;

impl Correction {
    /// Empties the correction.
    pub(super) fn clear(&mut self) {
        self.links.clear();
        self.change.clear();
        self.rows.clear();
    }

    /// Adds core link `i` with conductance change `d` (not zero).
    pub(super) fn push(&mut self, i: usize, d: f64) {
        self.links.push(i as u32);
        self.change.push(d);
    }

    /// Computes `Z` and factors `C` for the links pushed, on `base`'s factor with the free ends
    /// of `mode`; false when `C` is singular to working precision.
    #[allow(clippy::needless_range_loop)] // dense LU elimination reads best with indices
    pub(super) fn build(&mut self, structure: &super::Structure, base: &ChordBase, mode: &[u8]) -> bool {
        let m = self.links.len();
        self.place.resize(structure.n, NONE);
        self.rows.clear();
        // The union of the ends' elimination-tree paths.
        for &i in &self.links {
            let (c, bits) = (&structure.core[i as usize], mode[i as usize]);
            for (free, slot) in [(FREE_FROM, c.slots.from), (FREE_TO, c.slots.to)] {
                if bits & free == 0 {
                    continue;
                }
                let mut j = slot;
                while j != NONE && self.place[j as usize] == NONE {
                    self.place[j as usize] = 0;
                    self.rows.push(j);
                    j = base.parent[j as usize];
                }
            }
        }
        self.rows.sort_unstable();
        for (at, &j) in self.rows.iter().enumerate() {
            self.place[j as usize] = at as u32;
        }
        let r = self.rows.len();
        self.z.clear();
        self.z.resize(m * r, 0.0);
        for (col, &i) in self.links.iter().enumerate() {
            let (c, bits) = (&structure.core[i as usize], mode[i as usize]);
            if bits & FREE_FROM != 0 {
                self.z[col * r + self.place[c.slots.from as usize] as usize] = 1.0;
            }
            if bits & FREE_TO != 0 {
                self.z[col * r + self.place[c.slots.to as usize] as usize] = -1.0;
            }
        }
        // Z = L⁻¹ U over the rows (every row below a column of the union is in the union).
        let (col_ptr, row_idx) = (structure.symbolic.col_ptr(), structure.symbolic.row_idx());
        let l = &base.l_values;
        for at in 0..r {
            let j = self.rows[at] as usize;
            let (start, end) = (col_ptr[j] as usize, col_ptr[j + 1] as usize);
            for col in 0..m {
                let zc = &mut self.z[col * r..(col + 1) * r];
                if zc[at] == 0.0 {
                    continue;
                }
                let v = zc[at] / l[start];
                zc[at] = v;
                for p in start + 1..end {
                    zc[self.place[row_idx[p] as usize] as usize] -= l[p] * v;
                }
            }
        }
        for &j in &self.rows {
            self.place[j as usize] = NONE;
        }
        // C = D⁻¹ + Zᵀ Z, then its LU factors with partial pivoting.
        self.lu.clear();
        self.lu.resize(m * m, 0.0);
        for a in 0..m {
            for b in a..m {
                let za = &self.z[a * r..(a + 1) * r];
                let zb = &self.z[b * r..(b + 1) * r];
                let dot: f64 = za.iter().zip(zb).map(|(x, y)| x * y).sum();
                self.lu[a * m + b] = dot;
                self.lu[b * m + a] = dot;
            }
            self.lu[a * m + a] += 1.0 / self.change[a];
        }
        let scale = self.lu.iter().fold(0.0f64, |s, x| s.max(x.abs()));
        self.order.clear();
        self.order.extend(0..m);
        for k in 0..m {
            let p = (k..m).max_by(|&a, &b| self.lu[a * m + k].abs().total_cmp(&self.lu[b * m + k].abs())).unwrap_or(k);
            let pivot = self.lu[p * m + k];
            if pivot.is_nan() || pivot.abs() <= PIVOT_FLOOR * scale {
                return false;
            }
            if p != k {
                for c in 0..m {
                    self.lu.swap(k * m + c, p * m + c);
                }
                self.order.swap(k, p);
            }
            for row in k + 1..m {
                let f = self.lu[row * m + k] / pivot;
                self.lu[row * m + k] = f;
                for c in k + 1..m {
                    self.lu[row * m + c] -= f * self.lu[k * m + c];
                }
            }
        }
        self.t.resize(m, 0.0);
        true
    }

    /// `y ← y + scale · Z e_col`: the forward solve `L⁻¹ u` of link `col`'s columns, scaled.
    pub(super) fn add_column(&self, col: usize, scale: f64, y: &mut [f64]) {
        let r = self.rows.len();
        for (&j, z) in self.rows.iter().zip(&self.z[col * r..(col + 1) * r]) {
            y[j as usize] += scale * z;
        }
    }

    /// `y ← y − Z C⁻¹ Zᵀ y` (between the two triangular solves).
    #[allow(clippy::needless_range_loop)] // dense LU substitution reads best with indices
    pub(super) fn apply(&mut self, y: &mut [f64]) {
        let (m, r) = (self.links.len(), self.rows.len());
        if m == 0 {
            return;
        }
        // t = Zᵀ y; then L U s = P t.
        for col in 0..m {
            let zc = &self.z[col * r..(col + 1) * r];
            self.t[col] = self.rows.iter().zip(zc).map(|(&j, z)| z * y[j as usize]).sum();
        }
        let (t, s) = (&self.t, &mut self.s);
        s.clear();
        s.extend(self.order.iter().map(|&o| t[o]));
        for row in 0..m {
            let mut v = s[row];
            for c in 0..row {
                v -= self.lu[row * m + c] * s[c];
            }
            s[row] = v;
        }
        for row in (0..m).rev() {
            let mut v = s[row];
            for c in row + 1..m {
                v -= self.lu[row * m + c] * s[c];
            }
            s[row] = v / self.lu[row * m + row];
        }
        for (col, &s) in self.s.iter().enumerate() {
            let zc = &self.z[col * r..(col + 1) * r];
            for (&j, z) in self.rows.iter().zip(zc) {
                y[j as usize] -= z * s;
            }
        }
    }
}

impl Solver {
    /// Solves a chord step's system in place in `rhs` with the base factor and `correction`
    /// (see [`Correction`]).
    pub(super) fn correction_solve(&mut self, base: &ChordBase, correction: &mut Correction) {
        forward_by_rows(&base.rows, &base.row_values, &base.recip, &mut self.rhs);
        correction.apply(&mut self.rhs);
        backward_by_reciprocals(&self.structure, &base.l_values, &base.recip, &mut self.rhs);
    }

    /// Makes the reciprocals of the diagonal of this solver's own factor (after a factorization)
    /// and, with a base factor's [`RowPattern`] at hand, its values row by row, for
    /// [`Solver::own_factor_solve`].
    pub(super) fn own_reciprocals(&mut self) {
        diagonal_reciprocals(&self.structure, self.factor.l_values(), &mut self.own_recip);
        if let Some(base) = &self.chord {
            base.rows.values(self.factor.l_values(), &mut self.own_row_values);
        }
    }

    /// Solves a chord step's system in place in `rhs` with this solver's own factor, by the
    /// reciprocals of its diagonal made by [`Solver::own_reciprocals`] after its factorization
    /// (see [`forward_by_reciprocals`]), the forward solve row by row where the base factor's
    /// rows serve ([`forward_by_rows`]).
    pub(super) fn own_factor_solve(&mut self) {
        let l = self.factor.l_values();
        match &self.chord {
            Some(base) => forward_by_rows(&base.rows, &self.own_row_values, &self.own_recip, &mut self.rhs),
            None => forward_by_reciprocals(&self.structure, l, &self.own_recip, &mut self.rhs),
        }
        backward_by_reciprocals(&self.structure, l, &self.own_recip, &mut self.rhs);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::generate::{generate, NetworkSpec};
    use crate::solve::structure::NONE;
    use crate::solve::{Conditions, SolveOptions};

    /// The chord steps' own triangular solves, dividing by the diagonal or multiplying by its
    /// reciprocals, agree with faer's solve of the same factor (the layout they assume, each
    /// column's diagonal first, is faer's).
    #[test]
    fn the_chord_solves_agree_with_the_factor_solve() {
        let m = generate(&NetworkSpec::new(300, 3)).unwrap();
        let mut solver = Solver::new(&m).unwrap();
        solver.solve(&m, &Conditions::from_model(&m), &SolveOptions::from_model(&m)).unwrap();
        let base = solver.chord_base().expect("a base factor");
        let n = solver.structure.n;
        assert!(n > 50);
        let rhs: Vec<f64> = (0..n).map(|i| ((i * 7919) % 103) as f64 - 51.0).collect();
        let mut ours = rhs.clone();
        forward(&solver.structure, &base.l_values, &mut ours, 0);
        backward(&solver.structure, &base.l_values, &mut ours);
        let mut theirs = rhs.clone();
        let mut factor = solver.factor.clone();
        factor.l_values_mut().copy_from_slice(&base.l_values);
        factor.solve(&solver.structure, &mut theirs);
        let scale = theirs.iter().fold(0.0f64, |a, x| a.max(x.abs()));
        for (a, b) in ours.iter().zip(&theirs) {
            assert!((a - b).abs() <= 1e-12 * scale, "{a} vs {b}");
        }
        // The forward solve row by row is the column solve's, to the last bit.
        let (mut by_columns, mut by_rows) = (rhs.clone(), rhs.clone());
        forward_by_reciprocals(&solver.structure, &base.l_values, &base.recip, &mut by_columns);
        forward_by_rows(&base.rows, &base.row_values, &base.recip, &mut by_rows);
        assert_eq!(by_columns, by_rows);
        // The same with the reciprocals of the diagonal, to round-off.
        let mut by_reciprocals = rhs.clone();
        forward_by_rows(&base.rows, &base.row_values, &base.recip, &mut by_reciprocals);
        backward_by_reciprocals(&solver.structure, &base.l_values, &base.recip, &mut by_reciprocals);
        for (a, b) in by_reciprocals.iter().zip(&theirs) {
            assert!((a - b).abs() <= 1e-12 * scale, "{a} vs {b}");
        }
    }

    /// The expansion of a Hazen–Williams pipe's head loss agrees with the exact law (Hazen–Williams
    /// with exponent 1.852, as `links::hazen_williams` evaluates it) across its reach of 1 %, head
    /// loss to 1e-9 and slope to 1e-7 of their values (the bounds of its docs, with room), in both flow directions and with a minor loss,
    /// and serves no flow beyond its reach.
    #[test]
    fn the_expansion_agrees_with_the_law_within_its_reach() {
        // Resistances of a 300 m pipe of 150 mm and of a 2 km main of 500 mm (C = 120), SI.
        for (r, m) in [(1.9e3, 0.0), (1.7e1, 0.0), (1.9e3, 2.5e2)] {
            for q0 in [0.012, -0.012, 0.35, -2e-4] {
                let t = Taylor::new(r, m, q0).unwrap();
                for k in -99..=99 {
                    let q = q0 * (1.0 + f64::from(k) * 1e-4);
                    let (h, g) = crate::solve::links::hazen_williams(r, m, q);
                    let (ht, gt) = t.both_at(q).unwrap();
                    assert!((ht - h).abs() <= 1e-9 * h.abs(), "r {r}, q0 {q0}, q {q}: {ht} vs {h}");
                    assert!((gt - g).abs() <= 1e-7 * g.abs(), "r {r}, q0 {q0}, q {q}: slope {gt} vs {g}");
                    assert_eq!(t.at(q), Some(ht));
                    assert_eq!(t.slope_at(q), Some(gt));
                }
                assert!(t.at(q0 * 1.0101).is_none() && t.both_at(q0 * 0.9899).is_none());
            }
        }
        assert!(Taylor::new(1.0, 0.0, 0.0).is_none());
        // The expansion that serves nothing.
        for q in [0.0, 1e-9, -0.35, f64::NAN] {
            assert!(
                Taylor::NONE.at(q).is_none() && Taylor::NONE.both_at(q).is_none() && Taylor::NONE.slope_at(q).is_none()
            );
        }
    }

    /// Closing a grid pipe of a generated network (a loop opened) in a worker of a batch takes
    /// chord steps (fewer factorizations than steps) and gives the answer of a fresh solve of
    /// the closed model; so does closing a dead-end pipe (no rank-one change).
    #[test]
    fn a_closure_takes_chord_steps_and_gives_the_fresh_answer() {
        let mut m = generate(&NetworkSpec::new(400, 11)).unwrap();
        m.options.head_tolerance = 1e-9;
        m.options.flow_tolerance = 1e-12;
        let conditions = Conditions::from_model(&m);
        let options = SolveOptions::from_model(&m);
        let mut base = Solver::new(&m).unwrap();
        base.solve(&m, &conditions, &options).unwrap();
        let chord = base.chord_base();
        assert!(chord.is_some());
        let structure = base.structure.clone();
        let grid = (0..m.links().len()).find(|&k| structure.core_position[k] != NONE && k % 3 == 1).unwrap();
        let dead_end = structure.trees[0].link as usize;
        for k in [grid, dead_end] {
            let mut worker = base.clone();
            worker.use_chord(chord.clone());
            worker.start_from(&base);
            let mut closed = conditions.clone();
            closed.set_status(&m, k, crate::model::LinkStatus::Closed).unwrap();
            let warm = SolveOptions { warm_start: true, ..options };
            let got = worker.solve(&m, &closed, &warm).unwrap();
            let t = *worker.timings();
            assert!(t.factorizations < t.iterations, "link {k}: {t:?}");
            let mut model = m.clone();
            model.set_status(k, crate::model::LinkStatus::Closed).unwrap();
            let want = crate::solve::solve(&model).unwrap();
            for (a, b) in got.head.iter().zip(&want.head) {
                assert!((a - b).abs() <= 1e-6 || (a.is_nan() && b.is_nan()), "link {k}: {a} vs {b}");
            }
            for (a, b) in got.flow.iter().zip(&want.flow) {
                assert!((a - b).abs() <= 1e-9, "link {k}: {a} vs {b}");
            }
        }
    }
}
