//! Head-loss laws of links as the solver sees them: `h(Q)` and `dh/dQ`, coefficients computed once.
//!
//! A pipe loses head by friction and minor losses; a fully open valve by its loss coefficient; a
//! pump *gains* head, which is written as a negative loss `h(Q) = −H_pump(Q)` so that every law is
//! increasing in Q and the gradient method's matrix stays symmetric positive definite.
//!
//! # Named fittings
//! A pipe's or valve's fittings ([`crate::physics::fittings`]) add `K = C + R/Re + F f` velocity
//! heads, with `Re = |Q| D/(A ν)` and `f` the pipe's own Darcy friction factor at Q. Each part
//! becomes a term of the law whose slope is exact, so that Newton's method keeps its quadratic
//! convergence:
//!
//! * `C` joins the summed `minor_loss`: `m Q|Q|` with `m = (K + C)/(2 g A²)`;
//! * `R/Re` gives `R ν/(2 g A D) · Q`, a term linear in Q (value and slope exact, and it keeps
//!   the slope above zero at zero flow);
//! * `F f` gives `F f Q|Q|/(2 g A²) = F (D/L) h_f(Q)`, a fixed fraction of the pipe's own
//!   friction loss `h_f = f (L/D) Q|Q|/(2 g A²)`: the friction law is scaled by `1 + F D/L`.
//!   This holds for Darcy–Weisbach (with f by Colebrook–White, or laminar) and, by the
//!   definition of the equivalent Darcy factor, for Hazen–Williams pipes; the friction law's
//!   own slope (including df/dRe) carries over exactly.
//!
//! A Hazen–Williams pipe whose fittings have no Reynolds-number part (the equivalent-length
//! method, bends, entrances and exits under it) keeps the inline Hazen–Williams law.

use super::Conditions;
use crate::model::{HeadLossLaw, Link, LinkKind, Model, PumpDrive, ValveType};
use crate::physics::fittings::{total_k_parts, Fitting, KParts};
use crate::physics::pump::HeadCurve;
use crate::physics::{minor_loss_coefficient, Friction, WaterProperties};
use crate::units::GRAVITY;
use std::f64::consts::PI;

/// Velocity (m/s) that sets each pipe's and valve's smallest derivative; see [`LinkLaw::min_slope`].
pub const REGULARISATION_VELOCITY: f64 = 1e-4;
/// Smallest slope dh/dQ of any link, s/m², so that a lossless open valve still has a finite
/// conductance in the matrix.
pub const MIN_SLOPE: f64 = 1e-4;
/// Head (m) at which a constant-power pump's law `H = P/(ρgQ)` is continued by its tangent
/// towards zero flow; no distribution pump works above it, and the tangent keeps the law finite.
pub const POWER_PUMP_HEAD_LIMIT: f64 = 300.0;

#[derive(Clone, Debug, PartialEq)]
enum Kind {
    /// A Hazen–Williams pipe, `r |Q|^n sign(Q) + m Q|Q|`: the commonest law, kept inline (the
    /// other pipe law is boxed so that an array of laws stays at 32 bytes a link).
    HazenWilliams { r: f64, minor: f64 },
    /// A Darcy–Weisbach pipe: friction plus `m Q|Q|`.
    DarcyWeisbach(Box<(Friction, f64)>),
    /// A loss coefficient only (a fully open or throttling valve): `m Q|Q|`.
    Minor { minor: f64 },
    /// A pipe or valve with fittings whose K falls with the Reynolds number: friction (pipes)
    /// plus `m Q|Q| + l Q`.
    Fitted(Box<Fitted>),
    /// `h = −s² H(Q/s)`.
    Curve { curve: Box<HeadCurve>, speed: f64 },
    /// `h = −P/(ρ g Q)` above `q_c`, tangent below.
    Power { power_over_rho_g: f64, q_c: f64 },
    /// A pump at zero speed: never open (kept closed by the status logic).
    Stopped,
}

/// The parts of a [`Kind::Fitted`] law: `h = friction(Q) + minor Q|Q| + linear Q`.
#[derive(Clone, Debug, PartialEq)]
struct Fitted {
    friction: Option<Friction>,
    minor: f64,
    linear: f64,
}

/// The head-loss law of one link.
#[derive(Clone, Debug, PartialEq)]
pub struct LinkLaw {
    kind: Kind,
    /// Smallest slope dh/dQ used in the Newton matrix.
    ///
    /// Hazen–Williams' slope `n r |Q|^(n-1)` vanishes at Q = 0, which would make the gradient
    /// method's matrix singular (Elhay & Simpson 2011, "Dealing with zero flows in solving the
    /// nonlinear equations for water distribution systems", J. Hydraul. Eng. 137(10)). We
    /// regularise the Jacobian only: the slope is floored at its value at the flow of a velocity of
    /// [`REGULARISATION_VELOCITY`] (and never below [`MIN_SLOPE`]). The residual `h(Q) − ΔH` is
    /// always the exact law, so a converged answer satisfies the unmodified equations; only the
    /// step near zero flow changes.
    pub min_slope: f64,
}

/// Initial velocity of pipes and valves on a cold start, m/s (common practice: about 1 ft/s).
pub const INITIAL_VELOCITY: f64 = 0.3;

impl LinkLaw {
    /// A placeholder law (a stopped pump's), for arrays about to be filled.
    pub const STOPPED: LinkLaw = LinkLaw { kind: Kind::Stopped, min_slope: MIN_SLOPE };

    /// The law of a link of `model` when it is open (for valves: fully open, or throttling at the
    /// setting for an automatic throttle valve).
    pub fn new(model: &Model, link: &Link) -> Self {
        LinkLaw::with_water(model, link, &model.options.water_properties())
    }

    /// Like [`LinkLaw::new`] with the model's water properties computed once by the caller
    /// (they take a few hundred floating-point operations, more than the law itself).
    pub fn with_water(model: &Model, link: &Link, water: &WaterProperties) -> Self {
        LinkLaw::build(model, &link.kind, model.fittings_of(link), &LawInputs::of(link), water)
    }

    /// The law of link `k` of `model` as written (the same law as [`LinkLaw::from_conditions`]
    /// with the model's own conditions), its fittings found by position rather than by id.
    pub(crate) fn of_model_link(model: &Model, k: usize, water: &WaterProperties) -> Self {
        let link = &model.links()[k];
        LinkLaw::build(model, &link.kind, model.fittings(k), &LawInputs::of(link), water)
    }

    /// The law of link `k` of `model` at the values of `conditions` (the link's kind, length and
    /// pump curve from the model, everything that varies from the conditions).
    pub fn from_conditions(model: &Model, k: usize, conditions: &Conditions, water: &WaterProperties) -> Self {
        let inputs = LawInputs {
            diameter: conditions.diameter(k),
            roughness: conditions.roughness(k),
            minor_loss: conditions.minor_loss(k),
            setting: conditions.valve_setting(k),
            automatic: conditions.automatic(k),
        };
        LinkLaw::build(model, &model.links()[k].kind, model.fittings(k), &inputs, water)
    }

    /// The law of a link of `kind` with its named `fittings` at the values `v`; the model gives
    /// the head-loss law and the fittings method.
    fn build(model: &Model, kind: &LinkKind, fittings: &[Fitting], v: &LawInputs, water: &WaterProperties) -> Self {
        let headloss = model.options.headloss;
        let resistance = |friction: Option<(Friction, f64)>, k: f64, d: f64| {
            let area = PI * d * d / 4.0;
            let parts = total_k_parts(fittings, model.options.fittings_method, d);
            let friction = friction.map(|(f, length)| scale_friction(f, 1.0 + parts.per_friction * d / length));
            let minor = minor_loss_coefficient(k + parts.constant, d);
            let linear = parts.per_reynolds * water.kinematic_viscosity / (2.0 * GRAVITY * area * d);
            let kind = if linear > 0.0 {
                Kind::Fitted(Box::new(Fitted { friction, minor, linear }))
            } else {
                resistance_kind(friction, minor)
            };
            let mut law = LinkLaw { kind, min_slope: 0.0 };
            law.min_slope = law.evaluate_exact(REGULARISATION_VELOCITY * area).1.max(MIN_SLOPE);
            law
        };
        match kind {
            LinkKind::Pipe(p) => {
                let friction = match headloss {
                    HeadLossLaw::HazenWilliams => Friction::hazen_williams(p.length, v.diameter, v.roughness),
                    HeadLossLaw::DarcyWeisbach => {
                        Friction::darcy_weisbach(p.length, v.diameter, v.roughness, water.kinematic_viscosity)
                    }
                };
                resistance(Some((friction, p.length)), v.minor_loss, v.diameter)
            }
            LinkKind::Valve(valve) => {
                let k = if valve.valve == ValveType::Throttle && v.automatic { v.setting } else { v.minor_loss };
                resistance(None, k, v.diameter)
            }
            LinkKind::Pump(p) => {
                let speed = v.setting;
                if speed <= 0.0 {
                    return LinkLaw { kind: Kind::Stopped, min_slope: MIN_SLOPE };
                }
                match &p.drive {
                    PumpDrive::Curve { curve, .. } => {
                        let q_char = characteristic_flow(curve, speed);
                        let law =
                            LinkLaw { kind: Kind::Curve { curve: Box::new(curve.clone()), speed }, min_slope: 0.0 };
                        // Floor: the mean slope shutoff-to-run-out, times 1e-3.
                        let shutoff = curve.shutoff() * speed * speed;
                        LinkLaw { min_slope: (1e-3 * shutoff / q_char.max(1e-9)).max(MIN_SLOPE), ..law }
                    }
                    PumpDrive::Power(watts) => {
                        let power_over_rho_g = watts * speed.powi(3) / (water.density * GRAVITY);
                        let q_c = power_over_rho_g / POWER_PUMP_HEAD_LIMIT;
                        LinkLaw { kind: Kind::Power { power_over_rho_g, q_c }, min_slope: MIN_SLOPE }
                    }
                }
            }
        }
    }

    /// Flow to start from on a cold start, m³/s, for this law of a link of flow area `area` (m²;
    /// computed when asked: it is needed once per cold start, and a field would cost 8 bytes per
    /// link for the whole solve).
    pub fn initial_flow(&self, area: f64) -> f64 {
        match &self.kind {
            Kind::HazenWilliams { .. } | Kind::DarcyWeisbach(_) | Kind::Minor { .. } | Kind::Fitted(_) => {
                INITIAL_VELOCITY * area
            }
            Kind::Curve { curve, speed } => 0.5 * characteristic_flow(curve, *speed),
            // The flow at which it would lift 30 m.
            Kind::Power { power_over_rho_g, .. } => power_over_rho_g / 30.0,
            Kind::Stopped => 0.0,
        }
    }

    /// Exact head loss and slope at flow `q`.
    #[inline]
    pub fn evaluate_exact(&self, q: f64) -> (f64, f64) {
        match &self.kind {
            Kind::HazenWilliams { r, minor } => hazen_williams(*r, *minor, q),
            Kind::DarcyWeisbach(parts) => {
                let (friction, minor) = **parts;
                let (h, d) = friction.evaluate(q);
                (h + minor * q * q.abs(), d + 2.0 * minor * q.abs())
            }
            Kind::Minor { minor } => (minor * q * q.abs(), 2.0 * minor * q.abs()),
            Kind::Fitted(parts) => {
                let Fitted { friction, minor, linear } = **parts;
                let (h, d) = friction.map_or((0.0, 0.0), |f| f.evaluate(q));
                (h + minor * q * q.abs() + linear * q, d + 2.0 * minor * q.abs() + linear)
            }
            Kind::Curve { curve, speed } => {
                let (h, d) = curve.head_at_speed(q, *speed);
                (-h, -d)
            }
            Kind::Power { power_over_rho_g, q_c } => {
                let (h, d) = power_head(*power_over_rho_g, *q_c, q);
                (-h, -d)
            }
            Kind::Stopped => (0.0, 0.0),
        }
    }

    /// For a Hazen–Williams pipe: its friction resistance `r` and minor-loss coefficient `m` in
    /// `h = r |Q|^n sign(Q) + m Q|Q|`, so that the iteration can evaluate the commonest law
    /// without a branch on its kind (see [`hazen_williams`]).
    pub fn hazen_williams_parts(&self) -> Option<(f64, f64)> {
        match self.kind {
            Kind::HazenWilliams { r, minor } => Some((r, minor)),
            _ => None,
        }
    }

    /// Exact head loss and the regularised slope used in the Newton matrix.
    #[inline]
    pub fn evaluate(&self, q: f64) -> (f64, f64) {
        let (h, d) = self.evaluate_exact(q);
        (h, d.max(self.min_slope))
    }

    /// For pumps: the head at zero flow at the current speed (the most head it can hold against).
    pub fn shutoff_head(&self) -> Option<f64> {
        match &self.kind {
            Kind::Curve { curve, speed } => Some(curve.shutoff() * speed * speed),
            Kind::Power { power_over_rho_g, q_c } => Some(power_head(*power_over_rho_g, *q_c, 0.0).0),
            _ => None,
        }
    }

    /// For pumps: whether the flow `q` is past the curve's run-out (head negative).
    pub fn beyond_curve(&self, q: f64) -> bool {
        matches!(self.kind, Kind::Curve { .. } | Kind::Power { .. }) && self.evaluate_exact(q).0 > 0.0
    }
}

/// Head loss and slope of a Hazen–Williams pipe with resistance `r` and minor-loss coefficient
/// `m`, `h = r |Q|^n sign(Q) + m Q|Q|`. This is the one evaluation the solver uses for these
/// pipes (in the iteration, the tree sweeps and the reported residuals). `|Q|^n` is
/// [`hw_flow_power`](crate::physics::flow_power::hw_flow_power): tables and a short series, within
/// a few units in the last place of `powf`, and cheaper than `exp(n ln|Q|)`, which matters in
/// the solver's hottest loop (the fire-flow analysis took about a fifth less CPU with it).
#[inline]
pub fn hazen_williams(r: f64, m: f64, q: f64) -> (f64, f64) {
    let a = q.abs();
    let (h, d) = if a == 0.0 {
        (0.0, 0.0)
    } else {
        let h = r * crate::physics::flow_power::hw_flow_power(a);
        (h.copysign(q), crate::physics::friction::HW_FLOW_EXPONENT * h / a)
    };
    (h + m * q * a, d + 2.0 * m * a)
}

/// What a link's law depends on that may vary between solves (see [`Conditions`]).
struct LawInputs {
    diameter: f64,
    roughness: f64,
    minor_loss: f64,
    /// Valve setting, or pump relative speed.
    setting: f64,
    automatic: bool,
}

impl LawInputs {
    /// The values written in the model (those `Conditions::from_model` takes).
    fn of(link: &Link) -> Self {
        match &link.kind {
            LinkKind::Pipe(p) => LawInputs {
                diameter: p.diameter,
                roughness: p.roughness,
                minor_loss: p.minor_loss,
                setting: f64::NAN,
                automatic: false,
            },
            LinkKind::Valve(v) => LawInputs {
                diameter: v.diameter,
                roughness: f64::NAN,
                minor_loss: v.minor_loss,
                setting: v.setting,
                automatic: v.automatic,
            },
            LinkKind::Pump(p) => LawInputs {
                diameter: f64::NAN,
                roughness: f64::NAN,
                minor_loss: f64::NAN,
                setting: p.speed,
                automatic: false,
            },
        }
    }
}

/// The law of a pipe (with its friction) or of a valve (without), plus the minor losses `m`.
fn resistance_kind(friction: Option<Friction>, minor: f64) -> Kind {
    match friction {
        Some(Friction::HazenWilliams { r }) => Kind::HazenWilliams { r, minor },
        Some(f) => Kind::DarcyWeisbach(Box::new((f, minor))),
        None => Kind::Minor { minor },
    }
}

/// A pipe's friction law under the model's head-loss law.
fn pipe_friction(model: &Model, p: &crate::model::Pipe, water: &WaterProperties) -> Friction {
    match model.options.headloss {
        HeadLossLaw::HazenWilliams => Friction::hazen_williams(p.length, p.diameter, p.roughness),
        HeadLossLaw::DarcyWeisbach => {
            Friction::darcy_weisbach(p.length, p.diameter, p.roughness, water.kinematic_viscosity)
        }
    }
}

/// The loss coefficient of a valve when it follows its law: its setting for an automatic
/// throttle valve, else its fully open `minor_loss`.
fn valve_k(v: &crate::model::Valve) -> f64 {
    if v.valve == ValveType::Throttle && v.automatic {
        v.setting
    } else {
        v.minor_loss
    }
}

/// A friction law whose loss is multiplied by `factor`.
fn scale_friction(f: Friction, factor: f64) -> Friction {
    match f {
        Friction::HazenWilliams { r } => Friction::HazenWilliams { r: r * factor },
        Friction::DarcyWeisbach { k, re_per_flow, relative_roughness } => {
            Friction::DarcyWeisbach { k: k * factor, re_per_flow, relative_roughness }
        }
    }
}

/// The minor losses of a pipe or valve at flow `q` (m³/s): the total K of its `minor_loss`
/// (or a throttle valve's setting) and of its named fittings, referred to its own velocity
/// head, and the head they take (m, same sign as q). `None` for a pump, and at zero flow, where
/// K is not defined (its Reynolds-number part grows without bound).
///
/// The K of fittings is evaluated from the same parts as the law the solver uses, so the head
/// here is exactly the law's minor part at `q`: for bends, with the pipe's own Darcy friction
/// factor at `q` (for Hazen–Williams pipes, the factor that gives the same friction loss).
pub fn minor_losses(model: &Model, link: &Link, water: &WaterProperties, q: f64) -> Option<(f64, f64)> {
    if q == 0.0 || !q.is_finite() {
        return None;
    }
    let (k_user, d, friction) = match &link.kind {
        LinkKind::Pipe(p) => (p.minor_loss, p.diameter, Some((pipe_friction(model, p, water), p.length))),
        LinkKind::Valve(v) => (valve_k(v), v.diameter, None),
        LinkKind::Pump(_) => return None,
    };
    let area = PI * d * d / 4.0;
    let velocity_head = q * q / (2.0 * GRAVITY * area * area);
    let re = q.abs() * d / (area * water.kinematic_viscosity);
    let parts: KParts = total_k_parts(model.fittings_of(link), model.options.fittings_method, d);
    let f = friction.map_or(0.0, |(fr, length)| fr.evaluate(q).0.abs() / ((length / d) * velocity_head));
    let k = k_user + parts.at(re, f);
    Some((k, (k * velocity_head).copysign(q)))
}

/// The flow area of a pipe or valve, m² (zero for a pump), for velocities.
pub fn flow_area(link: &Link) -> f64 {
    link.diameter().map_or(0.0, |d| PI * d * d / 4.0)
}

/// A pump curve's characteristic flow at relative speed `speed`: its run-out, else its last
/// point.
fn characteristic_flow(curve: &HeadCurve, speed: f64) -> f64 {
    curve.runout().or(curve.last_point_flow()).unwrap_or(0.01) * speed
}

/// `H = P'/Q` with `P' = P/(ρg)` above `q_c`, its tangent at `q_c` below.
fn power_head(p: f64, q_c: f64, q: f64) -> (f64, f64) {
    if q >= q_c {
        (p / q, -p / (q * q))
    } else {
        let (h, d) = (p / q_c, -p / (q_c * q_c));
        (h + d * (q - q_c), d)
    }
}
