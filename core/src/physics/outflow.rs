//! Outflow relations of a junction: how much water leaves the network there at a given pressure.
//!
//! All three are power laws of the pressure head `p` (m, SI; flows in m³/s):
//!
//! * **Pressure-dependent demand** — Wagner, Shamir & Marks (1988, J. Water Resour. Plann.
//!   Manage. 114(3)): a junction asking demand `d` receives
//!   `q = d · ((p − p₀)/(p₁ − p₀))^e` between the zero pressure `p₀` and the full pressure `p₁`,
//!   nothing at or below `p₀` and all of `d` at or above `p₁`. The exponent 0.5 (the orifice law
//!   applied to the customers' connections) is common practice.
//! * **Outlet** — the orifice law to atmosphere, `q = k · p^e` for `p > 0` (a hydrant flowing, a
//!   sprinkler head, a burst), with `e = 0.5` for a sharp-edged orifice.
//! * **Leakage** — Germanopoulos (1985, Civ. Eng. Syst. 2(3)) and the fixed-and-variable-area
//!   view of May (1994, Water Qual. Int. 4): background leakage `q = r · L · (p / p_ref)^e` for
//!   `p > 0`, exponents from 0.5 (fixed-area holes in rigid pipes) to 2.5 (splits in plastic
//!   pipes that open with pressure). A network average near 1.18 is a commonly quoted value
//!   (common practice, from memory).
//!
//! The three share one form, [`PowerLaw`]: `q = flow · ((p − base)/scale)^e` for `p > base`,
//! zero below, and for a demand capped at `flow` above `base + scale`.
//!
//! # Inverse form for the network solver
//! The gradient method handles a law `h(Q)` of a link well because it linearises in the flow.
//! An outflow is therefore given to the solver the same way, as a link from the junction to the
//! atmosphere at the junction's elevation whose "head loss" is the pressure needed to pass the
//! outflow, `P(q)` (the pressure-from-flow treatment compared by Todini et al., 2021, J. Water
//! Resour. Plann. Manage. 147(8)). `P` is strictly increasing, so the content `∫P dq` is strictly
//! convex and the network problem with these laws has exactly one solution.
//!
//! The exact inverse has vertical parts (any pressure at or below `base` passes no flow; any
//! pressure at or above full pressure passes the whole demand) and, for `e ≠ 1`, a zero or an
//! infinite slope at `q = 0`. [`PowerLaw::inverse`] regularises it within a pressure tolerance
//! `w` (the solver's head tolerance):
//!
//! * below `q = 0` and above the cap, steep straight lines ("barriers") of slope
//!   `M = 10⁹ m / flow` (or a hundred times the steepest slope of the other pieces, if that is
//!   more): a pressure 1 m beyond the kink moves the flow by at most 10⁻⁹ of the flow scale, far
//!   below any flow tolerance, and the round-off of `M · q` stays near 10⁻⁷ m;
//! * between `q = 0` and `q₀ = flow · (w/2/scale)^e` (where the exact pressure is `base + w/2`),
//!   the secant: within `w/2` of the exact pressure;
//! * each kink of slope (at `q = 0` and at the cap) rounded by a parabola tangent to both sides,
//!   whose largest distance from the kinked curve is `w/4`.
//!
//! So for every flow the regularised pressure is within `w` of an exact pressure of that flow;
//! every slope is positive and finite, which keeps the solver's matrix symmetric positive
//! definite.

/// The slope of the barrier lines, in metres per unit of the flow scale.
pub const BARRIER: f64 = 1e9;

/// `q = flow · ((p − base)/scale)^exponent` for `p > base`, zero below; optionally capped at
/// `flow` (for `p ≥ base + scale`). SI: heads in m, flows in m³/s.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PowerLaw {
    /// Pressure head at and below which nothing flows, m.
    pub base: f64,
    /// Pressure head above `base` at which the flow equals `flow`, m (> 0).
    pub scale: f64,
    /// The flow at `base + scale`, m³/s (> 0).
    pub flow: f64,
    /// The exponent (> 0).
    pub exponent: f64,
    /// Whether the flow stops growing at `flow` (a demand), or grows on (an orifice, a leak).
    pub capped: bool,
}

/// A point of the regularised inverse: pressure head and its slope `dP/dq`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Inverse {
    /// Pressure head, m.
    pub pressure: f64,
    /// Slope dP/dq, s/m² (always > 0).
    pub slope: f64,
}

impl PowerLaw {
    /// Wagner, Shamir & Marks: demand `demand` delivered in full at `full`, nothing at `zero`.
    pub fn demand(demand: f64, zero: f64, full: f64, exponent: f64) -> Self {
        PowerLaw { base: zero, scale: full - zero, flow: demand, exponent, capped: true }
    }

    /// The orifice law `q = coefficient · p^exponent` (SI: m³/s at 1 m of head).
    pub fn orifice(coefficient: f64, exponent: f64) -> Self {
        PowerLaw { base: 0.0, scale: 1.0, flow: coefficient, exponent, capped: false }
    }

    /// Leakage `q = rate_length · (p / reference)^exponent`, where `rate_length` is the leak of
    /// the pipe length concerned at the reference pressure (m³/s).
    pub fn leakage(rate_length: f64, reference: f64, exponent: f64) -> Self {
        PowerLaw { base: 0.0, scale: reference, flow: rate_length, exponent, capped: false }
    }

    /// The exact outflow at pressure head `p`.
    pub fn flow(&self, p: f64) -> f64 {
        if p <= self.base {
            return 0.0;
        }
        let u = (p - self.base) / self.scale;
        if self.capped && u >= 1.0 {
            self.flow
        } else {
            self.flow * u.powf(self.exponent)
        }
    }

    /// The exact slope `dq/dp` at `p` (right-hand slope at the kinks; infinite at `base` for
    /// exponents below one).
    pub fn flow_slope(&self, p: f64) -> f64 {
        if p < self.base {
            return 0.0;
        }
        let u = (p - self.base) / self.scale;
        if self.capped && u >= 1.0 {
            0.0
        } else {
            self.flow * self.exponent * u.powf(self.exponent - 1.0) / self.scale
        }
    }

    /// The exact pressure that passes flow `q` for `0 < q` (and `q < flow` when capped).
    pub fn pressure(&self, q: f64) -> f64 {
        self.base + self.scale * (q / self.flow).powf(1.0 / self.exponent)
    }

    /// The slope `dP/dq` of the exact inverse at `q` (for `0 < q`).
    fn pressure_slope(&self, q: f64) -> f64 {
        self.scale / (self.exponent * self.flow) * (q / self.flow).powf(1.0 / self.exponent - 1.0)
    }

    /// The barrier slope for tolerance `w`, m per m³/s: at least [`BARRIER`] per unit of the
    /// flow scale, and a hundred times the steepest slope of the pieces it joins.
    pub fn barrier_slope(&self, w: f64) -> f64 {
        let q0 = self.secant_end(w);
        let secant = 0.5 * w / q0;
        let cap = if self.capped { self.pressure_slope(self.flow) } else { 0.0 };
        (BARRIER / self.flow).max(100.0 * secant).max(100.0 * cap)
    }

    /// The flow `q₀` below which the secant replaces the power law, for tolerance `w` (m).
    fn secant_end(&self, w: f64) -> f64 {
        let q0 = self.flow * (0.5 * w / self.scale).powf(self.exponent);
        if self.capped {
            q0.min(0.5 * self.flow)
        } else {
            q0
        }
    }

    /// The regularised inverse `P(q)` for pressure tolerance `w` (m): see the module docs.
    pub fn inverse(&self, q: f64, w: f64) -> Inverse {
        self.smoothed(w).inverse(q)
    }

    /// The pieces of the regularised inverse for tolerance `w`, computed once (the solver
    /// evaluates a relation at every iteration: one power per evaluation instead of six).
    pub fn smoothed(&self, w: f64) -> Smoothed {
        let m = self.barrier_slope(w);
        let q0 = self.secant_end(w);
        let s0 = (self.pressure(q0) - self.base) / q0;
        // Kink at q = 0 between the barrier (left) and the secant (right).
        let h0 = w / (m - s0);
        let cap = self.capped.then(|| {
            // Kink at the cap between the power law's tangent and the barrier.
            let a = self.pressure_slope(self.flow);
            (a, (w / (m - a)).min(0.25 * (self.flow - q0)))
        });
        Smoothed { law: *self, m, q0, s0, h0, cap }
    }
}

/// The regularised inverse of one [`PowerLaw`] for one tolerance, its pieces computed once:
/// barrier slope `m`, secant end `q0` and slope `s0`, the half-widths of the fillets at zero
/// (`h0`) and at the cap (with the power law's slope there).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Smoothed {
    /// The relation.
    pub law: PowerLaw,
    m: f64,
    q0: f64,
    s0: f64,
    h0: f64,
    /// (slope of the power law at the cap, half-width of the fillet there), when capped.
    cap: Option<(f64, f64)>,
}

impl Smoothed {
    /// The regularised inverse at `q`.
    #[inline]
    pub fn inverse(&self, q: f64) -> Inverse {
        let law = &self.law;
        if q < self.q0 {
            return fillet(law.base, 0.0, self.m, self.s0, self.h0, q);
        }
        if let Some((a, h1)) = self.cap {
            if q >= law.flow - h1 {
                return fillet(law.base + law.scale, law.flow, a, self.m, h1, q);
            }
        }
        // P = base + scale (q/flow)^(1/e) and dP/dq = (P − base)/(e q), with one power.
        let rise = law.scale * (q / law.flow).powf(1.0 / law.exponent);
        Inverse { pressure: law.base + rise, slope: rise / (law.exponent * q) }
    }

    /// The Newton step at outflow `q` and pressure head `p` (see [`Step`]).
    #[inline]
    pub fn step(&self, q: f64, p: f64) -> Step {
        let r = self.inverse(q);
        let g = 1.0 / r.slope;
        Step { conductance: g, constant: q + g * (p - r.pressure) }
    }
}

/// The Newton step of one outflow seen as a link from its junction to the atmosphere.
///
/// With `e = p − P(q)` the residual of the relation at the current pressure head `p` and
/// outflow `q`, linearising `P(q') ≈ P(q) + P'(q)(q' − q) = p + δ` for the head correction `δ`
/// of the junction gives `q' = c + g δ` with conductance `g = 1/P'(q)` and `c = q + g e`. The
/// junction's mass balance then takes `g` on the matrix diagonal and `−c` on its right-hand side,
/// exactly like a link to a fixed head: the matrix stays symmetric positive definite.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Step {
    /// Conductance `g = 1/P'(q)`, m²/s.
    pub conductance: f64,
    /// Outflow at zero head correction, m³/s.
    pub constant: f64,
}

impl PowerLaw {
    /// The Newton step at outflow `q` and pressure head `p`, for pressure tolerance `w`.
    pub fn step(&self, q: f64, p: f64, w: f64) -> Step {
        self.smoothed(w).step(q, p)
    }

    /// The new outflow after head correction `delta`, given the new pressure head `p_new`, with
    /// one safeguard for exponents above one: the outflow does not fall below the exact outflow
    /// at the new pressure. There the inverse is concave, and from the right of the root its
    /// tangent overshoots to the left, possibly far into the barrier, from where the iteration
    /// would climb back only slowly (the barrier's conductance is tiny). Convex inverses
    /// (exponents up to one) converge from the right monotonically and are left alone. The
    /// safeguard changes the path of the iteration, not the solution (a point on the relation).
    /// At or below `base` it is not applied: there the regularised relation's flow is a hair
    /// below zero (the barrier), and holding it at zero would leave the relation off its curve.
    pub fn advance(&self, step: Step, delta: f64, p_new: f64) -> f64 {
        let next = step.constant + step.conductance * delta;
        if self.exponent > 1.0 && p_new > self.base {
            next.max(self.flow(p_new))
        } else {
            next
        }
    }
}

/// Two lines through `(x0, y0)` with slopes `m1` left and `m2` right, joined over
/// `[x0 − h, x0 + h]` by the parabola tangent to both (largest distance from the corner
/// `(m2 − m1)·h/4`).
fn fillet(y0: f64, x0: f64, m1: f64, m2: f64, h: f64, x: f64) -> Inverse {
    let t = x - x0;
    if t <= -h {
        Inverse { pressure: y0 + m1 * t, slope: m1 }
    } else if t >= h {
        Inverse { pressure: y0 + m2 * t, slope: m2 }
    } else {
        let c = (m2 - m1) / (4.0 * h);
        Inverse { pressure: y0 + m1 * t + c * (t + h) * (t + h), slope: m1 + 2.0 * c * (t + h) }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const W: f64 = 1e-4;

    /// A demand law with values of an invented scenario: 2 L/s asked, full at 20 m, zero at 0 m.
    fn wagner() -> PowerLaw {
        PowerLaw::demand(2e-3, 0.0, 20.0, 0.5)
    }

    #[test]
    fn wagner_regimes_follow_the_published_relation() {
        // Wagner, Shamir & Marks (1988): q = d·((p − p0)/(p1 − p0))^0.5 between the bounds.
        let law = wagner();
        assert_eq!(law.flow(-3.0), 0.0);
        assert_eq!(law.flow(0.0), 0.0);
        assert!((law.flow(5.0) - 2e-3 * 0.5).abs() < 1e-18); // (5/20)^0.5 = 0.5
        assert_eq!(law.flow(20.0), 2e-3);
        assert_eq!(law.flow(80.0), 2e-3);
        let shifted = PowerLaw::demand(1.0, 10.0, 30.0, 1.0);
        assert!((shifted.flow(15.0) - 0.25).abs() < 1e-15);
    }

    #[test]
    fn orifice_and_leakage_laws() {
        // Orifice law q = k p^0.5: four times the pressure, twice the flow.
        let o = PowerLaw::orifice(0.01, 0.5);
        assert!((o.flow(16.0) / o.flow(4.0) - 2.0).abs() < 1e-14);
        assert_eq!(o.flow(-1.0), 0.0);
        // Leakage at the reference pressure is the rate; 1.18 exponent (common practice).
        let l = PowerLaw::leakage(3e-4, 50.0, 1.18);
        assert!((l.flow(50.0) - 3e-4).abs() < 1e-18);
        assert!((l.flow(100.0) - 3e-4 * 2f64.powf(1.18)).abs() < 1e-15);
    }

    #[test]
    fn exact_inverse_inverts() {
        for law in [wagner(), PowerLaw::orifice(0.01, 0.5), PowerLaw::leakage(3e-4, 50.0, 2.5)] {
            for p in [0.3, 2.0, 7.5, 15.0] {
                let q = law.flow(p);
                assert!((law.pressure(q) - p).abs() < 1e-12, "{law:?} at {p}");
            }
        }
    }

    /// Every regularised point lies within the tolerance of an exact point of the relation (a
    /// graph including its vertical parts), and the slope is positive everywhere.
    #[test]
    fn regularised_inverse_stays_within_the_tolerance_and_is_increasing() {
        let laws = [
            wagner(),
            PowerLaw::demand(0.05, 3.0, 25.0, 0.5),
            PowerLaw::demand(1e-4, 0.0, 10.0, 2.0),
            PowerLaw::demand(1e-3, 0.0, 14.0, 1.0),
            PowerLaw::orifice(0.02, 0.5),
            PowerLaw::leakage(1e-5, 50.0, 1.18),
            PowerLaw::leakage(1e-5, 50.0, 2.5),
        ];
        for law in laws {
            let span = if law.capped { law.flow * 1.000_001 } else { law.flow * 10.0 };
            let mut previous = f64::NEG_INFINITY;
            let n = 20_000;
            for i in 0..=n {
                // Dense near the kinks, where the pieces meet.
                let t = i as f64 / n as f64;
                let q = -law.flow * 1e-9 + (span + law.flow * 1e-9) * t.powi(3);
                let r = law.inverse(q, W);
                assert!(r.slope > 0.0 && r.slope.is_finite(), "{law:?} q={q}");
                assert!(r.pressure > previous, "{law:?} not increasing at q={q}");
                previous = r.pressure;
                let distance = if q <= 0.0 {
                    (r.pressure - law.base).max(0.0)
                } else if law.capped && q >= law.flow {
                    (law.base + law.scale - r.pressure).max(0.0)
                } else {
                    (r.pressure - law.pressure(q)).abs()
                };
                assert!(distance <= W * (1.0 + 1e-9), "{law:?} q={q}: off by {distance}");
            }
            // Continuity across the pieces.
            for q in [0.0, law.secant_end(W), law.flow] {
                let e = q * 1e-12 + 1e-30;
                let (a, b) = (law.inverse(q - e, W), law.inverse(q + e, W));
                let allowed = 2.0 * e * a.slope.max(b.slope) * (1.0 + 1e-9) + 1e-9;
                assert!((a.pressure - b.pressure).abs() <= allowed, "{law:?} jump at {q}: {a:?} vs {b:?}");
            }
        }
    }

    #[test]
    fn barrier_moves_the_flow_by_a_negligible_amount() {
        // 100 m beyond full pressure, the regularised relation passes more than the demand by
        // 100 m / M = 1e-7 of the demand.
        let law = wagner();
        let m = law.barrier_slope(W);
        let over = 100.0 / m;
        assert!(over / law.flow <= 1.000_001e-7);
    }

    #[test]
    fn slope_matches_a_difference_quotient() {
        let law = wagner();
        for q in [1e-4, 5e-4, 1.5e-3] {
            let e = 1e-9;
            let fd = (law.inverse(q + e, W).pressure - law.inverse(q - e, W).pressure) / (2.0 * e);
            let s = law.inverse(q, W).slope;
            assert!((fd - s).abs() < 1e-5 * s, "{q}: {fd} vs {s}");
        }
        for p in [1.0, 7.0, 19.0] {
            let e = 1e-6;
            let fd = (law.flow(p + e) - law.flow(p - e)) / (2.0 * e);
            assert!((fd - law.flow_slope(p)).abs() < 1e-6 * fd);
        }
    }

    /// A junction fed from a fixed head `h0` through a link of fixed conductance `k` (Q = k·Δh),
    /// drawing through one law: the Newton iteration of the gradient method (heads and the
    /// outflow together, in correction form) reaches the root of `k (h0 − p) = q(p)` from every
    /// start tried, including far on either side of both kinks.
    #[test]
    fn newton_steps_reach_the_unique_solution_from_any_start() {
        let laws = [
            wagner(),
            PowerLaw::demand(2e-3, 2.0, 20.0, 0.5),
            PowerLaw::demand(2e-3, 0.0, 20.0, 2.0),
            PowerLaw::orifice(5e-3, 0.5),
            PowerLaw::leakage(4e-4, 50.0, 1.18),
            PowerLaw::leakage(4e-4, 50.0, 2.5),
        ];
        for law in laws {
            for (h0, k) in [(10.0f64, 1e-4f64), (30.0, 1e-4), (5.0, 3e-3), (80.0, 2e-5), (-5.0, 1e-4), (19.9999, 1e-3)]
            {
                // Root of k (h0 − p) = q_exact(p), by bisection on the exact relation.
                let (mut lo, mut hi) = (h0.min(law.base) - 1.0, h0.max(law.base) + 1.0);
                for _ in 0..200 {
                    let mid = 0.5 * (lo + hi);
                    if k * (h0 - mid) > law.flow(mid) {
                        lo = mid;
                    } else {
                        hi = mid;
                    }
                }
                let root = 0.5 * (lo + hi);
                for p_start in [-50.0, 0.0, 1e-3, 7.0, 19.99, 20.0, 400.0] {
                    for q_start in [-1.0, 0.0, 1e-9, law.flow * 0.3, law.flow, 10.0 * law.flow] {
                        let (mut p, mut q) = (p_start, q_start);
                        let mut converged = false;
                        for _ in 0..100 {
                            let s = law.step(q, p, W);
                            // Mass balance: k (h0 − (p + δ)) = c + g δ.
                            let delta = (k * (h0 - p) - s.constant) / (k + s.conductance);
                            let q_new = law.advance(s, delta, p + delta);
                            let dq = (q_new - q).abs();
                            q = q_new;
                            p += delta;
                            if delta.abs() < 1e-9 && dq <= 1e-9 * law.flow {
                                converged = true;
                                break;
                            }
                        }
                        assert!(converged, "{law:?} h0={h0} from ({p_start}, {q_start})");
                        assert!((p - root).abs() < W, "{law:?} h0={h0} from ({p_start}, {q_start}): {p} vs {root}");
                    }
                }
            }
        }
    }
}
