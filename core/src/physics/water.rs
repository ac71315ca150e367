//! Properties of liquid water at atmospheric pressure from the IAPWS formulations.
//!
//! * Density: IAPWS Industrial Formulation 1997 (IF97), region 1 (compressed liquid),
//!   evaluated at p = 101.325 kPa. Valid for 0 °C ≤ t < 100 °C at that pressure.
//! * Dynamic viscosity: IAPWS 2008 formulation for the viscosity of ordinary water substance
//!   (Huber et al. 2009, J. Phys. Chem. Ref. Data 38(2)), without the critical enhancement, which
//!   the release says may be taken as 1 outside a small region around the critical point.
//!
//! Kinematic viscosity is the ratio ν = μ / ρ.

/// Specific gas constant of water in IF97, J/(kg·K).
const R_IF97: f64 = 461.526;
/// Standard atmosphere, Pa.
pub const ATMOSPHERE: f64 = 101_325.0;
/// 0 °C in kelvin.
pub const ZERO_CELSIUS: f64 = 273.15;

/// IF97 region 1 coefficients (I, J, n), table 2 of the release (transcription checked
/// coefficient by coefficient against the `iapws` Python package).
const IF97_R1: [(i32, i32, f64); 34] = [
    (0, -2, 0.146_329_712_131_67),
    (0, -1, -0.845_481_871_691_14),
    (0, 0, -0.375_636_036_720_40e1),
    (0, 1, 0.338_551_691_683_85e1),
    (0, 2, -0.957_919_633_878_72),
    (0, 3, 0.157_720_385_132_28),
    (0, 4, -0.166_164_171_995_01e-1),
    (0, 5, 0.812_146_299_835_68e-3),
    (1, -9, 0.283_190_801_238_04e-3),
    (1, -7, -0.607_063_015_658_74e-3),
    (1, -1, -0.189_900_682_184_19e-1),
    (1, 0, -0.325_297_487_705_05e-1),
    (1, 1, -0.218_417_171_754_14e-1),
    (1, 3, -0.528_383_579_699_30e-4),
    (2, -3, -0.471_843_210_732_67e-3),
    (2, 0, -0.300_017_807_930_26e-3),
    (2, 1, 0.476_613_939_069_87e-4),
    (2, 3, -0.441_418_453_308_46e-5),
    (2, 17, -0.726_949_962_975_94e-15),
    (3, -4, -0.316_796_448_450_54e-4),
    (3, 0, -0.282_707_979_853_12e-5),
    (3, 6, -0.852_051_281_201_03e-9),
    (4, -5, -0.224_252_819_080_00e-5),
    (4, -2, -0.651_712_228_956_01e-6),
    (4, 10, -0.143_417_299_379_24e-12),
    (5, -8, -0.405_169_968_601_17e-6),
    (8, -11, -0.127_343_017_416_41e-8),
    (8, -6, -0.174_248_712_306_34e-9),
    (21, -29, -0.687_621_312_955_31e-18),
    (23, -31, 0.144_783_078_285_21e-19),
    (29, -38, 0.263_357_816_627_95e-22),
    (30, -39, -0.119_476_226_400_71e-22),
    (31, -40, 0.182_280_945_814_04e-23),
    (32, -41, -0.935_370_872_924_58e-25),
];

/// Density of liquid water by IF97 region 1, kg/m³, at `temperature` K and `pressure` Pa.
pub fn density_if97(temperature: f64, pressure: f64) -> f64 {
    let pi = pressure / 16.53e6;
    let tau = 1386.0 / temperature;
    let gamma_pi: f64 =
        IF97_R1.iter().map(|&(i, j, n)| -n * f64::from(i) * (7.1 - pi).powi(i - 1) * (tau - 1.222).powi(j)).sum();
    let specific_volume = R_IF97 * temperature / pressure * pi * gamma_pi;
    1.0 / specific_volume
}

/// IF97 region 4 (saturation line) coefficients n1..n10, table 34 of the release (transcription
/// checked against the `iapws` Python package, which caught a mistyped n2).
const IF97_R4: [f64; 10] = [
    0.116_705_214_527_67e4,
    -0.724_213_167_032_06e6,
    -0.170_738_469_400_92e2,
    0.120_208_247_024_70e5,
    -0.323_255_503_223_33e7,
    0.149_151_086_135_30e2,
    -0.482_326_573_615_91e4,
    0.405_113_405_420_57e6,
    -0.238_555_575_678_49,
    0.650_175_348_447_98e3,
];

/// Saturation (vapour) pressure of water by IF97 region 4, Pa, at `temperature` K
/// (273.15 K to 647.096 K): the explicit form of the saturation-pressure equation, eq. 30 of the
/// release.
pub fn saturation_pressure_if97(temperature: f64) -> f64 {
    let n = &IF97_R4;
    let theta = temperature + n[8] / (temperature - n[9]);
    let a = theta * theta + n[0] * theta + n[1];
    let b = n[2] * theta * theta + n[3] * theta + n[4];
    let c = n[5] * theta * theta + n[6] * theta + n[7];
    let x = 2.0 * c / (-b + (b * b - 4.0 * a * c).sqrt());
    x.powi(4) * 1e6
}

/// IAPWS 2008 viscosity, coefficients H_i of the ideal-gas term μ0.
const VISC_H0: [f64; 4] = [1.677_52, 2.204_62, 0.636_656_4, -0.241_605];
/// IAPWS 2008 viscosity, coefficients H_ij of the residual term μ1 (i = 0..5, j = 0..6).
const VISC_H1: [[f64; 7]; 6] = [
    [5.200_94e-1, 2.225_31e-1, -2.813_78e-1, 1.619_13e-1, -3.253_72e-2, 0.0, 0.0],
    [8.508_95e-2, 9.991_15e-1, -9.068_51e-1, 2.573_99e-1, 0.0, 0.0, 0.0],
    [-1.083_74, 1.887_97, -7.724_79e-1, 0.0, 0.0, 0.0, 0.0],
    [-2.895_55e-1, 1.266_13, -4.898_37e-1, 0.0, 6.984_52e-2, 0.0, -4.356_73e-3],
    [0.0, 0.0, -2.570_40e-1, 0.0, 0.0, 8.721_02e-3, 0.0],
    [0.0, 1.205_73e-1, 0.0, 0.0, 0.0, 0.0, -5.932_64e-4],
];

/// Dynamic viscosity by IAPWS 2008 (no critical enhancement), Pa·s, at `temperature` K and
/// `density` kg/m³.
pub fn viscosity_iapws2008(temperature: f64, density: f64) -> f64 {
    let t = temperature / 647.096;
    let r = density / 322.0;
    let mu0 = 100.0 * t.sqrt() / VISC_H0.iter().enumerate().map(|(i, h)| h / t.powi(i as i32)).sum::<f64>();
    let mut sum = 0.0;
    for (i, row) in VISC_H1.iter().enumerate() {
        let inner: f64 = row.iter().enumerate().map(|(j, h)| h * (r - 1.0).powi(j as i32)).sum();
        sum += (1.0 / t - 1.0).powi(i as i32) * inner;
    }
    let mu1 = (r * sum).exp();
    mu0 * mu1 * 1e-6
}

/// Density and kinematic viscosity of water at a temperature in °C and atmospheric pressure.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct WaterProperties {
    /// Temperature, °C.
    pub temperature_celsius: f64,
    /// Density, kg/m³.
    pub density: f64,
    /// Dynamic viscosity, Pa·s.
    pub dynamic_viscosity: f64,
    /// Kinematic viscosity, m²/s.
    pub kinematic_viscosity: f64,
}

impl WaterProperties {
    /// Vapour (saturation) pressure at this temperature, Pa (IAPWS-IF97 region 4).
    pub fn vapour_pressure(&self) -> f64 {
        saturation_pressure_if97(self.temperature_celsius + ZERO_CELSIUS)
    }
}

impl WaterProperties {
    /// Lowest accepted water temperature, °C.
    pub const MIN_CELSIUS: f64 = 0.0;
    /// Highest accepted water temperature, °C (just below boiling at one atmosphere).
    pub const MAX_CELSIUS: f64 = 99.0;
    /// The default design temperature, °C.
    pub const DEFAULT_CELSIUS: f64 = 20.0;

    /// Properties at `celsius` (callers check the range [`Self::MIN_CELSIUS`, `Self::MAX_CELSIUS`]).
    pub fn at_celsius(celsius: f64) -> Self {
        let t = celsius + ZERO_CELSIUS;
        let density = density_if97(t, ATMOSPHERE);
        let mu = viscosity_iapws2008(t, density);
        WaterProperties {
            temperature_celsius: celsius,
            density,
            dynamic_viscosity: mu,
            kinematic_viscosity: mu / density,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn if97_verification_values() {
        // IF97 release, table 5 (values recalled from the release; the Python reference tests
        // cross-check density against the `iapws` package): v(300 K, 3 MPa) = 0.100215168e-2 m3/kg,
        // v(300 K, 80 MPa) = 0.971180894e-3, v(500 K, 3 MPa) = 0.120241800e-2.
        for (t, p, v) in
            [(300.0, 3e6, 0.100_215_168e-2), (300.0, 80e6, 0.971_180_894e-3), (500.0, 3e6, 0.120_241_800e-2)]
        {
            let got = 1.0 / density_if97(t, p);
            assert!((got - v).abs() / v < 1e-8, "v({t}, {p}) = {got}, published {v}");
        }
    }

    #[test]
    fn if97_saturation_verification_values() {
        // IF97 release, table 35 (values recalled from the release; the Python reference tests
        // cross-check against the `iapws` package): p_s(300 K) = 0.353658941e-2 MPa,
        // p_s(500 K) = 0.263889776e1 MPa, p_s(600 K) = 0.123443146e2 MPa.
        for (t, p) in [(300.0, 0.353_658_941e-2), (500.0, 0.263_889_776e1), (600.0, 0.123_443_146e2)] {
            let got = saturation_pressure_if97(t) / 1e6;
            assert!((got - p).abs() / p < 2e-9, "p_s({t}) = {got}, published {p}");
        }
    }

    #[test]
    fn iapws2008_check_values() {
        // IAPWS 2008 release, table 4 (no critical enhancement in these rows; values recalled from
        // the release, and cross-checked against the `iapws` package in the Python tests):
        // 298.15 K, 998 kg/m3 -> 889.735100 uPa s; 298.15 K, 1200 kg/m3 -> 1437.649467;
        // 373.15 K, 1000 kg/m3 -> 307.883622.
        for (t, rho, mu) in
            [(298.15, 998.0, 889.735_100), (298.15, 1200.0, 1_437.649_467), (373.15, 1000.0, 307.883_622)]
        {
            let got = viscosity_iapws2008(t, rho) * 1e6;
            assert!((got - mu).abs() < 1e-5, "mu({t}, {rho}) = {got}, published {mu}");
        }
    }
}
