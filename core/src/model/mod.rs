//! The network model: nodes, links, options, in SI units.
//!
//! A [`Model`] is built either by [`crate::format::read_str`] from a model file (TOML or JSON, see the
//! README for the format) or element by element with [`Model::add_node`] and
//! [`Model::add_link`]. Every value is checked as it enters; [`Model::validate`] checks what
//! only the whole network can say (a fixed head to anchor the heads). Values are SI inside:
//! metres, m³/s, seconds. The [`UnitSystem`] only remembers how the user wrote them, so that
//! results can be written back the same way.
//!
//! Adding a new kind of element: add a variant to [`NodeKind`] or [`LinkKind`] (both are
//! `#[non_exhaustive]`), read it in [`crate::format`] (its kind in `format::schema`), give it a head-loss law in `solve::links`, and
//! write it in the reports. DEVELOPERS.md walks through the steps.

pub mod criteria;
mod index;
pub(crate) use index::{same_bytes, word_of, NewIds};
pub mod outflow;
pub mod time;

use crate::error::{Element, ModelError};
use crate::physics::fittings::{Fitting, FittingKind, FittingsMethod};
use crate::physics::pump::{Efficiency, HeadCurve};
use crate::physics::WaterProperties;
use crate::units::{shown, Converter, LengthUnit, Quantity, UnitSystem};
use index::{IdIndex, Insert, ReleasableIndex};
use std::collections::BTreeMap;

/// Friction law used for every pipe of a model.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum HeadLossLaw {
    /// Hazen–Williams; pipe roughness is the dimensionless coefficient C.
    #[default]
    HazenWilliams,
    /// Darcy–Weisbach with Colebrook–White; pipe roughness is the absolute roughness.
    DarcyWeisbach,
}

impl HeadLossLaw {
    /// The name used in model files.
    pub fn label(self) -> &'static str {
        match self {
            HeadLossLaw::HazenWilliams => "hazen-williams",
            HeadLossLaw::DarcyWeisbach => "darcy-weisbach",
        }
    }
}

/// How the water's viscosity is specified.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum WaterSpec {
    /// Properties from the water temperature, °C (IAPWS).
    Temperature(f64),
    /// A given kinematic viscosity (m²/s); density is taken at the default 20 °C.
    KinematicViscosity(f64),
}

/// Solver-related options of a model (`[hydraulics]`).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct HydraulicOptions {
    /// Friction law for pipes.
    pub headloss: HeadLossLaw,
    /// Water properties.
    pub water: WaterSpec,
    /// Iteration limit of one snapshot solve.
    pub max_iterations: u32,
    /// Largest head change between iterations to accept convergence, m.
    pub head_tolerance: f64,
    /// Largest relative flow change (sum |ΔQ| / sum |Q|) to accept convergence.
    pub flow_tolerance: f64,
    /// How the K of named fittings is computed.
    pub fittings_method: FittingsMethod,
    /// Elevation of the site above sea level, m, for the air pressure over pump suctions
    /// (`None`: each pump's own elevation).
    pub site_elevation: Option<f64>,
}

impl HydraulicOptions {
    /// Default iteration limit.
    pub const MAX_ITERATIONS: u32 = 200;
    /// Default head tolerance, m.
    pub const HEAD_TOLERANCE: f64 = 1e-4;
    /// Default relative flow tolerance.
    pub const FLOW_TOLERANCE: f64 = 1e-6;

    /// The water's density and viscosity.
    pub fn water_properties(&self) -> WaterProperties {
        match self.water {
            WaterSpec::Temperature(t) => WaterProperties::at_celsius(t),
            WaterSpec::KinematicViscosity(nu) => {
                let base = WaterProperties::at_celsius(WaterProperties::DEFAULT_CELSIUS);
                WaterProperties { kinematic_viscosity: nu, dynamic_viscosity: nu * base.density, ..base }
            }
        }
    }
}

impl Default for HydraulicOptions {
    fn default() -> Self {
        HydraulicOptions {
            headloss: HeadLossLaw::default(),
            water: WaterSpec::Temperature(WaterProperties::DEFAULT_CELSIUS),
            max_iterations: Self::MAX_ITERATIONS,
            head_tolerance: Self::HEAD_TOLERANCE,
            flow_tolerance: Self::FLOW_TOLERANCE,
            fittings_method: FittingsMethod::default(),
            site_elevation: None,
        }
    }
}

/// A storage tank. In a snapshot its head is fixed at `elevation + level`.
#[derive(Clone, Debug, PartialEq)]
pub struct Tank {
    /// Water level above the tank floor, m.
    pub level: f64,
    /// Lowest allowed level, m.
    pub min_level: f64,
    /// Highest allowed level, m (`None`: not given).
    pub max_level: Option<f64>,
    /// Diameter of a cylindrical tank, m (`None`: not given).
    pub diameter: Option<f64>,
}

/// What a node is.
#[derive(Clone, Debug, PartialEq)]
#[non_exhaustive]
pub enum NodeKind {
    /// A junction with a demand (m³/s; negative is an inflow).
    Junction {
        /// Demand, m³/s.
        demand: f64,
    },
    /// A fixed-head source.
    Reservoir {
        /// Total head, m.
        head: f64,
    },
    /// A tank, fixed head in a snapshot (boxed: junctions, the common case, stay small).
    Tank(Box<Tank>),
}

impl NodeKind {
    /// The name used in model files.
    pub fn label(&self) -> &'static str {
        match self {
            NodeKind::Junction { .. } => "junction",
            NodeKind::Reservoir { .. } => "reservoir",
            NodeKind::Tank(_) => "tank",
        }
    }
}

/// An element's id: a string kept inline when it is short (up to 24 bytes, as nearly every id
/// is), so that a model of a million elements does not make a million small allocations.
pub type Id = compact_str::CompactString;

/// A node of the network.
#[derive(Clone, Debug, PartialEq)]
pub struct Node {
    /// Unique id among nodes.
    pub id: Id,
    /// Ground (junction), floor (tank) or water-surface (reservoir, by default) elevation, m.
    pub elevation: f64,
    /// Optional map coordinates (any consistent unit).
    pub coordinates: Option<(f64, f64)>,
    /// Zone tag, for grouping in reports and checks.
    pub zone: Option<String>,
    /// What the node is.
    pub kind: NodeKind,
}

impl Node {
    /// A junction.
    pub fn junction(id: impl Into<Id>, elevation: f64, demand: f64) -> Self {
        Node { id: id.into(), elevation, coordinates: None, zone: None, kind: NodeKind::Junction { demand } }
    }

    /// A reservoir whose elevation is its head.
    pub fn reservoir(id: impl Into<Id>, head: f64) -> Self {
        Node { id: id.into(), elevation: head, coordinates: None, zone: None, kind: NodeKind::Reservoir { head } }
    }

    /// The fixed head of a reservoir or tank in a snapshot; `None` for a junction.
    pub fn fixed_head(&self) -> Option<f64> {
        match &self.kind {
            NodeKind::Junction { .. } => None,
            NodeKind::Reservoir { head } => Some(*head),
            NodeKind::Tank(t) => Some(self.elevation + t.level),
        }
    }

    /// The demand of a junction, m³/s (zero for fixed-head nodes).
    pub fn demand(&self) -> f64 {
        match self.kind {
            NodeKind::Junction { demand } => demand,
            _ => 0.0,
        }
    }
}

/// Open or closed, as set by the user.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum LinkStatus {
    /// In service.
    #[default]
    Open,
    /// Out of service: carries no flow.
    Closed,
}

impl LinkStatus {
    /// The name used in model files and results.
    pub fn label(self) -> &'static str {
        match self {
            LinkStatus::Open => "open",
            LinkStatus::Closed => "closed",
        }
    }
}

/// How a link is operated, as the `status` key of a model file says it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum LinkControl {
    /// In service; a valve is held fully open.
    Open,
    /// Out of service.
    Closed,
    /// A valve regulating by its setting (valves only).
    Automatic,
}

/// A pipe.
#[derive(Clone, Debug, PartialEq)]
pub struct Pipe {
    /// Length, m.
    pub length: f64,
    /// Internal diameter, m.
    pub diameter: f64,
    /// Hazen–Williams C, or Darcy–Weisbach absolute roughness in m.
    pub roughness: f64,
    /// Sum of minor-loss coefficients K (h = K V²/2g).
    pub minor_loss: f64,
    /// Flow only from `from` to `to`.
    pub check_valve: bool,
}

/// How a pump delivers its head.
#[derive(Clone, Debug, PartialEq)]
pub enum PumpDrive {
    /// A head curve; the points as given (m³/s, m) and the fitted curve.
    Curve {
        /// The points as given, SI.
        points: Vec<(f64, f64)>,
        /// The fitted curve.
        curve: HeadCurve,
    },
    /// A constant hydraulic power, W: `H = P / (ρ g Q)`.
    Power(f64),
}

/// A pump. Flow runs from `from` (suction) to `to` (discharge) only.
#[derive(Clone, Debug, PartialEq)]
pub struct Pump {
    /// Head curve or constant power.
    pub drive: PumpDrive,
    /// Efficiency points as given (m³/s, fraction), if a curve was given.
    pub efficiency_points: Option<Vec<(f64, f64)>>,
    /// Efficiency used for shaft power.
    pub efficiency: Efficiency,
    /// Relative speed (1 = the speed of the curve); 0 stops the pump.
    pub speed: f64,
    /// Elevation of the pump's centreline (impeller eye), m (`None`: its suction node's).
    pub elevation: Option<f64>,
    /// Net positive suction head the pump requires, points (m³/s, m) at speed 1, if given.
    pub npsh_required: Option<Vec<(f64, f64)>>,
}

/// The four kinds of control valve.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ValveType {
    /// Holds the downstream pressure at the setting while the upstream pressure is higher.
    PressureReducing,
    /// Holds the upstream pressure at the setting.
    PressureSustaining,
    /// Holds the flow at the setting when the head available allows it.
    FlowControl,
    /// A set loss coefficient K.
    Throttle,
}

impl ValveType {
    /// What the setting of this type of valve is: a pressure (pressure-reducing and
    /// pressure-sustaining), a flow (flow-control) or a loss coefficient (throttle).
    pub fn setting_quantity(self) -> Quantity {
        match self {
            ValveType::PressureReducing | ValveType::PressureSustaining => Quantity::Pressure,
            ValveType::FlowControl => Quantity::Flow,
            ValveType::Throttle => Quantity::LossCoefficient,
        }
    }

    /// Every valve type.
    pub const ALL: &'static [ValveType] =
        &[ValveType::PressureReducing, ValveType::PressureSustaining, ValveType::FlowControl, ValveType::Throttle];

    /// The name used in model files.
    pub fn label(self) -> &'static str {
        match self {
            ValveType::PressureReducing => "pressure-reducing",
            ValveType::PressureSustaining => "pressure-sustaining",
            ValveType::FlowControl => "flow-control",
            ValveType::Throttle => "throttle",
        }
    }

    /// Parses a model-file name.
    pub fn parse(text: &str) -> Option<Self> {
        Self::ALL.iter().copied().find(|v| v.label() == text)
    }
}

/// A control valve.
#[derive(Clone, Debug, PartialEq)]
pub struct Valve {
    /// Which rule it follows.
    pub valve: ValveType,
    /// Diameter, m.
    pub diameter: f64,
    /// Setting in SI: pressure head (m) for pressure valves, m³/s for flow control, K for throttle.
    pub setting: f64,
    /// Loss coefficient when fully open.
    pub minor_loss: f64,
    /// Whether the valve follows its rule (`automatic`); `false` holds it fully open unless the
    /// link's status is closed.
    pub automatic: bool,
}

/// What a link is.
#[derive(Clone, Debug, PartialEq)]
#[non_exhaustive]
pub enum LinkKind {
    /// A pipe.
    Pipe(Pipe),
    /// A pump (boxed: pipes, the common case, stay small).
    Pump(Box<Pump>),
    /// A control valve.
    Valve(Valve),
}

impl LinkKind {
    /// The name used in model files.
    pub fn label(&self) -> &'static str {
        match self {
            LinkKind::Pipe(_) => "pipe",
            LinkKind::Pump(_) => "pump",
            LinkKind::Valve(_) => "valve",
        }
    }
}

/// A link between two nodes. Flow is positive from `from` to `to`.
#[derive(Clone, Debug, PartialEq)]
pub struct Link {
    /// Unique id among links.
    pub id: Id,
    /// Index of the upstream node (for sign conventions).
    pub from: usize,
    /// Index of the downstream node.
    pub to: usize,
    /// User-set status.
    pub status: LinkStatus,
    /// What the link is.
    pub kind: LinkKind,
}

impl Link {
    /// The pipe data, when the link is a pipe.
    pub fn as_pipe(&self) -> Option<&Pipe> {
        match &self.kind {
            LinkKind::Pipe(p) => Some(p),
            _ => None,
        }
    }

    /// Sets how the link is operated: its status, and for a valve whether it regulates.
    pub fn set_control(&mut self, control: LinkControl) -> Result<(), ModelError> {
        let (status, automatic) = match control {
            LinkControl::Open => (LinkStatus::Open, false),
            LinkControl::Closed => (LinkStatus::Closed, false),
            LinkControl::Automatic => (LinkStatus::Open, true),
        };
        match &mut self.kind {
            LinkKind::Valve(v) => v.automatic = automatic,
            other if automatic => {
                return Err(ModelError::at(
                    Some(Element::Link(self.id.to_string())),
                    Some("status"),
                    format!("\"automatic\" applies to valves only; this link is a {}", other.label()),
                ))
            }
            _ => {}
        }
        self.status = status;
        Ok(())
    }

    /// The pump data, when the link is a pump.
    pub fn as_pump(&self) -> Option<&Pump> {
        match &self.kind {
            LinkKind::Pump(p) => Some(p),
            _ => None,
        }
    }

    /// The valve data, when the link is a valve.
    pub fn as_valve(&self) -> Option<&Valve> {
        match &self.kind {
            LinkKind::Valve(v) => Some(v),
            _ => None,
        }
    }

    /// The flow diameter used for velocities, m (`None` for pumps).
    pub fn diameter(&self) -> Option<f64> {
        match &self.kind {
            LinkKind::Pipe(p) => Some(p.diameter),
            LinkKind::Valve(v) => Some(v.diameter),
            LinkKind::Pump(_) => None,
        }
    }
}

/// What a model's node coordinates `x`, `y` are (`[map] coordinates`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum MapCoordinates {
    /// Planar coordinates in any consistent unit (the default).
    #[default]
    Projected,
    /// Longitude and latitude in degrees on WGS 84 (`x` = longitude, `y` = latitude).
    LonLat,
}

impl MapCoordinates {
    /// The name used in model files.
    pub fn label(self) -> &'static str {
        match self {
            MapCoordinates::Projected => "projected",
            MapCoordinates::LonLat => "lonlat",
        }
    }

    /// Parses a model-file name.
    pub fn parse(text: &str) -> Option<Self> {
        match text {
            "projected" => Some(MapCoordinates::Projected),
            "lonlat" => Some(MapCoordinates::LonLat),
            _ => None,
        }
    }
}

/// What only drawing the network uses: the kind of coordinates and the links' drawn
/// alignments. None of it enters the hydraulics (a link's hydraulic length stays its `length`).
#[derive(Clone, Debug, Default, PartialEq)]
pub struct MapData {
    /// What the nodes' `x`, `y` are.
    pub coordinates: MapCoordinates,
    /// The interior vertices of a link's drawn alignment, by link index (`path` in a model
    /// file), in the nodes' coordinates. Kept apart from [`Link`] so that links without one (the
    /// common case in hand-made models) stay small.
    pub paths: std::collections::BTreeMap<usize, Vec<(f64, f64)>>,
}

impl MapData {
    /// The drawn alignment of link `k` of `model`: its start node, the interior vertices of its
    /// `path`, its end node; `None` when either node has no coordinates.
    pub fn alignment(&self, model: &Model, k: usize) -> Option<Vec<(f64, f64)>> {
        let link = model.links().get(k)?;
        let from = model.nodes()[link.from].coordinates?;
        let to = model.nodes()[link.to].coordinates?;
        let inner = self.paths.get(&k).map(Vec::as_slice).unwrap_or(&[]);
        let mut out = Vec::with_capacity(inner.len() + 2);
        out.push(from);
        out.extend_from_slice(inner);
        out.push(to);
        Some(out)
    }
}

/// A water-distribution network and its options, SI inside.
#[derive(Clone, Debug, Default)]
pub struct Model {
    /// Optional title.
    pub title: Option<String>,
    /// The units the user writes and reads values in.
    pub units: UnitSystem,
    /// Solver options.
    pub options: HydraulicOptions,
    /// What only a simulation over time uses (patterns, controls, tank shapes, energy).
    pub time: time::TimeData,
    /// The `[criteria]` table, typed as read (see [`criteria`]); [`crate::analysis::Criteria::apply`]
    /// turns it into the limits a check applies.
    pub criteria: Option<criteria::CriteriaTable>,
    /// Named fittings of pipes and valves: link index → its list (set through
    /// [`Model::set_fittings`], which checks them). Kept beside the links rather than in them:
    /// few links list fittings, and every link of a large network stays small.
    fittings: BTreeMap<usize, Box<[Fitting]>>,
    /// Outflows that follow pressure: pressure-dependent demand, outlets, leakage.
    pub outflow: outflow::OutflowData,
    /// Map data: coordinate kind and drawn alignments (`[map]`, `path`).
    pub map: MapData,
    nodes: Vec<Node>,
    links: Vec<Link>,
    node_index: ReleasableIndex,
    link_index: ReleasableIndex,
}

/// Two models are equal when their data are; the id indices follow from the elements.
impl PartialEq for Model {
    fn eq(&self, other: &Self) -> bool {
        let Model {
            title,
            units,
            options,
            time,
            criteria,
            outflow,
            map,
            fittings,
            nodes,
            links,
            node_index: _,
            link_index: _,
        } = self;
        *title == other.title
            && *fittings == other.fittings
            && *units == other.units
            && *options == other.options
            && *time == other.time
            && *criteria == other.criteria
            && *outflow == other.outflow
            && *map == other.map
            && *nodes == other.nodes
            && *links == other.links
    }
}

/// Numbers read from a file beyond this size are refused before any unit conversion (see
/// `Fields::magnitude` in the reader): every conversion factor of `units.rs` lies between 1e-9 and
/// 1e9, so a value within these bounds can neither overflow nor vanish on conversion.
pub(crate) const LARGEST_INPUT: f64 = 1e100;
/// The largest demand factor of a what-if scenario: a thousand times the demand is far beyond
/// any design case (fire flow on peak hour is a few times the average), and keeps every flow
/// within the arithmetic.
pub const LARGEST_FACTOR: f64 = 1e3;
/// Non-zero numbers read from a file below this size are refused (see [`LARGEST_INPUT`]).
pub(crate) const SMALLEST_INPUT: f64 = 1e-100;

/// A number for a message: the shortest text that reads back as the same value, in exponent
/// form when large or small (`1e308`, `5e-324`, `0.1`, `150`), never hundreds of digits.
pub fn show(v: f64) -> String {
    if v.is_finite() && v == v.trunc() && v.abs() < 1e16 {
        format!("{v}")
    } else {
        format!("{v:?}")
    }
}

/// Checks that a value is a finite number, and optionally strictly positive or non-negative.
pub(crate) fn check_value(element: &impl Named, key: &str, value: f64, rule: Rule) -> Result<f64, ModelError> {
    let problem = if value.is_nan() {
        Some("must be a number, found NaN".to_owned())
    } else if value.is_infinite() {
        Some(format!("must be finite, found {value}"))
    } else {
        match rule {
            Rule::Finite => None,
            Rule::Positive if value <= 0.0 => Some(format!("must be greater than zero, found {}", show(value))),
            Rule::NonNegative if value < 0.0 => Some(format!("must not be negative, found {}", show(value))),
            _ => None,
        }
    };
    match problem {
        Some(message) => Err(ModelError::at(Some(element.element()), Some(key), message)),
        None => Ok(value),
    }
}

/// What an error names: an element, made only when there is an error to report (checking a
/// large model's values would otherwise copy every id twice).
pub(crate) trait Named {
    fn element(&self) -> Element;
}

impl Named for Element {
    fn element(&self) -> Element {
        self.clone()
    }
}

impl Named for Node {
    fn element(&self) -> Element {
        Element::Node(self.id.to_string())
    }
}

impl Named for Link {
    fn element(&self) -> Element {
        Element::Link(self.id.to_string())
    }
}

/// Checks a link's fittings (see [`Model::set_fittings`]).
pub(crate) fn check_fittings(link: &Link, fittings: &[Fitting]) -> Result<(), ModelError> {
    if fittings.is_empty() {
        return Ok(());
    }
    if let LinkKind::Pump(_) = link.kind {
        return Err(ModelError::at(
            Some(link.element()),
            Some("fittings"),
            "applies to pipes and valves; list a pump's fittings on its suction and discharge pipes",
        ));
    }
    for (i, f) in fittings.iter().enumerate() {
        let key = |k: &str| format!("fittings[{}].{k}", i + 1);
        let fail = |k: &str, message: String| Err(ModelError::at(Some(link.element()), Some(&key(k)), message));
        if f.count < 1 {
            return fail("count", format!("must be at least 1, found {}", f.count));
        }
        match f.kind {
            FittingKind::Bend => {
                if link.as_valve().is_some() {
                    return fail(
                        "kind",
                        "a bend's loss needs the pipe's friction factor; list it on a pipe, not on a valve".into(),
                    );
                }
                if !(f.radius.is_finite() && f.radius >= Fitting::MIN_RADIUS) {
                    return fail(
                        "radius",
                        format!(
                            "must be at least {} pipe diameters (r/D; a tighter turn is a mitre, not a bend), found {}",
                            Fitting::MIN_RADIUS,
                            f.radius
                        ),
                    );
                }
                if !(f.angle.is_finite() && f.angle > 0.0 && f.angle <= 180.0) {
                    return fail("angle", format!("must be above 0 and at most 180 degrees, found {}", f.angle));
                }
            }
            FittingKind::GateValve if !(f.opening.is_finite() && f.opening > 0.0 && f.opening <= 1.0) => {
                return fail(
                    "opening",
                    format!("must be above 0 and at most 1 (the fraction open), found {}", f.opening),
                );
            }
            _ => {}
        }
    }
    Ok(())
}

/// Checks a pump's required-NPSH points: at least two, finite, flows increasing, heads positive.
fn check_npsh_curve(points: &[(f64, f64)]) -> Result<(), String> {
    if points.len() < 2 {
        return Err(format!("needs at least two (flow, head) points, found {}", points.len()));
    }
    for (i, &(q, h)) in points.iter().enumerate() {
        if !(q.is_finite() && h.is_finite()) || q < 0.0 || h <= 0.0 {
            return Err(format!("point {}: flows must not be negative and heads must be above zero", i + 1));
        }
    }
    if let Some(i) = points.windows(2).position(|w| w[1].0 <= w[0].0) {
        return Err(format!("flows must increase from point to point (points {} and {})", i + 1, i + 2));
    }
    Ok(())
}

/// Value rules for [`check_value`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Rule {
    Finite,
    Positive,
    NonNegative,
}

/// Characters that change how text around them is shown without showing themselves: the
/// bidirectional overrides, embeddings and isolates, zero-width spaces and joiners, the word
/// joiner and invisible operators, the soft hyphen, the byte-order mark, and the other
/// format characters of Unicode's general category Cf that appear in text.
fn invisible(c: char) -> bool {
    matches!(
        c,
        '\u{00AD}'
            | '\u{034F}'
            | '\u{061C}'
            | '\u{115F}'
            | '\u{1160}'
            | '\u{17B4}'
            | '\u{17B5}'
            | '\u{180B}'..='\u{180F}'
            | '\u{200B}'..='\u{200F}'
            | '\u{202A}'..='\u{202E}'
            | '\u{2060}'..='\u{206F}'
            | '\u{3164}'
            | '\u{FE00}'..='\u{FE0F}'
            | '\u{FEFF}'
            | '\u{FFA0}'
            | '\u{FFF0}'..='\u{FFFB}'
            | '\u{E0000}'..='\u{E007F}'
    )
}

pub(crate) fn check_id(id: &str, element: &impl Named) -> Result<(), ModelError> {
    if plain_id(id) {
        // Every check below passes: one pass over the bytes rather than three over the
        // characters (a tenth of the time of adding a million nodes).
        return Ok(());
    }
    if id.trim().is_empty() {
        return Err(ModelError::at(Some(element.element()), Some("id"), "must not be empty"));
    }
    if id.chars().any(char::is_control) {
        return Err(ModelError::at(Some(element.element()), Some("id"), "must not contain control characters"));
    }
    if let Some(c) = id.chars().find(|&c| invisible(c)) {
        return Err(ModelError::at(
            Some(element.element()),
            Some("id"),
            format!(
                "must not contain invisible or direction-changing characters, found U+{:04X} (two ids that look \
                 the same on screen must be the same id)",
                c as u32
            ),
        ));
    }
    Ok(())
}

/// An id every check of [`check_id`] takes: printable ASCII without spaces (no white space, no
/// control or invisible character, not empty). The fast readers read elements with such ids
/// straight into the model; other ids go the long way.
#[inline]
pub(crate) fn plain_id(id: &str) -> bool {
    !id.is_empty() && id.bytes().all(|b| (0x21..=0x7e).contains(&b))
}

impl Model {
    /// An empty model with the given units and options.
    pub fn new(units: UnitSystem, options: HydraulicOptions) -> Self {
        Model { units, options, ..Model::default() }
    }

    /// The converter between SI and this model's units (its unit system, its water's density
    /// for pressures, its friction formula for pipe roughness).
    pub fn converter(&self) -> Converter {
        Converter::new(
            self.units,
            self.options.water_properties().density,
            self.options.headloss == HeadLossLaw::HazenWilliams,
        )
    }

    /// All nodes, in the order they were added.
    pub fn nodes(&self) -> &[Node] {
        &self.nodes
    }

    /// All links, in the order they were added.
    pub fn links(&self) -> &[Link] {
        &self.links
    }

    /// Gives back the room the element lists grew into while elements were added one by one
    /// (up to half of it for a large model read from a file), and the work space of the id
    /// indices. Adding elements afterwards still works, a little more slowly.
    pub fn shrink_to_fit(&mut self) {
        self.nodes.shrink_to_fit();
        self.links.shrink_to_fit();
        self.node_index.settle();
        self.link_index.settle();
    }

    /// Makes room for `nodes` more nodes and `links` more links, in the element lists and the id
    /// indices, so that adding them grows neither (a generator or an importer that knows its
    /// counts: at a million elements each growth of an index hashes and moves every entry).
    pub fn reserve(&mut self, nodes: usize, links: usize) {
        self.nodes.reserve_exact(nodes);
        self.links.reserve_exact(links);
        let (all_nodes, all_links) = (&self.nodes, &self.links);
        self.node_index.reserve(nodes, |k| &all_nodes[k].id);
        self.link_index.reserve(links, |k| &all_links[k].id);
    }

    /// Frees the id → position indices of the nodes and links (at a million elements some 20
    /// MB) for a caller that looks up no id, or few, from now on: the command-line `solve`
    /// frees them before solving. The first lookup or addition afterwards makes them again from
    /// the elements' ids (a tenth of a second at a million elements); answers never change.
    pub fn release_id_index(&mut self) {
        self.node_index.release();
        self.link_index.release();
    }

    /// Index of a node by id.
    pub fn node_index(&self, id: &str) -> Option<usize> {
        let nodes = &self.nodes;
        self.node_index.get(nodes.len(), |k| &nodes[k].id).find(id, |k| &nodes[k].id)
    }

    /// Index of a link by id.
    pub fn link_index(&self, id: &str) -> Option<usize> {
        let links = &self.links;
        self.link_index.get(links.len(), |k| &links[k].id).find(id, |k| &links[k].id)
    }

    /// Checks one node's values (used when adding and after changes).
    /// Values in messages are in `length`, the model's unit of lengths, as the file wrote them.
    fn check_node(node: &Node, length: LengthUnit) -> Result<(), ModelError> {
        check_id(&node.id, node)?;
        if let NodeKind::Reservoir { head } = &node.kind {
            // Checked first: a reservoir's elevation defaults to its head.
            check_value(node, "head", *head, Rule::Finite)?;
        }
        check_value(node, "elevation", node.elevation, Rule::Finite)?;
        if let Some((x, y)) = node.coordinates {
            check_value(node, "x", x, Rule::Finite)?;
            check_value(node, "y", y, Rule::Finite)?;
        }
        match &node.kind {
            NodeKind::Junction { demand } => {
                check_value(node, "demand", *demand, Rule::Finite)?;
            }
            NodeKind::Reservoir { head } => {
                check_value(node, "head", *head, Rule::Finite)?;
            }
            NodeKind::Tank(t) => {
                check_value(node, "level", t.level, Rule::NonNegative)?;
                check_value(node, "min_level", t.min_level, Rule::NonNegative)?;
                if let Some(d) = t.diameter {
                    check_value(node, "diameter", d, Rule::Positive)?;
                }
                if t.level < t.min_level {
                    return Err(ModelError::at(
                        Some(node.element()),
                        Some("level"),
                        format!(
                            "is below min_level ({} < {} {})",
                            shown(length.from_si(t.level)),
                            shown(length.from_si(t.min_level)),
                            length.label()
                        ),
                    ));
                }
                if let Some(max) = t.max_level {
                    check_value(node, "max_level", max, Rule::Positive)?;
                    if max < t.min_level {
                        return Err(ModelError::at(Some(node.element()), Some("max_level"), "is below min_level"));
                    }
                    if t.level > max {
                        return Err(ModelError::at(
                            Some(node.element()),
                            Some("level"),
                            format!(
                                "is above max_level ({} > {} {})",
                                shown(length.from_si(t.level)),
                                shown(length.from_si(max)),
                                length.label()
                            ),
                        ));
                    }
                }
            }
        }
        Ok(())
    }

    fn check_link(&self, link: &Link) -> Result<(), ModelError> {
        check_id(&link.id, link)?;
        if link.from >= self.nodes.len() || link.to >= self.nodes.len() {
            return Err(ModelError::at(
                Some(link.element()),
                Some("from"),
                "refers to a node index that does not exist",
            ));
        }
        if link.from == link.to {
            return Err(ModelError::at(
                Some(link.element()),
                Some("to"),
                format!("links node '{}' to itself; a link must join two different nodes", self.nodes[link.to].id),
            ));
        }
        match &link.kind {
            LinkKind::Pipe(p) => {
                check_value(link, "length", p.length, Rule::Positive)?;
                check_value(link, "diameter", p.diameter, Rule::Positive)?;
                let hint = match self.options.headloss {
                    HeadLossLaw::HazenWilliams => "",
                    HeadLossLaw::DarcyWeisbach => {
                        " (for a hydraulically smooth pipe give a small absolute roughness, e.g. 0.0015 mm)"
                    }
                };
                check_value(link, "roughness", p.roughness, Rule::Positive).map_err(|mut e| {
                    e.message.push_str(hint);
                    e
                })?;
                if self.options.headloss == HeadLossLaw::HazenWilliams && p.roughness < 1.0 {
                    return Err(ModelError::at(
                        Some(link.element()),
                        Some("roughness"),
                        format!(
                            "{} is an absolute roughness, but this model uses Hazen-Williams, whose roughness is the \
                             coefficient C (typically 80 to 150)",
                            p.roughness
                        ),
                    ));
                }
                check_value(link, "minor_loss", p.minor_loss, Rule::NonNegative)?;
            }
            LinkKind::Pump(p) => {
                check_value(link, "speed", p.speed, Rule::NonNegative)?;
                match &p.drive {
                    PumpDrive::Power(w) => {
                        check_value(link, "power", *w, Rule::Positive)?;
                    }
                    PumpDrive::Curve { points, .. } => {
                        HeadCurve::fit(points)
                            .map_err(|e| ModelError::at(Some(link.element()), Some("head_curve"), e.0))?;
                    }
                }
                if let Some(points) = &p.efficiency_points {
                    Efficiency::fit(points)
                        .map_err(|e| ModelError::at(Some(link.element()), Some("efficiency_curve"), e.0))?;
                }
                if let Some(z) = p.elevation {
                    check_value(link, "elevation", z, Rule::Finite)?;
                }
                if let Some(points) = &p.npsh_required {
                    check_npsh_curve(points)
                        .map_err(|m| ModelError::at(Some(link.element()), Some("npsh_required_curve"), m))?;
                }
                if let Efficiency::Constant(e) = p.efficiency {
                    if !(e > 0.0 && e <= 1.0) {
                        return Err(ModelError::at(
                            Some(link.element()),
                            Some("efficiency"),
                            "must be above 0 and at most 100 percent",
                        ));
                    }
                }
            }
            LinkKind::Valve(v) => {
                check_value(link, "diameter", v.diameter, Rule::Positive)?;
                check_value(link, "minor_loss", v.minor_loss, Rule::NonNegative)?;
                let rule = match v.valve {
                    ValveType::PressureReducing | ValveType::PressureSustaining => Rule::Finite,
                    ValveType::FlowControl | ValveType::Throttle => Rule::NonNegative,
                };
                check_value(link, "setting", v.setting, rule)?;
            }
        }
        Ok(())
    }

    /// Adds a node after checking its values; returns its index.
    pub fn add_node(&mut self, node: Node) -> Result<usize, ModelError> {
        Self::check_node(&node, self.units.length)?;
        let index = self.nodes.len();
        let nodes = &self.nodes;
        let ids = self.node_index.get_mut(index, |k| &nodes[k].id);
        match ids.insert(&node.id, index, |k| &nodes[k].id) {
            Insert::Added => {}
            Insert::Duplicate => {
                let first = ids.find(&node.id, |k| &nodes[k].id).unwrap_or(0);
                return Err(ModelError::at(
                    Some(node.element()),
                    Some("id"),
                    format!(
                        "is used by another node: nodes entry #{} has the same id, and this is nodes entry #{}; \
                         node ids must be unique",
                        first + 1,
                        self.nodes.len() + 1
                    ),
                ));
            }
            Insert::Full => return Err(ModelError::at(Some(node.element()), None, "too many nodes in one model")),
        }
        self.nodes.push(node);
        Ok(index)
    }

    /// Makes the node index at once from the nodes' ids (in the order of its buckets: see
    /// `IdIndex::build_checked`), after nodes were added by [`Model::add_node_with_new_id`]
    /// without it; `false` (and the index left to be made at its next use) if two nodes have the
    /// same id. A reader adds a file's nodes so, then this checks them all.
    pub(crate) fn index_new_nodes(&mut self) -> bool {
        let nodes = &self.nodes;
        match IdIndex::build_checked(nodes.len(), |k| &nodes[k].id) {
            Some(index) => {
                self.node_index = ReleasableIndex::from(index);
                true
            }
            None => false,
        }
    }

    /// [`Model::add_node`] for a node whose id the caller knows to be unused (the generator's
    /// numbered ids): its values are checked, its id is not looked up. The id indices are freed
    /// and made again at the next lookup (as after [`Model::release_id_index`]), so that a
    /// million additions do not each probe an index far larger than the caches.
    pub(crate) fn add_node_with_new_id(&mut self, node: Node) -> Result<usize, ModelError> {
        Self::check_node(&node, self.units.length)?;
        let index = self.nodes.len();
        if u32::try_from(index).is_err() {
            return Err(ModelError::at(Some(node.element()), None, "too many nodes in one model"));
        }
        self.node_index.release();
        self.nodes.push(node);
        Ok(index)
    }

    /// [`Model::add_link`] for a link whose id the caller knows to be unused (see
    /// [`Model::add_node_with_new_id`]); its values and end nodes are checked.
    pub(crate) fn add_link_with_new_id(&mut self, link: Link) -> Result<usize, ModelError> {
        self.check_link(&link)?;
        let index = self.links.len();
        if u32::try_from(index).is_err() {
            return Err(ModelError::at(Some(link.element()), None, "too many links in one model"));
        }
        self.link_index.release();
        self.links.push(link);
        Ok(index)
    }

    /// Adds a link after checking its values and its end nodes; returns its index.
    pub fn add_link(&mut self, link: Link) -> Result<usize, ModelError> {
        self.check_link(&link)?;
        let index = self.links.len();
        let links = &self.links;
        let ids = self.link_index.get_mut(index, |k| &links[k].id);
        match ids.insert(&link.id, index, |k| &links[k].id) {
            Insert::Added => {}
            Insert::Duplicate => {
                let first = ids.find(&link.id, |k| &links[k].id).unwrap_or(0);
                return Err(ModelError::at(
                    Some(link.element()),
                    Some("id"),
                    format!(
                        "is used by another link: links entry #{} has the same id, and this is links entry #{}; \
                         link ids must be unique",
                        first + 1,
                        self.links.len() + 1
                    ),
                ));
            }
            Insert::Full => return Err(ModelError::at(Some(link.element()), None, "too many links in one model")),
        }
        self.links.push(link);
        Ok(index)
    }

    /// Replaces a node's data (same id) after checking it.
    pub fn replace_node(&mut self, index: usize, node: Node) -> Result<(), ModelError> {
        let old = self.nodes.get(index).ok_or_else(|| ModelError::new(format!("no node at index {index}")))?;
        if old.id != node.id {
            return Err(ModelError::at(Some(old.element()), Some("id"), "cannot be changed"));
        }
        Self::check_node(&node, self.units.length)?;
        self.nodes[index] = node;
        Ok(())
    }

    /// Replaces a link's data (same id) after checking it.
    pub fn replace_link(&mut self, index: usize, link: Link) -> Result<(), ModelError> {
        let old = self.links.get(index).ok_or_else(|| ModelError::new(format!("no link at index {index}")))?;
        if old.id != link.id {
            return Err(ModelError::at(Some(old.element()), Some("id"), "cannot be changed"));
        }
        self.check_link(&link)?;
        self.links[index] = link;
        Ok(())
    }

    /// Sets a junction's demand (m³/s).
    pub fn set_demand(&mut self, index: usize, demand: f64) -> Result<(), ModelError> {
        let mut node =
            self.nodes.get(index).cloned().ok_or_else(|| ModelError::new(format!("no node at index {index}")))?;
        match &mut node.kind {
            NodeKind::Junction { demand: d } => *d = demand,
            _ => {
                return Err(ModelError::at(
                    Some(node.element()),
                    Some("demand"),
                    format!("only junctions have a demand; this node is a {}", node.kind.label()),
                ))
            }
        }
        self.replace_node(index, node)
    }

    /// Sets a pump's relative speed.
    pub fn set_pump_speed(&mut self, index: usize, speed: f64) -> Result<(), ModelError> {
        let mut link =
            self.links.get(index).cloned().ok_or_else(|| ModelError::new(format!("no link at index {index}")))?;
        match &mut link.kind {
            LinkKind::Pump(p) => p.speed = speed,
            _ => return Err(ModelError::at(Some(link.element()), Some("speed"), "only pumps have a speed")),
        }
        self.replace_link(index, link)
    }

    /// Sets a valve's setting (SI: pressure head in m, flow in m³/s, or K).
    pub fn set_valve_setting(&mut self, index: usize, setting: f64) -> Result<(), ModelError> {
        let mut link =
            self.links.get(index).cloned().ok_or_else(|| ModelError::new(format!("no link at index {index}")))?;
        match &mut link.kind {
            LinkKind::Valve(v) => v.setting = setting,
            _ => return Err(ModelError::at(Some(link.element()), Some("setting"), "only valves have a setting")),
        }
        self.replace_link(index, link)
    }

    /// The named fittings of the link at `index` (empty when it lists none).
    pub fn fittings(&self, index: usize) -> &[Fitting] {
        self.fittings.get(&index).map_or(&[], |f| f)
    }

    /// The named fittings of `link`, a link of this model (empty when it lists none). Costs an
    /// id lookup only when some link of the model lists fittings.
    pub fn fittings_of(&self, link: &Link) -> &[Fitting] {
        if self.fittings.is_empty() {
            return &[];
        }
        self.link_index(&link.id).map_or(&[], |k| self.fittings(k))
    }

    /// Whether any link lists named fittings.
    pub fn has_fittings(&self) -> bool {
        !self.fittings.is_empty()
    }

    /// Sets the named fittings of the link at `index` after checking them: pipes and valves
    /// only, a bend only on a pipe (its K needs the pipe's friction factor), and every value in
    /// range. Errors name the link and the key as `fittings[n].key`, n counted from 1.
    pub fn set_fittings(&mut self, index: usize, fittings: Vec<Fitting>) -> Result<(), ModelError> {
        let link = self.links.get(index).ok_or_else(|| ModelError::new(format!("no link at index {index}")))?;
        check_fittings(link, &fittings)?;
        if fittings.is_empty() {
            self.fittings.remove(&index);
        } else {
            self.fittings.insert(index, fittings.into_boxed_slice());
        }
        Ok(())
    }

    /// Changes one value of many nodes in place, all or none: `change(index, node)` writes the
    /// new value into the node's data and returns the old one, or `None` when it leaves the node
    /// alone; every changed node is then checked as [`Model::replace_node`] checks it. On the
    /// first error (from `change` or a check) every node changed so far gets its old value back
    /// through `restore(node, old)` and the error is returned.
    ///
    /// This is the whole-array path of the C library's setters: no node is copied, so setting
    /// every demand of a large network costs a pass over the nodes. `change` must not change a
    /// node's id or kind (the id index would no longer match); it changes values.
    pub fn change_nodes<T>(
        &mut self,
        mut change: impl FnMut(usize, &mut Node) -> Result<Option<T>, ModelError>,
        mut restore: impl FnMut(&mut Node, T),
    ) -> Result<(), ModelError> {
        let mut undo: Vec<(usize, T)> = Vec::new();
        let mut failure = None;
        let length = self.units.length;
        for (i, node) in self.nodes.iter_mut().enumerate() {
            match change(i, node) {
                Ok(Some(old)) => {
                    undo.push((i, old));
                    if let Err(e) = Self::check_node(node, length) {
                        failure = Some(e);
                        break;
                    }
                }
                Ok(None) => {}
                Err(e) => {
                    failure = Some(e);
                    break;
                }
            }
        }
        match failure {
            None => Ok(()),
            Some(e) => {
                for (i, old) in undo.into_iter().rev() {
                    restore(&mut self.nodes[i], old);
                }
                Err(e)
            }
        }
    }

    /// Changes one value of many links in place, all or none, as [`Model::change_nodes`] does
    /// for nodes (each changed link is checked as [`Model::replace_link`] checks it).
    pub fn change_links<T>(
        &mut self,
        mut change: impl FnMut(usize, &mut Link) -> Result<Option<T>, ModelError>,
        mut restore: impl FnMut(&mut Link, T),
    ) -> Result<(), ModelError> {
        let mut links = std::mem::take(&mut self.links);
        let mut undo: Vec<(usize, T)> = Vec::new();
        let mut failure = None;
        for (k, link) in links.iter_mut().enumerate() {
            let (from, to) = (link.from, link.to);
            match change(k, link) {
                Ok(Some(old)) => {
                    undo.push((k, old));
                    // The ends are not the caller's to change (nor the id: see the docs).
                    let checked = if link.from != from || link.to != to {
                        Err(ModelError::at(Some(link.element()), Some("from"), "cannot be changed"))
                    } else {
                        self.check_link(link)
                    };
                    if let Err(e) = checked {
                        failure = Some(e);
                        break;
                    }
                }
                Ok(None) => {}
                Err(e) => {
                    failure = Some(e);
                    break;
                }
            }
        }
        if let Some(e) = failure {
            for (k, old) in undo.into_iter().rev() {
                restore(&mut links[k], old);
            }
            self.links = links;
            return Err(e);
        }
        self.links = links;
        Ok(())
    }

    /// Sets a link's status.
    pub fn set_status(&mut self, index: usize, status: LinkStatus) -> Result<(), ModelError> {
        let link = self.links.get_mut(index).ok_or_else(|| ModelError::new(format!("no link at index {index}")))?;
        link.status = status;
        Ok(())
    }

    /// Checks that the model can be solved ([`Model::check_data`]).
    pub fn validate(&self) -> Result<(), ModelError> {
        self.check_data()
    }

    /// Checks the whole network: at least one node with a fixed head, plausible water, and
    /// consistent outflow data.
    pub fn check_data(&self) -> Result<(), ModelError> {
        if self.nodes.is_empty() {
            return Err(ModelError::at(Some(Element::Table("nodes".into())), None, "the model has no nodes"));
        }
        if !self.nodes.iter().any(|n| n.fixed_head().is_some()) {
            return Err(ModelError::at(
                Some(Element::Table("nodes".into())),
                Some("kind"),
                "the model has no reservoir or tank: at least one node with a fixed head is needed to set the heads",
            ));
        }
        if let WaterSpec::Temperature(t) = self.options.water {
            if !(WaterProperties::MIN_CELSIUS..=WaterProperties::MAX_CELSIUS).contains(&t) {
                return Err(ModelError::at(
                    Some(Element::Table("hydraulics".into())),
                    Some("water_temperature"),
                    format!(
                        "must be between {} and {} deg C, found {t}",
                        WaterProperties::MIN_CELSIUS,
                        WaterProperties::MAX_CELSIUS
                    ),
                ));
            }
        }
        self.outflow.check(self)
    }
}
