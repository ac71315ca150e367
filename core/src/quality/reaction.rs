//! First-order reactions in pipes: in the water and at the wall, the wall's rate limited by the
//! transfer of mass from the water to the wall.
//!
//! The overall rate of a pipe of diameter `d` (Rossman, Clark & Grayman 1994, "Modeling chlorine
//! residuals in drinking-water distribution systems", J. Environ. Eng. 120(4), eq. for a
//! first-order wall reaction in series with mass transfer):
//!
//! ```text
//! k = k_b + sign(k_w) · k_f |k_w| / (R_h (|k_w| + k_f)),   R_h = d/4 (the hydraulic radius)
//! ```
//!
//! so `1/R_h = 2/r` with `r` the radius. The mass-transfer coefficient is `k_f = Sh · D_m / d`
//! with the Sherwood number
//! - turbulent flow (Re ≥ 2300): `Sh = 0.0149 Re^0.88 Sc^(1/3)` (Notter & Sleicher 1971, "A
//!   solution to the turbulent Graetz problem III", Chem. Eng. Sci. 26);
//! - laminar flow (and still water): `Sh = 3.65 + 0.0668 (d/L) Re Sc / (1 + 0.04 ((d/L) Re
//!   Sc)^(2/3))` (Edwards, Denny & Mills 1976, "Transfer processes", the developing-concentration
//!   form for a tube of length L);
//!
//! `Re = 4|Q|/(π d ν)` and `Sc = ν / D_m`. These forms are the ones Rossman, Clark & Grayman
//! (1994) use; checked here from memory of those papers.

use super::constituents::Reaction;

/// Reynolds number at which the turbulent Sherwood relation takes over.
pub const RE_TURBULENT: f64 = 2300.0;

/// Sherwood number of a pipe of diameter `d` and length `l` (m) at Reynolds number `re` and
/// Schmidt number `sc`.
pub fn sherwood(re: f64, sc: f64, d: f64, l: f64) -> f64 {
    if re >= RE_TURBULENT {
        0.0149 * re.powf(0.88) * sc.cbrt()
    } else {
        let g = (d / l) * re * sc;
        3.65 + 0.0668 * g / (1.0 + 0.04 * g.powf(2.0 / 3.0))
    }
}

/// Overall first-order rate (1/s) of a pipe of diameter `d` and length `l` (m) carrying `q`
/// (m³/s) of water of kinematic viscosity `nu` (m²/s).
pub fn pipe_rate(r: &Reaction, d: f64, l: f64, q: f64, nu: f64) -> f64 {
    if r.wall_rate == 0.0 {
        return r.bulk_rate;
    }
    let kw = r.wall_rate.abs();
    let wall = if r.diffusivity > 0.0 {
        let re = 4.0 * q.abs() / (std::f64::consts::PI * d * nu);
        let sc = nu / r.diffusivity;
        let kf = sherwood(re, sc, d, l) * r.diffusivity / d;
        4.0 / d * kw * kf / (kw + kf)
    } else {
        // No diffusivity given: the wall reaction is not limited by mass transfer.
        4.0 / d * kw
    };
    r.bulk_rate + wall.copysign(r.wall_rate)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bulk_only_and_unlimited_wall() {
        let r = Reaction { bulk_rate: -1e-5, wall_rate: 0.0, diffusivity: 1e-9 };
        assert_eq!(pipe_rate(&r, 0.2, 100.0, 0.01, 1e-6), -1e-5);
        // Without a diffusivity the wall term is k_w / R_h = 4 k_w / d.
        let r = Reaction { bulk_rate: 0.0, wall_rate: -1e-6, diffusivity: 0.0 };
        assert!((pipe_rate(&r, 0.2, 100.0, 0.01, 1e-6) + 2e-5).abs() < 1e-18);
    }

    #[test]
    fn mass_transfer_limits_the_wall_rate() {
        // Series resistances: the overall wall rate lies below both k_w/R_h and k_f/R_h.
        let r = Reaction { bulk_rate: 0.0, wall_rate: -1.0 / 86_400.0, diffusivity: 1.21e-9 };
        let (d, l, nu) = (0.15, 300.0, 1.0e-6);
        for q in [0.0, 1e-4, 1e-3, 0.01, 0.05] {
            let k = -pipe_rate(&r, d, l, q, nu);
            let re = 4.0 * q / (std::f64::consts::PI * d * nu);
            let kf = sherwood(re, nu / r.diffusivity, d, l) * r.diffusivity / d;
            assert!(k > 0.0 && k < 4.0 / d * r.wall_rate.abs() && k < 4.0 / d * kf, "q = {q}");
        }
        // More flow, more transfer, faster wall decay.
        assert!(pipe_rate(&r, d, l, 0.05, nu) < pipe_rate(&r, d, l, 0.001, nu));
    }

    #[test]
    fn sherwood_limits() {
        // Still water: the fully developed laminar value 3.65 (Edwards et al. 1976).
        assert_eq!(sherwood(0.0, 826.0, 0.1, 100.0), 3.65);
        // Turbulent: Notter & Sleicher 1971 at Re = 1e5, Sc = 826 (value computed by hand:
        // 0.0149 · 1e5^0.88 · 826^(1/3) = 0.0149 · 25_119 · 9.3837 = 3512).
        let sh = sherwood(1e5, 826.0, 0.1, 100.0);
        assert!((sh - 3512.0).abs() < 5.0, "{sh}");
    }
}
