//! The ISO 2533:1975 standard atmosphere, for the air pressure over a pump's suction.
//!
//! Below 11 km geopotential altitude the standard atmosphere has a constant temperature
//! gradient, and the hydrostatic equation integrates to
//!
//! ```text
//! T = T₀ + β H,    p = p₀ (T / T₀)^(−g₀ / (β R))
//! ```
//!
//! with `T₀ = 288.15 K`, `p₀ = 101 325 Pa`, `β = −0.0065 K/m`, `g₀ = 9.806 65 m/s²` and the
//! specific gas constant of air `R = 287.052 87 J/(kg K)` (all ISO 2533 constants). `H` is the
//! geopotential altitude, from the geometric elevation `h` of a site by `H = r h / (r + h)` with
//! the standard's nominal earth radius `r = 6 356 766 m`. The standard tabulates the layer from
//! −2 000 m to 11 000 m geopotential, the range accepted here.

/// Sea-level standard pressure, Pa.
pub const SEA_LEVEL_PRESSURE: f64 = 101_325.0;
/// Sea-level standard temperature, K.
pub const SEA_LEVEL_TEMPERATURE: f64 = 288.15;
/// Temperature gradient of the lowest layer, K/m.
pub const LAPSE: f64 = -0.0065;
/// Standard acceleration of free fall, m/s².
pub const G0: f64 = 9.806_65;
/// Specific gas constant of air, J/(kg K).
pub const AIR_GAS_CONSTANT: f64 = 287.052_87;
/// Nominal earth radius of the standard, m.
pub const EARTH_RADIUS: f64 = 6_356_766.0;
/// Lowest elevation accepted, m (the standard's tables begin at −2 000 m).
pub const MIN_ELEVATION: f64 = -2000.0;
/// Highest elevation accepted, m (the top of the lowest layer).
pub const MAX_ELEVATION: f64 = 11_000.0;

/// Geopotential altitude of a geometric elevation `h` (m).
pub fn geopotential(h: f64) -> f64 {
    EARTH_RADIUS * h / (EARTH_RADIUS + h)
}

/// Standard air pressure, Pa, at geopotential altitude `h` (m, −2 000 to 11 000).
pub fn pressure_at_geopotential(h: f64) -> f64 {
    let t = SEA_LEVEL_TEMPERATURE + LAPSE * h;
    SEA_LEVEL_PRESSURE * (t / SEA_LEVEL_TEMPERATURE).powf(-G0 / (LAPSE * AIR_GAS_CONSTANT))
}

/// Standard air pressure, Pa, at the geometric elevation `h` (m above sea level) of a site.
pub fn pressure_at_elevation(h: f64) -> f64 {
    pressure_at_geopotential(geopotential(h))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn iso_2533_table_values() {
        // ISO 2533:1975, table of the standard atmosphere by geopotential altitude (values from
        // memory, also checked in tests/python): 0 m 101 325 Pa, 1 000 m 89 875 Pa,
        // 1 500 m 84 556 Pa, 5 000 m 54 020 Pa.
        for (h, p) in [(0.0, 101_325.0), (1000.0, 89_875.0), (1500.0, 84_556.0), (5000.0, 54_020.0)] {
            let got = pressure_at_geopotential(h);
            assert!((got - p).abs() < 1.0, "p({h}) = {got}, table {p}");
        }
    }

    #[test]
    fn geometric_and_geopotential_differ_slightly() {
        // 1 500 m geometric is 1 499.646 m geopotential (H = r h / (r + h)).
        assert!((geopotential(1500.0) - 1499.646).abs() < 1e-3);
        assert_eq!(geopotential(0.0), 0.0);
    }
}
