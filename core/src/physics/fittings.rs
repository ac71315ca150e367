//! Loss coefficients K of named pipe fittings (h = K V²/2g, V the link's own mean velocity).
//!
//! A link may list its fittings by kind instead of summing their K by hand. Each fitting's K is
//! computed by one of three published methods, chosen for the whole model by
//! `[hydraulics] fittings_method`:
//!
//! * **equivalent length** (Crane Co., *Flow of Fluids Through Valves, Fittings, and Pipe*,
//!   Technical Paper No. 410): `K = (L/D) f_T`, with the L/D of each fitting from the paper's
//!   table (standard 90° elbow 30, gate valve fully open 8, globe valve 340, swing check valve
//!   100, tee flow through run 20, tee flow through branch 60) and `f_T` the paper's friction
//!   factor of clean commercial steel in fully turbulent flow at the pipe's size. `f_T` is
//!   reproduced here by the Colebrook–White equation at `Re = 7.5·10⁶ D` and relative roughness
//!   `3.4127·10⁻⁵ D^−1.0112` (D in metres), a published fit of the paper's table.
//! * **two-K** (Hooper, W. B., 1981, "The two-K method predicts head losses in pipe fittings",
//!   *Chemical Engineering* 88(17), 96–100): `K = K₁/Re + K∞ (1 + 1/D_in)`.
//! * **three-K** (Darby, R., 2001, "Correlate pressure drops through fittings", *Chemical
//!   Engineering* 108(4), 127–130): `K = K₁/Re + K_i (1 + K_d / D_in^0.3)`.
//!
//! `D_in` is the inside diameter in inches and `Re` the link's own Reynolds number at its flow.
//! Where the two-K and three-K tables distinguish screwed from flanged or welded fittings, the
//! flanged/welded row is used (water mains are flanged or welded). Under both K methods the
//! sharp-edged (flush, square) entrance is Hooper's entrance form `K = 160/Re + 0.5` without a
//! size term; under every method the exit is `K = 1.0` (the whole velocity head is lost, common
//! practice) and the sharp entrance loses at least 0.5 velocity heads (common practice).
//!
//! **Bends** of any radius and angle, under every method, follow Rennels & Hudson (2012, *Pipe
//! Flow: A Practical and Comprehensive Guide*, Wiley, eq. for smooth-walled bends):
//!
//! ```text
//! K = f α r/D + (0.10 + 2.4 f) sin(α/2) + 6.6 f (√sin(α/2) + sin(α/2)) / (r/D)^(4α/π)
//! ```
//!
//! with α the bend angle in radians, r/D the bend radius in pipe diameters (at least 0.5: a
//! tighter bend is a mitre, not a bend) and `f` the pipe's own Darcy friction factor at its flow
//! (for a Hazen–Williams pipe, the Darcy factor that gives the same friction loss at that flow).
//!
//! A **partly open gate valve** adds to its fully open K the rise of the curve of K against
//! opening tabulated in Perry's *Chemical Engineers' Handbook* (7th ed., 1997, Table 6-4, after
//! the Hydraulic Institute; values quoted from memory and checked against the 2–6 band that
//! chart readings give at half open, common practice): K = 0.17 fully open, 0.9 at ¾ open, 4.5 at
//! ½ open, 24 at ¼ open. Between the tabulated openings K is interpolated linearly in ln K; below
//! ¼ open it follows the orifice form `K = (c/x − 1)²` (K of a sharp restriction of open-area
//! fraction about x, common practice), with `c` chosen to meet 24 at ¼ open, so that K grows
//! without bound as the valve closes.
//!
//! Every K here is the sum of three parts, `K = C + R/Re + F f`: a constant, a part falling with
//! the Reynolds number and a part proportional to the friction factor ([`KParts`]). The
//! network solver turns each part into a term of the link's head-loss law with an exact slope
//! (see `solve::links`).

use crate::physics::friction::colebrook;
use std::f64::consts::PI;

/// Metres per inch (exact, international inch).
const INCH: f64 = 0.0254;

/// How the K of the listed fittings is computed (`[hydraulics] fittings_method`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum FittingsMethod {
    /// `K = (L/D) f_T` with Crane TP-410's L/D and fully turbulent friction factor.
    EquivalentLength,
    /// Hooper's two-K method (1981).
    TwoK,
    /// Darby's three-K method (2001).
    #[default]
    ThreeK,
}

impl FittingsMethod {
    /// Every method, in the order the docs list them.
    pub const ALL: &'static [FittingsMethod] =
        &[FittingsMethod::EquivalentLength, FittingsMethod::TwoK, FittingsMethod::ThreeK];

    /// The name used in model files.
    pub fn label(self) -> &'static str {
        match self {
            FittingsMethod::EquivalentLength => "equivalent-length",
            FittingsMethod::TwoK => "two-k",
            FittingsMethod::ThreeK => "three-k",
        }
    }

    /// Parses a model-file name.
    pub fn parse(text: &str) -> Option<Self> {
        Self::ALL.iter().copied().find(|m| m.label() == text)
    }
}

/// The kinds of fitting a link may list.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FittingKind {
    /// A sharp-edged (flush, square) entrance from a tank or reservoir into the pipe.
    EntranceSharp,
    /// A standard 90° elbow (r/D about 1), flanged or welded.
    Elbow90,
    /// A smooth bend of a given radius (in pipe diameters) and angle.
    Bend,
    /// A full-bore gate valve, fully or partly open.
    GateValve,
    /// A standard globe valve, fully open.
    GlobeValve,
    /// A swing check valve, fully open.
    CheckValveSwing,
    /// A tee with the flow turning through its branch.
    TeeBranch,
    /// A tee with the flow going straight through its run.
    TeeRun,
    /// The exit from the pipe into a tank or reservoir.
    Exit,
}

/// Hooper's two-K constants of a fitting: (K₁, K∞).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TwoK {
    /// K₁, multiplies 1/Re.
    pub k1: f64,
    /// K∞, the fully turbulent K of a 1-inch fitting over two.
    pub k_inf: f64,
}

/// Darby's three-K constants of a fitting: (K₁, K_i, K_d).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ThreeK {
    /// K₁, multiplies 1/Re.
    pub k1: f64,
    /// K_i.
    pub k_i: f64,
    /// K_d, of the size term `K_d / D_in^0.3`.
    pub k_d: f64,
}

impl FittingKind {
    /// Every kind, in the order `ringmain fittings` lists them.
    pub const ALL: &'static [FittingKind] = &[
        FittingKind::EntranceSharp,
        FittingKind::Elbow90,
        FittingKind::Bend,
        FittingKind::GateValve,
        FittingKind::GlobeValve,
        FittingKind::CheckValveSwing,
        FittingKind::TeeBranch,
        FittingKind::TeeRun,
        FittingKind::Exit,
    ];

    /// The name used in model files.
    pub fn label(self) -> &'static str {
        match self {
            FittingKind::EntranceSharp => "entrance-sharp",
            FittingKind::Elbow90 => "elbow-90",
            FittingKind::Bend => "bend",
            FittingKind::GateValve => "gate-valve",
            FittingKind::GlobeValve => "globe-valve",
            FittingKind::CheckValveSwing => "check-valve-swing",
            FittingKind::TeeBranch => "tee-branch",
            FittingKind::TeeRun => "tee-run",
            FittingKind::Exit => "exit",
        }
    }

    /// Parses a model-file name.
    pub fn parse(text: &str) -> Option<Self> {
        Self::ALL.iter().copied().find(|k| k.label() == text)
    }

    /// A one-line description.
    pub fn describe(self) -> &'static str {
        match self {
            FittingKind::EntranceSharp => "sharp-edged (flush, square) entrance from a tank or reservoir",
            FittingKind::Elbow90 => "standard 90-degree elbow (r/D about 1), flanged or welded",
            FittingKind::Bend => "smooth bend of any radius and angle",
            FittingKind::GateValve => "full-bore gate valve, fully or partly open",
            FittingKind::GlobeValve => "standard globe valve, fully open",
            FittingKind::CheckValveSwing => "swing check valve, fully open",
            FittingKind::TeeBranch => "tee, flow turning through the branch (flanged or welded)",
            FittingKind::TeeRun => "tee, flow straight through the run (flanged or welded)",
            FittingKind::Exit => "exit from the pipe into a tank or reservoir",
        }
    }

    /// The optional keys this kind takes besides `kind` and `count`.
    pub fn parameters(self) -> &'static [&'static str] {
        match self {
            FittingKind::Bend => &["radius", "angle"],
            FittingKind::GateValve => &["opening"],
            _ => &[],
        }
    }

    /// Crane TP-410's equivalent length L/D, for the kinds that have one.
    pub fn crane_l_over_d(self) -> Option<f64> {
        match self {
            FittingKind::Elbow90 => Some(30.0),
            FittingKind::GateValve => Some(8.0),
            FittingKind::GlobeValve => Some(340.0),
            FittingKind::CheckValveSwing => Some(100.0),
            FittingKind::TeeRun => Some(20.0),
            FittingKind::TeeBranch => Some(60.0),
            _ => None,
        }
    }

    /// Hooper's two-K constants (flanged/welded rows), for the kinds that have them.
    pub fn two_k(self) -> Option<TwoK> {
        let (k1, k_inf) = match self {
            FittingKind::EntranceSharp => (160.0, 0.5),
            FittingKind::Elbow90 => (800.0, 0.25),
            FittingKind::GateValve => (300.0, 0.10),
            FittingKind::GlobeValve => (1500.0, 4.0),
            FittingKind::CheckValveSwing => (1500.0, 1.5),
            FittingKind::TeeBranch => (800.0, 0.80),
            FittingKind::TeeRun => (150.0, 0.05),
            FittingKind::Exit => (0.0, 1.0),
            FittingKind::Bend => return None,
        };
        Some(TwoK { k1, k_inf })
    }

    /// Darby's three-K constants (flanged/welded rows), for the kinds that have them. The sharp
    /// entrance and the exit take Hooper's forms under this method too (see the module docs).
    pub fn three_k(self) -> Option<ThreeK> {
        let (k1, k_i, k_d) = match self {
            FittingKind::Elbow90 => (800.0, 0.091, 4.0),
            FittingKind::GateValve => (300.0, 0.037, 3.9),
            FittingKind::GlobeValve => (1500.0, 1.7, 3.6),
            FittingKind::CheckValveSwing => (1500.0, 0.46, 4.0),
            FittingKind::TeeBranch => (800.0, 0.28, 4.0),
            FittingKind::TeeRun => (150.0, 0.05, 4.0),
            FittingKind::EntranceSharp | FittingKind::Exit | FittingKind::Bend => return None,
        };
        Some(ThreeK { k1, k_i, k_d })
    }
}

/// One entry of a link's `fittings` list, checked.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Fitting {
    /// What it is.
    pub kind: FittingKind,
    /// How many of them (at least 1).
    pub count: u32,
    /// Bend radius in pipe diameters r/D (bends only, at least [`Fitting::MIN_RADIUS`]).
    pub radius: f64,
    /// Bend angle, degrees (bends only, above 0 and at most 180).
    pub angle: f64,
    /// Fraction open, 0 < opening ≤ 1 (gate valves only).
    pub opening: f64,
}

/// The three parts of a K: `K = constant + per_reynolds / Re + per_friction · f`.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct KParts {
    /// The part independent of the flow.
    pub constant: f64,
    /// The part divided by the Reynolds number.
    pub per_reynolds: f64,
    /// The part multiplied by the Darcy friction factor.
    pub per_friction: f64,
}

impl KParts {
    /// K at Reynolds number `re` and Darcy friction factor `f`.
    pub fn at(&self, re: f64, f: f64) -> f64 {
        self.constant + self.per_reynolds / re + self.per_friction * f
    }

    fn scaled(self, by: f64) -> KParts {
        KParts {
            constant: self.constant * by,
            per_reynolds: self.per_reynolds * by,
            per_friction: self.per_friction * by,
        }
    }

    fn plus(self, other: KParts) -> KParts {
        KParts {
            constant: self.constant + other.constant,
            per_reynolds: self.per_reynolds + other.per_reynolds,
            per_friction: self.per_friction + other.per_friction,
        }
    }
}

impl Fitting {
    /// The tightest bend accepted, r/D.
    pub const MIN_RADIUS: f64 = 0.5;
    /// The default bend angle, degrees.
    pub const DEFAULT_ANGLE: f64 = 90.0;

    /// One fitting of `kind` with the default parameters (a bend of r/D 1.5).
    pub fn new(kind: FittingKind) -> Self {
        Fitting { kind, count: 1, radius: 1.5, angle: Self::DEFAULT_ANGLE, opening: 1.0 }
    }

    /// The parts of this entry's K (all `count` fittings) under `method` in a link of inside
    /// diameter `diameter` (m).
    pub fn k_parts(&self, method: FittingsMethod, diameter: f64) -> KParts {
        let one = match self.kind {
            FittingKind::Bend => rennels_bend_parts(self.radius, self.angle),
            FittingKind::Exit => KParts { constant: 1.0, ..KParts::default() },
            FittingKind::EntranceSharp => match method {
                FittingsMethod::EquivalentLength => KParts { constant: 0.5, ..KParts::default() },
                // Hooper's entrance form, no size term, under both K methods.
                FittingsMethod::TwoK | FittingsMethod::ThreeK => {
                    KParts { constant: 0.5, per_reynolds: 160.0, per_friction: 0.0 }
                }
            },
            kind => {
                let mut parts = match method {
                    FittingsMethod::EquivalentLength => KParts {
                        constant: kind.crane_l_over_d().unwrap_or(0.0) * crane_turbulent_friction(diameter),
                        ..KParts::default()
                    },
                    FittingsMethod::TwoK => {
                        let c = kind.two_k().unwrap_or(TwoK { k1: 0.0, k_inf: 0.0 });
                        KParts { constant: c.k_inf * (1.0 + INCH / diameter), per_reynolds: c.k1, per_friction: 0.0 }
                    }
                    FittingsMethod::ThreeK => {
                        let c = kind.three_k().unwrap_or(ThreeK { k1: 0.0, k_i: 0.0, k_d: 0.0 });
                        KParts {
                            constant: c.k_i * (1.0 + c.k_d / (diameter / INCH).powf(0.3)),
                            per_reynolds: c.k1,
                            per_friction: 0.0,
                        }
                    }
                };
                if kind == FittingKind::GateValve {
                    parts.constant += gate_valve_closing_k(self.opening);
                }
                parts
            }
        };
        one.scaled(f64::from(self.count))
    }
}

/// The summed K parts of a list of fittings.
pub fn total_k_parts(fittings: &[Fitting], method: FittingsMethod, diameter: f64) -> KParts {
    fittings.iter().fold(KParts::default(), |sum, f| sum.plus(f.k_parts(method, diameter)))
}

/// Crane TP-410's fully turbulent friction factor of clean commercial steel pipe of inside
/// diameter `diameter` (m): Colebrook–White at `Re = 7.5·10⁶ D` and `ε/D = 3.4127·10⁻⁵
/// D^−1.0112` (see the module docs).
pub fn crane_turbulent_friction(diameter: f64) -> f64 {
    colebrook(7.5e6 * diameter, 3.4127e-5 * diameter.powf(-1.0112)).0
}

/// Rennels & Hudson's bend K split into its parts: `0.10 sin(α/2)` constant, the rest
/// proportional to the friction factor. `radius` is r/D, `angle` in degrees.
pub fn rennels_bend_parts(radius: f64, angle: f64) -> KParts {
    let a = angle.to_radians();
    let s = (0.5 * a).sin();
    KParts {
        constant: 0.10 * s,
        per_reynolds: 0.0,
        per_friction: a * radius + 2.4 * s + 6.6 * (s.sqrt() + s) / radius.powf(4.0 * a / PI),
    }
}

/// The published gate-valve curve: (fraction open, K), Perry's Table 6-4 (see the module docs).
pub const GATE_VALVE_CURVE: [(f64, f64); 4] = [(0.25, 24.0), (0.5, 4.5), (0.75, 0.9), (1.0, 0.17)];

/// K of a gate valve at fraction open `opening` on [`GATE_VALVE_CURVE`] (0 < opening ≤ 1).
pub fn gate_valve_curve_k(opening: f64) -> f64 {
    let (x0, k0) = GATE_VALVE_CURVE[0];
    if opening < x0 {
        // The orifice form through (¼, 24).
        let c = x0 * (1.0 + k0.sqrt());
        let r = c / opening - 1.0;
        return r * r;
    }
    for w in GATE_VALVE_CURVE.windows(2) {
        let ((xa, ka), (xb, kb)) = (w[0], w[1]);
        if opening <= xb {
            let t = (opening - xa) / (xb - xa);
            return (ka.ln() + t * (kb.ln() - ka.ln())).exp();
        }
    }
    GATE_VALVE_CURVE[GATE_VALVE_CURVE.len() - 1].1
}

/// What closing a gate valve to `opening` adds to its fully open K.
pub fn gate_valve_closing_k(opening: f64) -> f64 {
    if opening >= 1.0 {
        0.0
    } else {
        gate_valve_curve_k(opening) - gate_valve_curve_k(1.0)
    }
}

/// Where each method's values come from, for `ringmain fittings`.
pub fn method_source(method: FittingsMethod) -> &'static str {
    match method {
        FittingsMethod::EquivalentLength => {
            "Crane Co., Technical Paper No. 410: K = (L/D) f_T; f_T by Colebrook-White at Re = 7.5e6 D, \
             e/D = 3.4127e-5 D^-1.0112 (D in m)"
        }
        FittingsMethod::TwoK => "Hooper (1981), Chemical Engineering 88(17): K = K1/Re + Kinf (1 + 1/D_in)",
        FittingsMethod::ThreeK => "Darby (2001), Chemical Engineering 108(4): K = K1/Re + Ki (1 + Kd/D_in^0.3)",
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn crane_turbulent_friction_matches_the_paper_table() {
        // Crane TP-410 tabulates f_T = 0.015 for 6-inch and 0.012 for 18-24-inch clean steel
        // pipe (values from memory; the Python checks compare the fit with `fluids`).
        let six = crane_turbulent_friction(0.1541);
        assert!((six - 0.015).abs() < 0.0006, "{six}");
        let twenty = crane_turbulent_friction(0.4778);
        assert!((twenty - 0.012).abs() < 0.0006, "{twenty}");
    }

    #[test]
    fn half_open_gate_valve_is_in_the_chart_band() {
        // At half open chart readings give K between 2 and 6 (common practice).
        for method in FittingsMethod::ALL {
            let f = Fitting { opening: 0.5, ..Fitting::new(FittingKind::GateValve) };
            let k = f.k_parts(*method, 0.2).at(1e6, 0.015);
            assert!((2.0..=6.0).contains(&k), "{method:?}: {k}");
        }
    }

    #[test]
    fn gate_valve_curve_is_continuous_and_falls_as_it_opens() {
        let mut prev = f64::INFINITY;
        for i in 1..=1000 {
            let x = f64::from(i) / 1000.0;
            let k = gate_valve_curve_k(x);
            assert!(k < prev, "not falling at {x}");
            prev = k;
        }
        for (x, k) in GATE_VALVE_CURVE {
            assert!((gate_valve_curve_k(x) - k).abs() < 1e-12 * k);
        }
        let below = gate_valve_curve_k(0.25 - 1e-12);
        assert!((below - 24.0).abs() < 1e-6, "{below}");
        assert_eq!(gate_valve_closing_k(1.0), 0.0);
    }

    #[test]
    fn entrance_and_exit_are_common_practice() {
        // Sharp entrance 0.5, exit 1.0 at high Reynolds number (common practice).
        for method in FittingsMethod::ALL {
            let k = Fitting::new(FittingKind::EntranceSharp).k_parts(*method, 0.3).at(1e12, 0.02);
            assert!((k - 0.5).abs() < 1e-9, "{k}");
            let k = Fitting::new(FittingKind::Exit).k_parts(*method, 0.3).at(1e5, 0.02);
            assert_eq!(k, 1.0);
        }
    }

    #[test]
    fn count_multiplies() {
        let one = Fitting::new(FittingKind::Elbow90).k_parts(FittingsMethod::ThreeK, 0.25);
        let three = Fitting { count: 3, ..Fitting::new(FittingKind::Elbow90) }.k_parts(FittingsMethod::ThreeK, 0.25);
        assert!((three.at(1e5, 0.02) - 3.0 * one.at(1e5, 0.02)).abs() < 1e-12);
    }

    #[test]
    fn labels_round_trip() {
        for k in FittingKind::ALL {
            assert_eq!(FittingKind::parse(k.label()), Some(*k));
        }
        for m in FittingsMethod::ALL {
            assert_eq!(FittingsMethod::parse(m.label()), Some(*m));
        }
    }
}
