//! The step length of a Newton step when outflows follow pressure: a line search on the
//! network's content function.
//!
//! # Why
//! A relation of pressure (see [`nodes`](super::nodes)) enters the Newton step as a link to the
//! atmosphere whose slope ranges over many orders of magnitude: the barrier below zero outflow is
//! 10⁹ times steeper than the power law above it, and at a demand's cap the slope jumps again.
//! A full Newton step linearised on one side of such a kink can throw the outflow far across it;
//! the next step throws it back, and the iteration wanders for many steps before it settles (or
//! stops short). Damping every step alike after a fixed count slows the good steps as much as the
//! bad ones.
//!
//! # What
//! The heads and flows of the network are the minimum of its **content**: the sum over links of
//! `∫ h(Q) dQ`, over relations of `∫ P(q) dq`, minus each fixed head times the flow it supplies,
//! over the flows that meet the mass balance (Collins, Cooper, Helgason, Kennington & LeBlanc
//! 1978, Management Science 24(7)); with increasing laws it is strictly convex. The gradient
//! method's step is a descent direction of it, and a step length chosen on it makes the iteration
//! converge from any start (Elhay, Piller, Deuerlein & Simpson 2016, J. Water Resour. Plann.
//! Manage. 142(2), for the pressure-dependent problem; the citation is from memory).
//!
//! The content itself is not needed, only its slope along the step. With `d` the step's change
//! of the flows (links and relations) and `δ` the head corrections, the flows `Q + α d` and heads
//! `H + α δ` give
//!
//! `φ'(α) = Σ_links E(α) d + Σ_relations E(α) d`,
//!
//! where `E` is each element's energy residual at that point (its loss minus the head difference
//! across it; for a relation `P(q) − (H − z)`). This holds because `d` keeps the mass balance at
//! every free junction (the flows of a full Newton step balance, so after the first full step
//! every iterate and every step does), so the free heads drop out of the sum. `φ'` increases with
//! `α` (φ is convex), so the step length is found by bracketing its zero in `(0, 1]`:
//!
//! * the full step (α = 1) when `φ'(1) ≤ ½ |φ'(0)|`: near the answer, where Newton's method
//!   converges quadratically, this is every step, at the cost of one pass over the laws;
//! * otherwise the zero of `φ'` is bracketed in `[0, 1]` (the secant point where the bracket's
//!   slopes are of one order, bisection where one dwarfs the other) until `|φ'(α)| ≤ ¼ |φ'(0)|`,
//!   at most [`SEARCH_PASSES`] passes; failing that, the bracket's end where `φ'` is still
//!   negative (a descent), or the last point if that end is zero.
//!
//! # When
//! Not at first: full Newton steps settle most networks in a handful of steps, and a relation
//! thrown across its kink comes straight back (its barrier is a straight line), where a search
//! on the content would creep along the barrier's steep wall for many short steps (on the
//! generated 1e5-junction network with a third of its junctions below full pressure, 16
//! iterations against 9). An iteration that has not settled after a dozen full steps takes one
//! more without the outflow guard of `update_relations` (the guard moves an outflow off its Newton
//! value, so the flows would not balance) and searches every step after it. Measured on 3,000
//! random networks of `tests/pressure_solver.rs`: every one converges, in at most 41 iterations;
//! before, some stopped with errors, a few short of their curves.
//!
//! The search needs relations of pressure present, no active pressure valve (whose flow lags the
//! balance by a step), no held head (`hold.rs`) and no chord step. Elsewhere the iteration damps
//! as before (see `iterate.rs`).

use super::assemble::{link_ends, MODE_LAW, MODE_MASK};
use super::structure::NONE;
use super::Solver;

/// Most passes over the laws one line search takes after the full step's.
const SEARCH_PASSES: u32 = 8;

/// The full step is taken when the content's slope there is at most this share of its slope at
/// the start (positive: a step a little past the minimum along the line).
const FULL_STEP_SLOPE: f64 = 0.5;

/// A shorter step is accepted when the content's slope there is within this share of its slope at
/// the start.
const ACCEPT_SLOPE: f64 = 0.25;

/// The shortest step length taken.
const SHORTEST: f64 = 1e-3;

impl Solver {
    /// Whether the next step's length is chosen by [`Solver::line_search`] (see the module docs).
    pub(super) fn searches_line(&self, chord_step: bool) -> bool {
        !self.relations.is_empty() && self.pinned.is_empty() && !self.holding() && !chord_step
    }

    /// The step length α ∈ [`SHORTEST`, 1] for the Newton corrections in `delta` (not yet applied).
    pub(super) fn line_search(&self) -> f64 {
        let slope0 = self.content_slope(0.0);
        let slope1 = self.content_slope(1.0);
        if slope0.is_nan() || slope0 >= 0.0 || slope1 <= FULL_STEP_SLOPE * -slope0 {
            // Not a descent (round-off at the answer), or a full step that does not overshoot.
            return 1.0;
        }
        // (A slope that is not finite is past the minimum too.)
        let slope1 = if slope1.is_finite() { slope1 } else { f64::MAX };
        // Bracketing on φ', increasing from slope0 < 0 to slope1 > 0: the secant point where the
        // bracket's slopes are of one order, bisection where one end's dwarfs the other's (the
        // step crosses a relation's kink into its barrier: φ' bends like a hockey stick there,
        // and the secant point would creep along the flat part).
        let (mut a, mut fa, mut b, mut fb) = (0.0, slope0, 1.0, slope1);
        let mut alpha = 1.0;
        for _ in 0..SEARCH_PASSES {
            let lopsided = fb > 10.0 * -fa || -fa > 10.0 * fb;
            alpha = if lopsided { 0.5 * (a + b) } else { a - fa * (b - a) / (fb - fa) }.clamp(SHORTEST, 1.0);
            let f = self.content_slope(alpha);
            if f.is_finite() && f.abs() <= ACCEPT_SLOPE * -slope0 {
                return alpha;
            }
            if f < 0.0 {
                (a, fa) = (alpha, f);
            } else {
                (b, fb) = (alpha, if f.is_finite() { f } else { f64::MAX });
            }
        }
        // The end where the content still falls, or the last point if that end is the start.
        if a > 0.0 {
            a.max(SHORTEST)
        } else {
            alpha
        }
    }

    /// The content's slope `φ'(α)` along the Newton step (see the module docs).
    fn content_slope(&self, alpha: f64) -> f64 {
        let structure = &*self.structure;
        let (delta, unknown_head, head) = (&self.delta, &self.unknown_head, &self.head);
        let mut slope = 0.0;
        for (i, c) in structure.core.iter().enumerate() {
            let mode = self.mode[i];
            if mode & MODE_MASK != MODE_LAW {
                continue;
            }
            let ((d_from, h_from), (d_to, h_to)) = link_ends(c, delta, unknown_head, head);
            let (cq, cp, cc) = (self.cq[i], self.cp[i], self.cc[i]);
            let d = cc + cp * (d_from - d_to) - cq;
            if d == 0.0 {
                continue;
            }
            let q = cq + alpha * d;
            let loss = self.core_law(i, q).0;
            let dh = (h_from + alpha * d_from) - (h_to + alpha * d_to);
            slope += (loss - dh) * d;
        }
        for r in &self.relations {
            let node = r.node as usize;
            if !self.connected[node] {
                continue;
            }
            let (delta, h) = match structure.unknown_of_node[node] {
                NONE => (0.0, head[node]),
                u if self.free[u as usize] => (delta[u as usize], unknown_head[u as usize]),
                u => (0.0, unknown_head[u as usize]),
            };
            let d = r.step.constant + r.step.conductance * delta - r.q;
            if d == 0.0 {
                continue;
            }
            let p = h + alpha * delta - r.elevation;
            slope += (r.smooth.inverse(r.q + alpha * d).pressure - p) * d;
        }
        slope
    }
}
