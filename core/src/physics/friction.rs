//! Friction laws for full pipes: Hazen–Williams and Darcy–Weisbach with Colebrook–White.
//!
//! # Hazen–Williams
//! In its SI velocity form `V = 0.849 C R^0.63 S^0.54`, with hydraulic radius `R = D/4` for a
//! full circular pipe and `S = h/L`. Solving for the head loss of a flow `Q = V π D²/4`:
//!
//! ```text
//! h = K · L · |Q|^n / (C^n · D^m),   n = 1/0.54 = 1.851851…,   m = 2.63/0.54 = 4.870370…
//! K = (0.849 · (π/4) · 4^(-0.63))^(-n) = 10.6742…   (SI: h, L, D in m, Q in m³/s)
//! ```
//!
//! Because the law is evaluated only in SI (US-customary inputs are converted first), SI and US
//! models give identical results; no second, rounded constant is used.
//!
//! # Darcy–Weisbach
//! `h = f · (L/D) · V²/(2g)` with the friction factor `f(Re, ε/D)`:
//! * `Re < 2000`: laminar, `f = 64/Re` (Hagen–Poiseuille).
//! * `Re > 4000`: Colebrook–White, `1/√f = −2 log10(ε/(3.7 D) + 2.51/(Re √f))`, solved by Newton's
//!   method on `x = 1/√f` to machine precision, seeded by the explicit Swamee–Jain formula.
//! * `2000 ≤ Re ≤ 4000`: a cubic Hermite interpolant in Re between the laminar value and slope at
//!   Re = 2000 and the Colebrook–White value and slope at Re = 4000. Value and first derivative
//!   are continuous at both ends, so the Newton iteration of the network solver sees a C¹ law.

use crate::units::GRAVITY;
use std::f64::consts::{LN_10, PI};

/// Hazen–Williams flow exponent, exactly 1/0.54.
pub const HW_FLOW_EXPONENT: f64 = 1.0 / 0.54;
/// Hazen–Williams diameter exponent, exactly 2.63/0.54.
pub const HW_DIAMETER_EXPONENT: f64 = 2.63 / 0.54;

/// The SI Hazen–Williams head-loss constant K (see the module docs), derived from 0.849.
pub fn hazen_williams_constant() -> f64 {
    static K: std::sync::LazyLock<f64> =
        std::sync::LazyLock::new(|| (0.849 * PI / 4.0 * 4f64.powf(-0.63)).powf(-HW_FLOW_EXPONENT));
    *K
}

/// Hazen–Williams resistance `r` in `h = r |Q|^n` (SI), for length `l`, diameter `d`, coefficient `c`.
pub fn hazen_williams_resistance(l: f64, d: f64, c: f64) -> f64 {
    hazen_williams_constant() * l / (c.powf(HW_FLOW_EXPONENT) * d.powf(HW_DIAMETER_EXPONENT))
}

/// Reynolds number below which flow is laminar.
pub const RE_LAMINAR: f64 = 2000.0;
/// Reynolds number above which Colebrook–White applies.
pub const RE_TURBULENT: f64 = 4000.0;

/// Swamee–Jain explicit approximation of Colebrook–White (used only as a starting value).
pub fn swamee_jain(re: f64, relative_roughness: f64) -> f64 {
    let t = (relative_roughness / 3.7 + 5.74 / re.powf(0.9)).log10();
    0.25 / (t * t)
}

/// Colebrook–White friction factor and its derivative df/dRe, solved to machine precision.
pub fn colebrook(re: f64, relative_roughness: f64) -> (f64, f64) {
    let a = relative_roughness / 3.7;
    let b = 2.51 / re;
    let mut x = 1.0 / swamee_jain(re, relative_roughness).sqrt();
    for _ in 0..50 {
        let arg = a + b * x;
        let residual = x + 2.0 * arg.log10();
        let slope = 1.0 + 2.0 / LN_10 * b / arg;
        let step = residual / slope;
        x -= step;
        if step.abs() <= 4.0 * f64::EPSILON * x {
            break;
        }
    }
    let arg = a + b * x;
    // Implicit differentiation of F(x, Re) = x + 2 log10(a + 2.51 x / Re) = 0.
    let f_x = 1.0 + 2.0 / LN_10 * b / arg;
    let f_re = 2.0 / LN_10 * (-b * x / re) / arg;
    let dx_dre = -f_re / f_x;
    let f = 1.0 / (x * x);
    (f, -2.0 / (x * x * x) * dx_dre)
}

/// Darcy friction factor over all regimes and its derivative df/dRe (see the module docs).
pub fn friction_factor(re: f64, relative_roughness: f64) -> (f64, f64) {
    if re < RE_LAMINAR {
        (64.0 / re, -64.0 / (re * re))
    } else if re > RE_TURBULENT {
        colebrook(re, relative_roughness)
    } else {
        let (f0, m0) = (64.0 / RE_LAMINAR, -64.0 / (RE_LAMINAR * RE_LAMINAR));
        let (f1, m1) = colebrook(RE_TURBULENT, relative_roughness);
        let span = RE_TURBULENT - RE_LAMINAR;
        let t = (re - RE_LAMINAR) / span;
        let (t2, t3) = (t * t, t * t * t);
        let h00 = 2.0 * t3 - 3.0 * t2 + 1.0;
        let h10 = t3 - 2.0 * t2 + t;
        let h01 = -2.0 * t3 + 3.0 * t2;
        let h11 = t3 - t2;
        let f = h00 * f0 + h10 * span * m0 + h01 * f1 + h11 * span * m1;
        let d00 = 6.0 * t2 - 6.0 * t;
        let d10 = 3.0 * t2 - 4.0 * t + 1.0;
        let d01 = -6.0 * t2 + 6.0 * t;
        let d11 = 3.0 * t2 - 2.0 * t;
        let df = (d00 * f0 + d10 * span * m0 + d01 * f1 + d11 * span * m1) / span;
        (f, df)
    }
}

/// The friction part of a pipe's resistance, with its coefficients computed once.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Friction {
    /// `h = r |Q|^n sign(Q)`.
    HazenWilliams {
        /// resistance r, s^n/m^(3n-1)
        r: f64,
    },
    /// `h = k f(Re) Q |Q|` with `Re = re_per_flow |Q|`.
    DarcyWeisbach {
        /// L / (2 g D A²)
        k: f64,
        /// Reynolds number per unit flow, D / (A ν)
        re_per_flow: f64,
        /// ε / D
        relative_roughness: f64,
    },
}

impl Friction {
    /// Hazen–Williams friction of a pipe (SI inputs).
    pub fn hazen_williams(length: f64, diameter: f64, c: f64) -> Self {
        Friction::HazenWilliams { r: hazen_williams_resistance(length, diameter, c) }
    }

    /// Darcy–Weisbach friction of a pipe (SI inputs; `roughness` is the absolute roughness).
    pub fn darcy_weisbach(length: f64, diameter: f64, roughness: f64, kinematic_viscosity: f64) -> Self {
        let area = PI * diameter * diameter / 4.0;
        Friction::DarcyWeisbach {
            k: length / (2.0 * GRAVITY * diameter * area * area),
            re_per_flow: diameter / (area * kinematic_viscosity),
            relative_roughness: roughness / diameter,
        }
    }

    /// Head loss and its derivative with respect to flow, at flow `q` (m³/s).
    #[inline]
    pub fn evaluate(&self, q: f64) -> (f64, f64) {
        let a = q.abs();
        match *self {
            Friction::HazenWilliams { r } => {
                if a == 0.0 {
                    return (0.0, 0.0);
                }
                let h = r * super::flow_power::hw_flow_power(a);
                (h.copysign(q), HW_FLOW_EXPONENT * h / a)
            }
            Friction::DarcyWeisbach { k, re_per_flow, relative_roughness } => {
                let re = re_per_flow * a;
                if re < RE_LAMINAR {
                    // f = 64/Re makes the law linear in Q: h = k 64 / re_per_flow · Q.
                    let c = k * 64.0 / re_per_flow;
                    return (c * q, c);
                }
                let (f, df) = friction_factor(re, relative_roughness);
                // d/dQ [k f Q|Q|] = k (2 f |Q| + f'(Re) Re |Q|), since dRe/dQ = Re/|Q|.
                (k * f * q * a, k * a * (2.0 * f + df * re))
            }
        }
    }
}

/// Minor-loss coefficient m in `h = m Q|Q|` for a sum of loss coefficients `k_sum` on a pipe of
/// diameter `d` (h = K V²/2g).
pub fn minor_loss_coefficient(k_sum: f64, d: f64) -> f64 {
    let area = PI * d * d / 4.0;
    k_sum / (2.0 * GRAVITY * area * area)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hazen_williams_constant_value() {
        // The familiar rounded SI constant is 10.67 (common practice); ours is derived exactly.
        let k = hazen_williams_constant();
        assert!((k - 10.674).abs() < 5e-3, "{k}");
    }

    #[test]
    fn friction_is_c1_at_the_regime_boundaries() {
        for rr in [0.0, 1e-4, 1e-3, 1e-2] {
            for re in [RE_LAMINAR, RE_TURBULENT] {
                let (fa, da) = friction_factor(re * (1.0 - 1e-9), rr);
                let (fb, db) = friction_factor(re * (1.0 + 1e-9), rr);
                assert!((fa - fb).abs() < 1e-9, "value jump at Re={re}, rr={rr}");
                assert!((da - db).abs() < 1e-9 * da.abs().max(1e-12) + 1e-12, "slope jump at Re={re}");
            }
        }
    }

    #[test]
    fn colebrook_satisfies_its_equation() {
        for re in [4e3, 1e5, 1e7, 1e8] {
            for rr in [0.0, 1e-5, 1e-3, 5e-2] {
                let (f, _) = colebrook(re, rr);
                let lhs = 1.0 / f.sqrt();
                let rhs = -2.0 * (rr / 3.7 + 2.51 / (re * f.sqrt())).log10();
                assert!((lhs - rhs).abs() < 1e-13 * lhs, "Re={re} rr={rr}");
            }
        }
    }

    #[test]
    fn derivatives_match_finite_differences() {
        let laws = [Friction::hazen_williams(500.0, 0.2, 110.0), Friction::darcy_weisbach(500.0, 0.2, 2e-4, 1.0e-6)];
        for law in laws {
            for q in [-0.05, -1e-3, 1e-5, 3e-3, 0.02, 0.3] {
                let (_, d) = law.evaluate(q);
                let e = 1e-7 * q.abs();
                let fd = (law.evaluate(q + e).0 - law.evaluate(q - e).0) / (2.0 * e);
                assert!((d - fd).abs() <= 1e-5 * d.abs(), "{law:?} q={q}: {d} vs {fd}");
            }
        }
    }
}
