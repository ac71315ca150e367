//! The Hazen–Williams flow power `a^n` (`n` = 1/0.54, [`HW_FLOW_EXPONENT`]) by tables and a
//! short series: the solver's hottest evaluation.
//!
//! # Why
//! Every Newton step, chord step and held solve evaluates `r |Q|^n` for every pipe of the
//! network's core. `exp(n ln a)` costs two calls of the mathematical library on one chain of
//! dependent operations; in the fire-flow analysis and the each-pipe-closed sweep those calls
//! were about a fifth of all the time (perf, the generated 2,000- and 10,000-junction networks).
//!
//! # How
//! With `a = 2^e m`, `m ∈ [1, 2)`, `j` the top eight bits of `m`'s fraction and
//! `c_j = 1 + (j + ½)/256` the centre of that bin (exact in binary),
//!
//! ```text
//! a^n = 2^(e n) · c_j^n · (1 + t)^n,   t = (m − c_j) / c_j,
//! ```
//!
//! where `2^(e n)` and `c_j^n` come from tables of the f64 nearest the exact value (`table`,
//! made by `scripts/power_table.py` in 60-digit decimal arithmetic). `m − c_j` is exact (two
//! numbers of one binade), and `t` is that difference times the table's nearest reciprocal of
//! `c_j`: within two units of its last place, `|t| ≤ 2⁻⁹`. The binomial series
//! `(1 + t)^n = Σ C(n, k) t^k` to `k = 5` leaves out less than 2e-19 of the result
//! (`C(n, 6) t⁶`; the coefficients fall fast because `n` is near 2), and its rounding errors
//! after the leading one are scaled by `t`. So each of the three factors is within about a unit
//! in the last place and the product within about three (the tests check it against `powf` over
//! the whole range): as accurate as `exp(n ln a)`, whose rounding of `n ln a` alone is worth
//! several units, at a fraction of its cost. No fused multiply-add: without the target feature
//! it is a library call. Outside the tables' binary exponents (`a` below 2⁻¹²⁸ ≈ 3e-39 or at or
//! above 2¹²⁸, no flow of a network in m³/s), and for zero, infinities and NaN, it falls back
//! to the standard library's `powf`.

mod table;

use crate::physics::friction::HW_FLOW_EXPONENT;
use table::{BINOMIAL, E_MAX, E_MIN, MANTISSA, RECIPROCAL, SCALE};

/// `a^n` for `a > 0` (finite), `n` = [`HW_FLOW_EXPONENT`]; see the [module docs](self).
#[inline]
pub fn hw_flow_power(a: f64) -> f64 {
    let bits = a.to_bits();
    let e = ((bits >> 52) & 0x7ff) as i64 - 1023;
    if !(E_MIN..=E_MAX).contains(&e) {
        return a.powf(HW_FLOW_EXPONENT);
    }
    let j = ((bits >> 44) & 0xff) as usize;
    let m = f64::from_bits((bits & 0x000f_ffff_ffff_ffff) | 0x3ff0_0000_0000_0000);
    // The bin's centre: the fraction's top eight bits and the half below them.
    let centre = f64::from_bits((bits & 0x000f_f000_0000_0000) | 0x3ff0_0800_0000_0000);
    let t = (m - centre) * f64::from_bits(RECIPROCAL[j]);
    let [c1, c2, c3, c4, c5] = BINOMIAL;
    let series = 1.0 + t * (c1 + t * (c2 + t * (c3 + t * (c4 + t * c5))));
    f64::from_bits(SCALE[(e - E_MIN) as usize]) * (f64::from_bits(MANTISSA[j]) * series)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Units in the last place between `x` and `reference`.
    fn ulps(x: f64, reference: f64) -> f64 {
        if x == reference {
            return 0.0;
        }
        ((x - reference) / (reference.abs() * f64::EPSILON)).abs()
    }

    /// `2^(e n)` to within about a unit: `n` split so that `e n_hi` is exact (`n_hi` keeps 29
    /// significant bits, `|e| ≤ 2⁷`), and `2^(e n_lo) − 1` by `exp_m1` (`e n_lo` is below 1e-6).
    /// `2f64.powf(e as f64 * n)` would round `e n` first, tens of units off for large `e`.
    fn two_to_the(e: i64) -> f64 {
        let n_hi = f64::from_bits(HW_FLOW_EXPONENT.to_bits() & !0xff_ffff);
        let n_lo = HW_FLOW_EXPONENT - n_hi;
        let e = e as f64;
        let p = 2f64.powf(e * n_hi);
        p + p * (e * n_lo * std::f64::consts::LN_2).exp_m1()
    }

    /// Every table entry against the standard library's `powf` (within a unit of the exact
    /// value): a corrupted or miscomputed entry would be off by far more.
    #[test]
    fn the_tables_agree_with_powf() {
        for (i, &bits) in SCALE.iter().enumerate() {
            let e = E_MIN + i as i64;
            assert!(ulps(f64::from_bits(bits), two_to_the(e)) < 2.0, "2^({e} n)");
        }
        for j in 0..256u64 {
            let centre = 1.0 + (j as f64 + 0.5) / 256.0;
            assert_eq!(centre.to_bits(), 0x3ff0_0800_0000_0000 | (j << 44), "centre {j}");
            assert!(ulps(f64::from_bits(RECIPROCAL[j as usize]), 1.0 / centre) <= 0.5, "reciprocal {j}");
            let reference = centre.powf(HW_FLOW_EXPONENT);
            assert!(ulps(f64::from_bits(MANTISSA[j as usize]), reference) < 2.0, "mantissa {j}");
        }
    }

    /// The power against `powf` (within a unit of the exact value) over the flows of any
    /// network and far beyond, at the edges of every table bin and at random points: within
    /// four units in the last place (the two roundings of `powf` and ours).
    #[test]
    fn the_power_is_within_a_few_units_of_powf() {
        let mut worst: f64 = 0.0;
        let mut check = |a: f64| {
            let (ours, reference) = (hw_flow_power(a), a.powf(HW_FLOW_EXPONENT));
            worst = worst.max(ulps(ours, reference));
            assert!(ulps(ours, reference) < 4.0, "{a:e}: {ours:e} against {reference:e}");
        };
        // Every bin edge of every binary exponent the tables serve, and the points beside them.
        for e in E_MIN..=E_MAX {
            for j in 0..256u64 {
                let bits = (((e + 1023) as u64) << 52) | (j << 44);
                for a in [f64::from_bits(bits), f64::from_bits(bits + 1), f64::from_bits(bits + (1 << 44) - 1)] {
                    check(a);
                }
            }
        }
        // Random flows from 1e-12 to 1e4 m³/s (a fixed generator: reproducible).
        let mut state = 0x9e37_79b9_7f4a_7c15u64;
        for _ in 0..200_000 {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            let u = (state >> 11) as f64 / (1u64 << 53) as f64;
            check(10f64.powf(-12.0 + 16.0 * u));
        }
        // Outside the tables: the fallback (`exp(n ln a)` there was 43 units off at 2⁻¹²⁹).
        for a in [1e-300, 5e-324, 2f64.powi(-129), 2f64.powi(128), 1e300] {
            check(a);
        }
        assert!(worst > 0.0, "the comparison compared nothing");
    }

    /// One, two and the edges of the fallback, where the exact value is known.
    #[test]
    fn known_values() {
        assert!(ulps(hw_flow_power(1.0), 1.0) <= 1.0);
        assert!(ulps(hw_flow_power(2.0), 2f64.powf(HW_FLOW_EXPONENT)) <= 1.0);
        assert_eq!(hw_flow_power(0.0), 0.0);
        assert_eq!(hw_flow_power(f64::INFINITY), f64::INFINITY);
        assert!(hw_flow_power(f64::NAN).is_nan());
    }
}
