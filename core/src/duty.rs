//! Pump duty: the system curve a pump works against, its operating point at each speed, the
//! shaft power, the motor to drive it and the net positive suction head at its inlet.
//!
//! Entry point: [`analyse`]. All values are SI (m³/s, m, W, Pa); writers convert.
//!
//! # The system curve
//! For each flow Q through the pump, the head it must add is `H_discharge − H_suction` with the
//! rest of the network solved at that flow: the pump is taken out (closed) and Q is drawn from
//! its suction node and delivered into its discharge node (a fixed-head node at either end
//! supplies or takes it as it is). Static lift, pipe friction, fittings and minor losses, other
//! pumps and valves, tanks at their levels: everything the network solver models is in the
//! curve. One copy of the model and one [`Solver`] serve every flow (only two demands change
//! between flows, and each solve starts from the last one). With [`TankLevels::MinMax`] the
//! curve is also computed with every tank at its lowest and at its highest level, giving a
//! band.
//!
//! # Operating points
//! At each relative speed s the whole network is solved with the pump running at s (affinity
//! laws `H = s² h(Q/s)`); the pump's flow and head are the operating point, its efficiency the
//! efficiency curve at Q/s as the solver interpolates it, and the shaft power `ρ g Q H / η`.
//!
//! # Motor
//! The motor rating is the smallest rated output at or above `P_shaft (1 + margin)`, from the
//! preferred rated outputs of IEC 60072-1 (kW) for SI models and the horsepower ratings of NEMA
//! MG 1 (Part 10 and Part 20) for models whose lengths are in feet ([`MotorSeries`]). A value
//! equal to a rating within one part in 10⁹ takes that rating (so that a shaft power computed
//! to land exactly on a rating is not pushed to the next one by rounding).
//!
//! # Net positive suction head
//! `NPSH_a = (p_atm − p_v)/(ρ g) + (H_s − z_p) + v_s²/(2 g)` with `H_s` the head at the suction
//! node, `z_p` the pump's centreline elevation (its `elevation`, by default its suction node's),
//! `v_s` the velocity in the suction link (the link bringing the most water into the suction
//! node; zero when the pump draws straight from a reservoir or tank, where the head is the
//! still water's), `p_atm` from the ISO 2533 standard atmosphere at the site elevation
//! (`[hydraulics] site_elevation`, by default the pump's elevation), `p_v` the vapour pressure
//! of water by IAPWS-IF97 at the water temperature, and ρ its density. The required NPSH is the
//! pump's `npsh_required_curve` (at speed 1, interpolated linearly, scaled as `s² NPSH_r(Q/s)`).

use crate::error::{Element, ModelError, SolveError};
use crate::model::{LinkStatus, Model, NodeKind, PumpDrive};
use crate::physics::atmosphere;
use crate::solve::{LinkState, Solution, SolveOptions, Solver};
use crate::units::GRAVITY;

/// Which tank levels the system curve is computed at.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum TankLevels {
    /// The levels in the model.
    #[default]
    Current,
    /// Also every tank at its lowest and at its highest level, for a band.
    MinMax,
}

/// A series of standard motor ratings.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum MotorSeries {
    /// IEC 60072-1 preferred rated outputs, kW.
    IecKilowatts,
    /// NEMA MG 1 horsepower ratings.
    NemaHorsepower,
}

/// IEC 60072-1 preferred rated outputs of rotating electrical machines, kW (the standard's
/// series of rated outputs, quoted from memory).
pub const IEC_60072_KW: &[f64] = &[
    0.06, 0.09, 0.12, 0.18, 0.25, 0.37, 0.55, 0.75, 1.1, 1.5, 2.2, 3.0, 4.0, 5.5, 7.5, 11.0, 15.0, 18.5, 22.0, 30.0,
    37.0, 45.0, 55.0, 75.0, 90.0, 110.0, 132.0, 160.0, 200.0, 250.0, 315.0, 355.0, 400.0, 450.0, 500.0, 560.0, 630.0,
    710.0, 800.0, 900.0, 1000.0,
];

/// NEMA MG 1 horsepower ratings of induction motors (Part 10 for small and medium machines,
/// Part 20 for large ones; quoted from memory).
pub const NEMA_MG1_HP: &[f64] = &[
    0.25, 0.33, 0.5, 0.75, 1.0, 1.5, 2.0, 3.0, 5.0, 7.5, 10.0, 15.0, 20.0, 25.0, 30.0, 40.0, 50.0, 60.0, 75.0, 100.0,
    125.0, 150.0, 200.0, 250.0, 300.0, 350.0, 400.0, 450.0, 500.0, 600.0, 700.0, 800.0, 900.0, 1000.0, 1250.0, 1500.0,
    1750.0, 2000.0, 2250.0, 2500.0,
];

impl MotorSeries {
    /// The series for a model: horsepower when its lengths are in feet, else kilowatts.
    pub fn for_model(model: &Model) -> Self {
        if model.units.is_us_customary() {
            MotorSeries::NemaHorsepower
        } else {
            MotorSeries::IecKilowatts
        }
    }

    /// The ratings, in the series' unit.
    pub fn ratings(self) -> &'static [f64] {
        match self {
            MotorSeries::IecKilowatts => IEC_60072_KW,
            MotorSeries::NemaHorsepower => NEMA_MG1_HP,
        }
    }

    /// Watts per unit of the series.
    pub fn unit_watts(self) -> f64 {
        match self {
            MotorSeries::IecKilowatts => 1e3,
            MotorSeries::NemaHorsepower => crate::units::HORSEPOWER,
        }
    }

    /// The unit's name.
    pub fn unit_label(self) -> &'static str {
        match self {
            MotorSeries::IecKilowatts => "kW",
            MotorSeries::NemaHorsepower => "hp",
        }
    }

    /// The standard's name.
    pub fn source(self) -> &'static str {
        match self {
            MotorSeries::IecKilowatts => "IEC 60072-1",
            MotorSeries::NemaHorsepower => "NEMA MG 1",
        }
    }

    /// The smallest rating (W) at or above `required` (W), or `None` above the whole series.
    pub fn rating_for(self, required: f64) -> Option<f64> {
        let unit = self.unit_watts();
        let need = required / unit;
        self.ratings().iter().copied().find(|&r| need <= r * (1.0 + 1e-9)).map(|r| r * unit)
    }
}

/// What to compute.
#[derive(Clone, Debug, PartialEq)]
pub struct DutyOptions {
    /// Pump flows of the system curve, m³/s (empty: 0 to 1.5 times the last flow of the pump's
    /// curve in [`DutyOptions::DEFAULT_STEPS`] steps).
    pub flows: Vec<f64>,
    /// Relative speeds of the operating points (empty: the pump's own speed).
    pub speeds: Vec<f64>,
    /// Motor margin over the shaft power, a fraction.
    pub motor_margin: f64,
    /// NPSH margin: NPSH available should be at least NPSH required times (1 + this).
    pub npsh_margin: f64,
    /// Tank levels of the system curve.
    pub tank_levels: TankLevels,
}

impl DutyOptions {
    /// Steps of the default flow range.
    pub const DEFAULT_STEPS: usize = 40;
    /// The default motor margin (common practice: 10 % over the duty's shaft power).
    pub const MOTOR_MARGIN: f64 = 0.10;
    /// The default NPSH margin (common practice: NPSH available at least 1.1 times required).
    pub const NPSH_MARGIN: f64 = 0.10;
    /// The largest number of flows of a system curve.
    pub const MAX_FLOWS: usize = 100_000;
}

impl Default for DutyOptions {
    fn default() -> Self {
        DutyOptions {
            flows: Vec::new(),
            speeds: Vec::new(),
            motor_margin: Self::MOTOR_MARGIN,
            npsh_margin: Self::NPSH_MARGIN,
            tank_levels: TankLevels::Current,
        }
    }
}

/// One operating point (SI).
#[derive(Clone, Debug, PartialEq)]
pub struct OperatingPoint {
    /// Relative speed.
    pub speed: f64,
    /// Flow, m³/s.
    pub flow: f64,
    /// Head added, m.
    pub head: f64,
    /// Efficiency, fraction.
    pub efficiency: f64,
    /// Hydraulic power ρ g Q H, W.
    pub hydraulic_power: f64,
    /// Shaft power ρ g Q H / η, W.
    pub shaft_power: f64,
    /// The motor rating chosen, W (in the series' unit: see [`DutyAnalysis::motor_series`]).
    pub motor_rating: f64,
    /// NPSH available, m.
    pub npsh_available: f64,
    /// NPSH required, m (`None`: the pump has no `npsh_required_curve`).
    pub npsh_required: Option<f64>,
    /// Whether NPSH available is at least NPSH required × (1 + NPSH margin) (`None`: no curve).
    pub npsh_ok: Option<bool>,
}

/// The result of [`analyse`] (SI).
#[derive(Clone, Debug, PartialEq)]
pub struct DutyAnalysis {
    /// Index of the pump's link.
    pub pump: usize,
    /// (flow m³/s, head m) at the current tank levels.
    pub system_curve: Vec<(f64, f64)>,
    /// (flow, lowest head, highest head) over the tanks' lowest and highest levels.
    pub system_curve_band: Option<Vec<(f64, f64, f64)>>,
    /// (flow, NPSH available m) along the system curve.
    pub npsh_available_curve: Vec<(f64, f64)>,
    /// The operating point at each speed.
    pub operating_points: Vec<OperatingPoint>,
    /// The series the motor ratings come from.
    pub motor_series: MotorSeries,
    /// Air pressure at the site, Pa (ISO 2533).
    pub atmospheric_pressure: f64,
    /// Vapour pressure of the water, Pa (IAPWS-IF97).
    pub vapour_pressure: f64,
    /// The site elevation used, m.
    pub site_elevation: f64,
    /// The pump's centreline elevation used, m.
    pub pump_elevation: f64,
}

/// Why a duty analysis failed.
#[derive(Clone, Debug, PartialEq)]
pub enum DutyError {
    /// Bad input: the model, the pump or an option (names the element and key).
    Model(ModelError),
    /// A network solve failed; `at` says which (a flow or a speed).
    Solve {
        /// Which solve: "at pump flow 0.012 m3/s", "at speed 0.8".
        at: String,
        /// What the solver reported.
        error: SolveError,
    },
}

impl std::fmt::Display for DutyError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            DutyError::Model(e) => write!(f, "{e}"),
            DutyError::Solve { at, error } => write!(f, "{at}: {error}"),
        }
    }
}

impl std::error::Error for DutyError {}

impl From<ModelError> for DutyError {
    fn from(e: ModelError) -> Self {
        DutyError::Model(e)
    }
}

/// The default flows of a system curve for the pump at `index`: 0 to 1.5 times the last flow of
/// its curve in [`DutyOptions::DEFAULT_STEPS`] steps.
pub fn default_flows(model: &Model, index: usize) -> Result<Vec<f64>, ModelError> {
    let link = &model.links()[index];
    let Some(pump) = link.as_pump() else {
        return Err(ModelError::at(Some(Element::Link(link.id.to_string())), None, "is not a pump"));
    };
    match &pump.drive {
        PumpDrive::Curve { points, .. } => {
            let last = points.last().map_or(0.0, |p| p.0);
            let n = DutyOptions::DEFAULT_STEPS;
            Ok((0..=n).map(|i| 1.5 * last * i as f64 / n as f64).collect())
        }
        PumpDrive::Power(_) => Err(ModelError::at(
            Some(Element::Link(link.id.to_string())),
            Some("power"),
            "a constant-power pump has no curve to take a flow range from; give the flows (--flows START:STOP:STEP)",
        )),
    }
}

/// The flows START:STOP:STEP (STOP included when it falls on the grid, within 10⁻⁹ of a step).
pub fn flow_grid(start: f64, stop: f64, step: f64) -> Result<Vec<f64>, String> {
    if !(start.is_finite() && stop.is_finite() && step.is_finite()) {
        return Err("START, STOP and STEP must be finite numbers".into());
    }
    if start < 0.0 {
        return Err(format!("START must not be negative (a pump does not run backwards), found {start}"));
    }
    if step <= 0.0 {
        return Err(format!("STEP must be greater than zero, found {step}"));
    }
    if stop < start {
        return Err(format!("STOP ({stop}) must not be below START ({start})"));
    }
    let n = ((stop - start) / step + 1e-9).floor();
    if n + 1.0 > DutyOptions::MAX_FLOWS as f64 {
        return Err(format!("{} flows are too many (at most {})", n + 1.0, DutyOptions::MAX_FLOWS));
    }
    Ok((0..=n as usize).map(|i| start + step * i as f64).collect())
}

/// Linear interpolation in the required-NPSH points at speed 1 (`None` outside them).
fn interpolate(points: &[(f64, f64)], q: f64) -> Option<f64> {
    let (first, last) = (points.first()?, points.last()?);
    if q < first.0 * (1.0 - 1e-12) || q > last.0 * (1.0 + 1e-12) {
        return None;
    }
    let q = q.clamp(first.0, last.0);
    let i = points.partition_point(|p| p.0 <= q).clamp(1, points.len() - 1);
    let ((q0, h0), (q1, h1)) = (points[i - 1], points[i]);
    Some(h0 + (h1 - h0) * (q - q0) / (q1 - q0))
}

/// Everything fixed about the pump's suction for NPSH.
struct Suction {
    node: usize,
    pump_elevation: f64,
    /// (p_atm − p_v) / (ρ g), m.
    pressure_head: f64,
}

impl Suction {
    /// NPSH available in a solution.
    fn available(&self, model: &Model, pump: usize, s: &Solution) -> f64 {
        let node = &model.nodes()[self.node];
        let velocity = if node.fixed_head().is_some() {
            0.0
        } else {
            // The link bringing the most water into the suction node.
            model
                .links()
                .iter()
                .enumerate()
                .filter(|&(k, _)| k != pump)
                .filter_map(|(k, l)| {
                    let inflow = if l.to == self.node {
                        s.flow[k]
                    } else if l.from == self.node {
                        -s.flow[k]
                    } else {
                        return None;
                    };
                    (inflow > 0.0 && s.velocity[k].is_finite()).then_some((inflow, s.velocity[k]))
                })
                .max_by(|a, b| a.0.total_cmp(&b.0))
                .map_or(0.0, |(_, v)| v)
        };
        self.pressure_head + (s.head[self.node] - self.pump_elevation) + velocity * velocity / (2.0 * GRAVITY)
    }
}

/// The system curve, the operating points, the motor and the NPSH of the pump `pump_id`.
pub fn analyse(model: &Model, pump_id: &str, options: &DutyOptions) -> Result<DutyAnalysis, DutyError> {
    model.validate()?;
    let index = model
        .link_index(pump_id)
        .ok_or_else(|| ModelError::at(Some(Element::Link(pump_id.to_owned())), None, "no link has this id (--pump)"))?;
    let link = &model.links()[index];
    let element = || Some(Element::Link(link.id.to_string()));
    let Some(pump) = link.as_pump() else {
        return Err(ModelError::at(
            element(),
            Some("kind"),
            format!("is a {}, not a pump (--pump)", link.kind.label()),
        )
        .into());
    };
    if !(options.motor_margin.is_finite() && (0.0..=10.0).contains(&options.motor_margin)) {
        return Err(ModelError::new(format!(
            "--motor-margin must be a fraction between 0 and 10, found {}",
            options.motor_margin
        ))
        .into());
    }
    if !(options.npsh_margin.is_finite() && (0.0..=10.0).contains(&options.npsh_margin)) {
        return Err(ModelError::new(format!(
            "--npsh-margin must be a fraction between 0 and 10, found {}",
            options.npsh_margin
        ))
        .into());
    }
    let flows = if options.flows.is_empty() { default_flows(model, index)? } else { options.flows.clone() };
    if let Some(q) = flows.iter().find(|q| !(q.is_finite() && **q >= 0.0)) {
        return Err(ModelError::new(format!("pump flows must be finite and not negative, found {q}")).into());
    }
    let speeds = if options.speeds.is_empty() { vec![pump.speed] } else { options.speeds.clone() };
    if let Some(s) = speeds.iter().find(|s| !(s.is_finite() && **s > 0.0 && **s <= 3.0)) {
        return Err(ModelError::at(
            element(),
            Some("speed"),
            format!("speeds must be above 0 and at most 3, found {s}"),
        )
        .into());
    }

    // NPSH: what does not depend on the flow.
    let water = model.options.water_properties();
    let suction_node = link.from;
    let pump_elevation = pump.elevation.unwrap_or(model.nodes()[suction_node].elevation);
    let site_elevation = model.options.site_elevation.unwrap_or(pump_elevation);
    if !(atmosphere::MIN_ELEVATION..=atmosphere::MAX_ELEVATION).contains(&site_elevation) {
        return Err(ModelError::at(
            Some(Element::Table("hydraulics".into())),
            Some("site_elevation"),
            format!(
                "the site elevation ({site_elevation} m, by default the pump's) is outside the standard atmosphere's \
                 lowest layer ({} m to {} m); give [hydraulics] site_elevation",
                atmosphere::MIN_ELEVATION,
                atmosphere::MAX_ELEVATION
            ),
        )
        .into());
    }
    let atmospheric_pressure = atmosphere::pressure_at_elevation(site_elevation);
    let vapour_pressure = water.vapour_pressure();
    let suction = Suction {
        node: suction_node,
        pump_elevation,
        pressure_head: (atmospheric_pressure - vapour_pressure) / (water.density * GRAVITY),
    };

    // One working copy of the model for every solve.
    let mut work = model.clone();
    let mut solver =
        Solver::new(&work).map_err(|error| DutyError::Solve { at: "analysing the network".into(), error })?;
    let solve_options = SolveOptions { warm_start: true, ..SolveOptions::from_model(model) };
    let flow_label = |q: f64| {
        let u = model.units.flow;
        format!("at pump flow {} {}", u.from_si(q), u.label())
    };

    // The system curve: pump closed, its flow drawn from the suction and delivered downstream.
    work.set_status(index, LinkStatus::Closed)?;
    let (from, to) = (link.from, link.to);
    let base = |node: usize| match model.nodes()[node].kind {
        NodeKind::Junction { demand } => Some(demand),
        _ => None,
    };
    let (base_from, base_to) = (base(from), base(to));
    let curve_at = |work: &mut Model, solver: &mut Solver| -> Result<Vec<(f64, f64, f64)>, DutyError> {
        let mut out = Vec::with_capacity(flows.len());
        for &q in &flows {
            if let Some(d) = base_from {
                work.set_demand(from, d + q)?;
            }
            if let Some(d) = base_to {
                work.set_demand(to, d - q)?;
            }
            let s = solver
                .solve_with(work, &solve_options)
                .map_err(|error| DutyError::Solve { at: flow_label(q), error })?;
            for end in [from, to] {
                if !s.connected[end] || !s.head[end].is_finite() {
                    return Err(ModelError::at(
                        element(),
                        None,
                        format!(
                            "with the pump taken out, its {} node '{}' is not reached by any reservoir or tank, so \
                             the flow through the pump is set by the demands alone and there is no system curve; \
                             a system curve needs storage or a source on both sides",
                            if end == from { "suction" } else { "discharge" },
                            model.nodes()[end].id
                        ),
                    )
                    .into());
                }
            }
            out.push((q, s.head[to] - s.head[from], suction.available(model, index, &s)));
        }
        Ok(out)
    };
    let current = curve_at(&mut work, &mut solver)?;
    let band = match options.tank_levels {
        TankLevels::Current => None,
        TankLevels::MinMax => {
            let mut sides = Vec::with_capacity(2);
            for lowest in [true, false] {
                set_tank_levels(&mut work, model, lowest)?;
                sides.push(curve_at(&mut work, &mut solver)?);
            }
            set_tank_levels(&mut work, model, true).ok();
            Some(sides[0].iter().zip(&sides[1]).map(|(a, b)| (a.0, a.1.min(b.1), a.1.max(b.1))).collect::<Vec<_>>())
        }
    };
    // Back to the model's levels and demands, pump running.
    work = model.clone();

    // Operating points.
    let series = MotorSeries::for_model(model);
    let mut points = Vec::with_capacity(speeds.len());
    for &speed in &speeds {
        work.set_pump_speed(index, speed)?;
        work.set_status(index, LinkStatus::Open)?;
        let at = || format!("at speed {speed}");
        let s = solver.solve_with(&work, &solve_options).map_err(|error| DutyError::Solve { at: at(), error })?;
        let Some(result) = s.pumps.iter().find(|p| p.link == index) else {
            return Err(ModelError::at(element(), None, format!("{}: the solver reports no result", at())).into());
        };
        let q = s.flow[index];
        if s.link_state[index] != LinkState::Open || q <= 0.0 || result.shaft_power <= 0.0 {
            return Err(ModelError::at(
                element(),
                Some("speed"),
                format!(
                    "{}: the pump cannot lift against the system (the solver shuts it off: {}); there is no operating \
                     point at this speed",
                    at(),
                    s.link_state[index].status_label()
                ),
            )
            .into());
        }
        let rating = series.rating_for(result.shaft_power * (1.0 + options.motor_margin)).ok_or_else(|| {
            ModelError::at(
                element(),
                None,
                format!(
                    "{}: the shaft power with the margin ({:.1} {}) is above the largest rating of the {} series",
                    at(),
                    result.shaft_power * (1.0 + options.motor_margin) / series.unit_watts(),
                    series.unit_label(),
                    series.source()
                ),
            )
        })?;
        let npsh_available = suction.available(model, index, &s);
        let npsh_required = match &pump.npsh_required {
            None => None,
            Some(curve) => Some(interpolate(curve, q / speed).map(|h| speed * speed * h).ok_or_else(|| {
                let u = model.units.flow;
                ModelError::at(
                    element(),
                    Some("npsh_required_curve"),
                    format!(
                        "{}: the operating flow {} {} (that is {} {} at speed 1) is outside the curve's flows ({} to {} \
                         {}); extend the curve",
                        at(),
                        u.from_si(q),
                        u.label(),
                        u.from_si(q / speed),
                        u.label(),
                        u.from_si(curve[0].0),
                        u.from_si(curve[curve.len() - 1].0),
                        u.label()
                    ),
                )
            })?),
        };
        points.push(OperatingPoint {
            speed,
            flow: q,
            head: result.head,
            efficiency: result.efficiency,
            hydraulic_power: result.hydraulic_power,
            shaft_power: result.shaft_power,
            motor_rating: rating,
            npsh_available,
            npsh_required,
            npsh_ok: npsh_required.map(|r| npsh_available >= r * (1.0 + options.npsh_margin)),
        });
    }
    Ok(DutyAnalysis {
        pump: index,
        system_curve: current.iter().map(|p| (p.0, p.1)).collect(),
        system_curve_band: band,
        npsh_available_curve: current.iter().map(|p| (p.0, p.2)).collect(),
        operating_points: points,
        motor_series: series,
        atmospheric_pressure,
        vapour_pressure,
        site_elevation,
        pump_elevation,
    })
}

/// Sets every tank of `work` to its lowest (`lowest`) or highest level, as given in `model`.
fn set_tank_levels(work: &mut Model, model: &Model, lowest: bool) -> Result<(), ModelError> {
    for (i, n) in model.nodes().iter().enumerate() {
        if let NodeKind::Tank(t) = &n.kind {
            let level = if lowest {
                t.min_level
            } else {
                t.max_level.ok_or_else(|| {
                    ModelError::at(
                        Some(Element::Node(n.id.to_string())),
                        Some("max_level"),
                        "is missing; the band between the emptiest and fullest tanks (--tank-levels min,max) needs \
                         every tank's max_level",
                    )
                })?
            };
            let mut node = work.nodes()[i].clone();
            if let NodeKind::Tank(w) = &mut node.kind {
                w.level = level;
            }
            work.replace_node(i, node)?;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn motor_choice_at_and_just_above_each_rating() {
        // At a rating: that rating; just above: the next one (the series are IEC 60072-1 and
        // NEMA MG 1, quoted in the docs).
        for series in [MotorSeries::IecKilowatts, MotorSeries::NemaHorsepower] {
            let unit = series.unit_watts();
            let r = series.ratings();
            for i in 0..r.len() {
                assert_eq!(series.rating_for(r[i] * unit), Some(r[i] * unit));
                let above = series.rating_for(r[i] * unit * (1.0 + 1e-6));
                assert_eq!(above, r.get(i + 1).map(|x| x * unit), "{series:?} {}", r[i]);
            }
            assert_eq!(series.rating_for(0.0), Some(r[0] * unit));
        }
    }

    #[test]
    fn flow_grid_includes_stop_on_the_grid() {
        assert_eq!(flow_grid(0.0, 60.0, 2.5).unwrap().len(), 25);
        assert_eq!(*flow_grid(0.0, 60.0, 2.5).unwrap().last().unwrap(), 60.0);
        assert_eq!(*flow_grid(0.0, 0.3, 0.1).unwrap().last().unwrap(), 0.30000000000000004);
        assert_eq!(flow_grid(0.0, 61.0, 2.5).unwrap().len(), 25);
        assert!(flow_grid(-1.0, 1.0, 0.5).is_err());
        assert!(flow_grid(0.0, 1.0, 0.0).is_err());
        assert!(flow_grid(2.0, 1.0, 0.5).is_err());
    }

    #[test]
    fn interpolation_inside_only() {
        let pts = [(0.0, 2.0), (0.01, 3.0), (0.02, 5.0)];
        assert_eq!(interpolate(&pts, 0.015), Some(4.0));
        assert_eq!(interpolate(&pts, 0.0), Some(2.0));
        assert_eq!(interpolate(&pts, 0.02), Some(5.0));
        assert_eq!(interpolate(&pts, 0.021), None);
    }
}
