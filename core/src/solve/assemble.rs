//! Assembly: each core link's linearisation (`p = 1/g`, `c`) and its scatter into the head
//! matrix and right-hand side, in one pass per iteration (see the [solver's docs](super)).

use super::links::LinkLaw;
use super::structure::{CoreLink, NONE};
use super::{links, Pinned, Solver};
use crate::model::Model;
use crate::physics::outflow::Step;

// How a core link enters the current iteration (the low two bits of its mode byte), which of its
// ends are free unknowns, and whether its law is evaluated through its `LinkLaw` (the bits above).
/// Closed, or cut off: not in the matrix.
pub(super) const MODE_CLOSED: u8 = 0;
/// On its law.
pub(super) const MODE_LAW: u8 = 1;
/// A known flow (an active flow-control valve).
pub(super) const MODE_FIXED_FLOW: u8 = 2;
/// An active pressure valve: its flow comes from the balance of the node it pins.
pub(super) const MODE_PINNED: u8 = 3;
/// The bits of the four modes above.
pub(super) const MODE_MASK: u8 = 3;
/// Share of a bypass's conductance an active pressure valve takes back in the matrix (see
/// `update_links`). All of it is exact Newton, but it leaves the matrix singular when the node
/// beyond the valve is fed by nothing but the valve and its bypass (the valve's split of that
/// node's demand is then free); nine tenths keep the matrix definite and cut the lag's rate
/// tenfold.
const BYPASS_SHARE: f64 = 0.9;
/// Its `from` end is a free unknown.
pub(super) const FREE_FROM: u8 = 4;
/// Its `to` end is a free unknown.
pub(super) const FREE_TO: u8 = 8;
/// Its law is not an inline Hazen–Williams pipe: evaluate it through its [`LinkLaw`](super::LinkLaw).
/// Set when the laws are built and kept when the device states change the bits below.
pub(super) const LAW_GENERAL: u8 = 16;
/// Steps of a cold start taken with secant slopes (see `Solver::linearise`).
pub(super) const SECANT_STEPS: u32 = 1;

/// A core link's law in the form the iteration evaluates: Hazen–Williams pipes inline from these
/// three numbers, anything else through its [`LinkLaw`](super::LinkLaw) (the [`LAW_GENERAL`]
/// bit of its mode, which keeps this per-link array at 24 bytes; `r` and `minor` are then zero).
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) struct HotLaw {
    /// Hazen–Williams resistance `r` in `h = r |Q|^n sign(Q) + m Q|Q|`.
    pub r: f64,
    /// Minor-loss coefficient `m` in the same.
    pub minor: f64,
    /// Smallest slope used in the matrix (see [`LinkLaw::min_slope`](super::LinkLaw::min_slope)).
    pub min_slope: f64,
}

/// The head correction and the head at each end of core link `c`, `(from, to)`: an unknown's
/// from `delta` and `unknown_head`; a known head's with a zero correction.
#[inline]
pub(super) fn link_ends(c: &CoreLink, delta: &[f64], unknown_head: &[f64], head: &[f64]) -> ((f64, f64), (f64, f64)) {
    let end = |slot: u32, node: u32| {
        if slot == NONE {
            (0.0, head[node as usize])
        } else {
            (delta[slot as usize], unknown_head[slot as usize])
        }
    };
    (end(c.slots.from, c.from), end(c.slots.to, c.to))
}

impl Solver {
    /// Head of a core link's end: its unknown's, or the node's fixed head.
    #[inline]
    pub(super) fn end_head(&self, unknown: u32, node: u32) -> f64 {
        if unknown == NONE {
            self.head[node as usize]
        } else {
            self.unknown_head[unknown as usize]
        }
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
    pub(super) fn linearise(&mut self, secant: bool) {
        for i in 0..self.structure.core.len() {
            if self.mode[i] & MODE_MASK == MODE_LAW {
                let c = &self.structure.core[i];
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
    pub(super) fn secant(&self, i: usize, q: f64, dh: f64) -> (f64, f64, f64) {
        let hot = self.hot[i];
        if self.mode[i] & LAW_GENERAL != 0 || q == 0.0 {
            return self.coefficients(i, q, dh);
        }
        let (y, _) = links::hazen_williams(hot.r, hot.minor, q);
        let p = 1.0 / (y / q).max(hot.min_slope);
        (p, q + p * (dh - y), (y - dh).abs())
    }

    /// Exact head loss and slope of core link `i` at flow `q`: Hazen–Williams inline, any other
    /// law through its [`LinkLaw`](super::LinkLaw).
    #[inline]
    pub(super) fn core_law(&self, i: usize, q: f64) -> (f64, f64) {
        law_at(&self.laws, self.structure.core[i].link, self.mode[i], &self.hot[i], q)
    }

    /// Conductance p, constant c and energy residual of core link `i` at flow `q` and head
    /// difference `dh`.
    #[inline]
    pub(super) fn coefficients(&self, i: usize, q: f64, dh: f64) -> (f64, f64, f64) {
        let (y, g) = self.core_law(i, q);
        let p = 1.0 / g.max(self.hot[i].min_slope);
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
    /// convergence both balances hold. Links that join the same two nodes as the valve (a bypass
    /// pipe, a standby valve opened by hand) enter that balance exactly: whatever they carry
    /// between the two nodes the valve gives back, so the valve takes their conductance with the
    /// opposite sign and the other node's row no longer feels them — nine tenths of them
    /// ([`BYPASS_SHARE`]). Without it the lagged valve flow is a fixed-point iteration whose rate
    /// is the bypass's share of that node's conductance (slow when the bypass dominates); links
    /// reaching the pinned node from elsewhere keep the lag, which the stopping test of
    /// `iterate` waits out. Only the matrix changes, never the equations a converged answer
    /// meets.
    ///
    /// With `damping` α below one (see `iterate`) each link moves by α of its Newton step
    /// (`Q + α (Q_newton − Q)`), the head corrections having been scaled by α already.
    pub(super) fn update_links(
        &mut self,
        model: &Model,
        secant: bool,
        relations: RelationChange,
        damping: f64,
    ) -> (f64, f64) {
        let (mut sum_dq, mut sum_q, mut residual) =
            (relations.sum_dq, self.tree_flow_sum + relations.sum_q, relations.residual);
        // One pass with the fields borrowed apart, so that the loop runs over plain slices.
        let structure = &*self.structure;
        let (laws, delta, unknown_head, head) = (&self.laws, &self.delta, &self.unknown_head, &self.head);
        // Link `c`'s new flow, slope and constant (into `cq`, `cp`, `cc`), and what it adds to
        // the sums: its |Δq| and energy residual (on its law only) and its |q|; `None` for a
        // link that is not on its law nor at a fixed flow.
        let step =
            |c: &CoreLink, hot: &HotLaw, mode: u8, cq: &mut f64, cp: &mut f64, cc: &mut f64| match mode & MODE_MASK {
                MODE_LAW => {
                    let ((d_from, h_from), (d_to, h_to)) = link_ends(c, delta, unknown_head, head);
                    let q = if damping == 1.0 {
                        *cc + *cp * (d_from - d_to)
                    } else {
                        // The head corrections are α δ: the full step's flow is c + p δ.
                        *cq + damping * (*cc + *cp * (d_from - d_to) / damping - *cq)
                    };
                    let dh = h_from - h_to;
                    let general = mode & LAW_GENERAL != 0;
                    let (y, g) = law_at(laws, c.link, mode, hot, q);
                    let g = if secant && !general && q != 0.0 { y / q } else { g };
                    let p = 1.0 / g.max(hot.min_slope);
                    let dq = (q - *cq).abs();
                    *cq = q;
                    *cp = p;
                    *cc = q + p * (dh - y);
                    Some((Some((dq, (y - dh).abs())), q.abs()))
                }
                MODE_FIXED_FLOW => Some((None, cq.abs())),
                _ => None,
            };
        // The links of `range` through `step`, their sums added to `sums` (|Δq|, |q|, the
        // largest energy residual) in link order, and each link's part of the matrix scattered
        // when `matrix` is given.
        type Matrix<'m> = Option<(&'m mut [f64], &'m mut [f64])>;
        let pass = |range: std::ops::Range<usize>,
                    cq: &mut [f64],
                    cp: &mut [f64],
                    cc: &mut [f64],
                    mut sums: (f64, f64, f64),
                    mut matrix: Matrix| {
            let links = structure.core[range.clone()].iter().zip(&self.hot[range.clone()]).zip(&self.mode[range]);
            for (((c, hot), &mode), ((cq, cp), cc)) in links.zip(cq.iter_mut().zip(cp).zip(cc)) {
                let Some((on_law, q)) = step(c, hot, mode, cq, cp, cc) else { continue };
                if let Some((dq, r)) = on_law {
                    sums.2 = sums.2.max(r);
                    sums.0 += dq;
                }
                sums.1 += q;
                if let Some((values, rhs)) = &mut matrix {
                    scatter_link(values, rhs, c, mode, *cp, *cc);
                }
            }
            sums
        };
        let n_core = structure.core.len();
        let matrix = (&mut self.factor.values[..], &mut self.rhs[..]);
        if one_thread_pass() || n_core < PARALLEL_LINKS {
            let sums = (sum_dq, sum_q, residual);
            (sum_dq, sum_q, residual) = pass(0..n_core, &mut self.cq, &mut self.cp, &mut self.cc, sums, Some(matrix));
        } else {
            // A large network: the links' laws in two halves on two threads (the flows and
            // slopes are the same; the sums are added half by half), then the matrix filled in
            // link order as above (the same values to the last bit).
            let half = n_core / 2;
            let (cq_low, cq_high) = self.cq.split_at_mut(half);
            let (cp_low, cp_high) = self.cp.split_at_mut(half);
            let (cc_low, cc_high) = self.cc.split_at_mut(half);
            let zero = (0.0, 0.0, 0.0);
            let (low, high) = rayon::join(
                || pass(0..half, cq_low, cp_low, cc_low, zero, None),
                || pass(half..n_core, cq_high, cp_high, cc_high, zero, None),
            );
            for (dq, q, r) in [low, high] {
                residual = residual.max(r);
                sum_dq += dq;
                sum_q += q;
            }
            let (values, rhs) = matrix;
            for (i, c) in structure.core.iter().enumerate() {
                let mode = self.mode[i];
                if matches!(mode & MODE_MASK, MODE_LAW | MODE_FIXED_FLOW) {
                    scatter_link(values, rhs, c, mode, self.cp[i], self.cc[i]);
                }
            }
        }
        if !self.pinned.is_empty() {
            let links = model.links();
            for v in 0..self.pinned.len() {
                let Pinned { core, link, node, sign, .. } = self.pinned[v];
                let (core, node) = (core as usize, node as usize);
                // Net inflow the pinned node needs from this valve: its demand plus its outflow
                // through every other link, minus its inflow through them.
                let mut need = self.demand[node] + self.relation_outflow(node);
                for &j in self.structure.adjacency.of(node) {
                    if j == link {
                        continue;
                    }
                    let position = self.structure.core_position[j as usize];
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
                let (p, c) = self.bypass(core, link, node);
                self.cp[core] = -p;
                self.cc[core] = q + sign * c;
                self.scatter(core);
            }
        }
        // Relative to the water moving; a network with (almost) no flow is measured against the
        // total demand, or an absolute floor of 1 L/s, so that round-off in flows of nothing
        // does not count as change.
        (sum_dq / sum_q.max(self.demand_scale), residual)
    }

    /// For the active pressure valve at core position `core` (link `link`, pinning `node`):
    /// [`BYPASS_SHARE`] of the summed conductance `Σ p` of the links on their law joining the same
    /// two nodes, and of the summed change `Σ ±(c − Q)` of their flows at the next step's zero
    /// correction (+ for a link leaving the pinned node). Zero when the other node's head is not
    /// an unknown.
    fn bypass(&self, core: usize, link: u32, node: usize) -> (f64, f64) {
        let c = &self.structure.core[core];
        let mode = self.mode[core];
        let (other, free) =
            if c.from as usize == node { (c.to, mode & FREE_TO != 0) } else { (c.from, mode & FREE_FROM != 0) };
        if !free {
            return (0.0, 0.0);
        }
        let (mut p, mut change) = (0.0, 0.0);
        for &j in self.structure.adjacency.of(node) {
            let position = self.structure.core_position[j as usize];
            if j == link || position == NONE || self.mode[position as usize] & MODE_MASK != MODE_LAW {
                continue;
            }
            let (i, cj) = (position as usize, &self.structure.core[position as usize]);
            let leaves = cj.from as usize == node;
            if (if leaves { cj.to } else { cj.from }) != other {
                continue;
            }
            p += self.cp[i];
            change += if leaves { 1.0 } else { -1.0 } * (self.cc[i] - self.cq[i]);
        }
        (BYPASS_SHARE * p, BYPASS_SHARE * change)
    }

    /// Starts filling the matrix and right-hand side of the head corrections δ,
    /// `Σ p δ_i − Σ p δ_j = −d_i + Σ_in c − Σ_out c`: zero values, demands on the right.
    pub(super) fn begin_assembly(&mut self) {
        self.factor.values.iter_mut().for_each(|v| *v = 0.0);
        for (r, &d) in self.rhs.iter_mut().zip(&self.unknown_demand) {
            *r = -d;
        }
    }

    /// Adds core link `i`, with its current `p` and `c`, to the matrix and right-hand side.
    #[inline]
    pub(super) fn scatter(&mut self, i: usize) {
        let mode = self.mode[i];
        if mode & MODE_MASK == MODE_CLOSED {
            return;
        }
        let c = &self.structure.core[i];
        scatter_link(&mut self.factor.values, &mut self.rhs, c, mode, self.cp[i], self.cc[i]);
    }

    /// Ends the assembly: unit rows for pinned and cut-off unknowns (their δ is zero).
    pub(super) fn end_assembly(&mut self) {
        let structure = &*self.structure;
        for u in 0..structure.n {
            if !self.free[u] {
                self.factor.values[structure.diag_slot[u] as usize] = 1.0;
                self.rhs[u] = 0.0;
            }
        }
    }
}

/// Core links from which an iteration's pass over the links' laws is shared by two threads (see
/// `Solver::update_links`): a generated network of 1e5 junctions has some 78,000, one of 1e6
/// some 790,000. At 1e6 the pass took 217–220 ms of the nine iterations on one thread, 155–164
/// ms on two.
pub(super) const PARALLEL_LINKS: usize = 50_000;

#[cfg(test)]
thread_local! {
    /// Tests: the pass on one thread whatever the network's size (and the solve on the calling
    /// thread, where this is set: see `awake`).
    static ONE_THREAD_PASS: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// Whether the links' pass is kept on one thread (tests only).
pub(super) fn one_thread_pass() -> bool {
    #[cfg(test)]
    return ONE_THREAD_PASS.with(|c| c.get());
    #[cfg(not(test))]
    false
}

/// Exact head loss and slope at flow `q` of the core link `link` with mode byte `mode` and hot
/// parts `hot`: Hazen–Williams inline, any other law through its [`LinkLaw`](super::LinkLaw).
/// The one evaluation of [`Solver::core_law`] and of the passes that borrow the solver's fields
/// apart.
#[inline(always)]
pub(super) fn law_at(laws: &[LinkLaw], link: u32, mode: u8, hot: &HotLaw, q: f64) -> (f64, f64) {
    if mode & LAW_GENERAL != 0 {
        laws[link as usize].evaluate_exact(q)
    } else {
        links::hazen_williams(hot.r, hot.minor, q)
    }
}

/// Adds core link `c` (mode byte `mode`, conductance `p`, constant `c_value`) to the matrix
/// `values` and the right-hand side `rhs`: the scatter every assembly shares.
#[inline(always)]
pub(super) fn scatter_link(values: &mut [f64], rhs: &mut [f64], c: &CoreLink, mode: u8, p: f64, c_value: f64) {
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

/// What the relations of pressure contributed to an iteration's convergence measures.
#[derive(Clone, Copy, Debug, Default)]
pub(super) struct RelationChange {
    /// Σ|Δq|, m³/s.
    pub sum_dq: f64,
    /// Σ|q|, m³/s.
    pub sum_q: f64,
    /// Largest |p − P(q)| on the regularised relations, m.
    pub residual: f64,
    /// Largest |p − P(q)| of the relations whose flow is off its curve by more than round-off
    /// ([`RELATION_ROUNDOFF`] of it), m. On a barrier (slopes up to 10¹⁴ s/m² and more) one unit
    /// in the last place of the flow is worth 10⁻⁵ m of pressure: no head tolerance can be asked
    /// there, and none needs to be (the flow is exact to round-off).
    pub unsettled: f64,
}

/// Relative change of a relation's flow below which it counts as round-off (a few units in the
/// last place).
pub(super) const RELATION_ROUNDOFF: f64 = 1e-14;

impl Solver {
    /// Head of junction `node` in the iteration.
    #[inline]
    fn iterate_head(&self, node: usize) -> f64 {
        match self.structure.unknown_of_node[node] {
            NONE => self.head[node],
            u => self.unknown_head[u as usize],
        }
    }

    /// The flow of the relations of pressure at junction `node`, m³/s.
    pub(super) fn relation_outflow(&self, node: usize) -> f64 {
        let start = self.relations.partition_point(|r| (r.node as usize) < node);
        self.relations[start..].iter().take_while(|r| r.node as usize == node).map(|r| r.q).sum()
    }

    /// Linearises every relation of pressure at its flow and its junction's head, and adds it to
    /// the matrix (after [`Solver::begin_assembly`]). Relations of cut-off junctions pass nothing.
    pub(super) fn scatter_relations(&mut self) {
        for i in 0..self.relations.len() {
            let node = self.relations[i].node as usize;
            if !self.connected[node] {
                let r = &mut self.relations[i];
                r.q = 0.0;
                r.step = Step { conductance: 0.0, constant: 0.0 };
                continue;
            }
            let p = self.iterate_head(node) - self.relations[i].elevation;
            let r = &mut self.relations[i];
            r.step = r.smooth.step(r.q, p);
            self.scatter_relation(i);
        }
    }

    /// Adds relation `i`'s linearisation to its junction's row, if the junction is free.
    #[inline]
    fn scatter_relation(&mut self, i: usize) {
        let r = &self.relations[i];
        let u = self.structure.unknown_of_node[r.node as usize];
        if u != NONE && self.free[u as usize] {
            self.factor.values[self.structure.diag_slot[u as usize] as usize] += r.step.conductance;
            self.rhs[u as usize] -= r.step.constant;
        }
    }

    /// New flows of the relations from the head corrections in `delta` (the heads already
    /// corrected), linearised at once for the next step and added to the next matrix.
    ///
    /// With `guard`, an exponent above one keeps the outflow at or above the exact outflow at the
    /// new pressure ([`PowerLaw::advance`](crate::physics::outflow::PowerLaw::advance)); without
    /// it (a step whose length the line search chose, see `search.rs`) the outflow follows the
    /// Newton step, which keeps the mass balance the line search relies on.
    pub(super) fn update_relations(&mut self, damping: f64, guard: bool) -> RelationChange {
        let mut change = RelationChange::default();
        for i in 0..self.relations.len() {
            let node = self.relations[i].node as usize;
            if !self.connected[node] {
                continue;
            }
            let u = self.structure.unknown_of_node[node];
            let delta = if u != NONE && self.free[u as usize] { self.delta[u as usize] } else { 0.0 };
            let p = self.iterate_head(node) - self.relations[i].elevation;
            let r = &mut self.relations[i];
            let q = if !guard {
                r.q + damping * (r.step.constant + r.step.conductance * (delta / damping) - r.q)
            } else if damping == 1.0 {
                r.smooth.law.advance(r.step, delta, p)
            } else {
                let full = r.smooth.law.advance(r.step, delta / damping, p - delta + delta / damping);
                r.q + damping * (full - r.q)
            };
            let inverse = r.smooth.inverse(q);
            let g = 1.0 / inverse.slope;
            change.sum_dq += (q - r.q).abs();
            change.sum_q += q.abs();
            let residual = (p - inverse.pressure).abs();
            change.residual = change.residual.max(residual);
            if residual > RELATION_ROUNDOFF * inverse.slope * q.abs() {
                change.unsettled = change.unsettled.max(residual);
            }
            r.q = q;
            r.step = Step { conductance: g, constant: q + g * (p - inverse.pressure) };
            self.scatter_relation(i);
        }
        change
    }
}

#[cfg(test)]
mod tests {
    use super::ONE_THREAD_PASS;
    use crate::generate::{generate, NetworkSpec};
    use crate::model::{HeadLossLaw, LinkKind, LinkStatus};
    use crate::solve::{Conditions, SolveOptions, Solver};

    /// The pass over a large network's links on two threads gives the one-thread pass's answer
    /// to the last bit (the same matrix every step; only the convergence sums are added in
    /// another order), for every kind of law: Hazen–Williams inline, Darcy–Weisbach with minor
    /// losses through the general law, closed pipes, and pressure-dependent demands.
    #[test]
    fn the_links_pass_on_two_threads_is_the_one_thread_pass() {
        let hw = generate(&NetworkSpec::new(100_000, 7)).unwrap();
        let mut dw = hw.clone();
        dw.options.headloss = HeadLossLaw::DarcyWeisbach;
        let pipes: Vec<usize> =
            (0..hw.links().len()).filter(|&k| matches!(hw.links()[k].kind, LinkKind::Pipe(_))).collect();
        let mut cases = Vec::new();
        cases.push(("Hazen–Williams", hw.clone(), Conditions::from_model(&hw)));
        let mut closed = Conditions::from_model(&hw);
        for &k in pipes.iter().step_by(7) {
            closed.set_status(&hw, k, LinkStatus::Closed).unwrap();
        }
        cases.push(("every seventh pipe closed", hw.clone(), closed));
        let mut rough = Conditions::from_model(&dw);
        for &k in &pipes {
            rough.set_roughness(&dw, k, 1e-4).unwrap();
            if k % 3 == 0 {
                rough.set_minor_loss(&dw, k, 2.5).unwrap();
            }
        }
        cases.push(("Darcy–Weisbach with minor losses", dw.clone(), rough));
        let mut pdd = hw.clone();
        pdd.outflow.pressure_demand =
            Some(crate::model::outflow::PressureDemand { full_pressure: 30.0, zero_pressure: 0.0, exponent: 0.5 });
        let mut pressure = Conditions::from_model(&pdd);
        pressure.scale_demands(2.5).unwrap();
        cases.push(("pressure-dependent demands", pdd.clone(), pressure));
        for (what, model, conditions) in &cases {
            let options = SolveOptions::from_model(model);
            let mut solver = Solver::new(model).unwrap();
            assert!(solver.structure.core.len() >= super::PARALLEL_LINKS, "{what}: too few core links");
            let two = solver.solve(model, conditions, &options).unwrap();
            let mut solver = Solver::new(model).unwrap();
            ONE_THREAD_PASS.with(|c| c.set(true));
            let one = solver.solve(model, conditions, &options);
            ONE_THREAD_PASS.with(|c| c.set(false));
            let one = one.unwrap();
            assert_eq!(one.iterations, two.iterations, "{what}");
            let same = |a: &[f64], b: &[f64]| a.iter().zip(b).all(|(x, y)| x.to_bits() == y.to_bits());
            assert!(same(&one.flow, &two.flow), "{what}: flows");
            assert!(same(&one.head, &two.head), "{what}: heads");
        }
    }
}
