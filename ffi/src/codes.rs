//! The integer codes of the C interface.
//!
//! Every enum here is `#[repr(u32)]` so that the header shows its constants, but codes travel *into*
//! the library as plain `uint32_t` and are converted with a fallible function: an integer from C
//! that names no constant is an error (`RINGMAIN_INVALID_ARGUMENT`), never an invalid Rust enum.

use crate::boundary::Failure;
use ringmain_core::model::ValveType;
use ringmain_core::units::{DiameterUnit, FlowUnit, LengthUnit, PressureUnit, RoughnessUnit};
use ringmain_core::{HeadLossLaw, LinkState};

/// Result of every function of the library that can fail.
///
/// `RINGMAIN_OK` is zero; every other code means the function did nothing but record a message
/// for `ringmain_last_error`. `ringmain_status_text` turns a code into a short description.
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_status {
    /// Success; the outputs were written.
    RINGMAIN_OK = 0,
    /// An argument has a value the function does not accept (an integer that names no constant, a
    /// string that is not UTF-8, a file name without a .toml or .json extension...).
    RINGMAIN_INVALID_ARGUMENT = 1,
    /// A pointer argument that must not be NULL was NULL (or was misaligned).
    RINGMAIN_NULL_POINTER = 2,
    /// The model text, file or a value given for an element fails a check; the last error names
    /// the file, the element and the key.
    RINGMAIN_MODEL_INVALID = 3,
    /// The solver reached its iteration limit before meeting the tolerances; no results.
    RINGMAIN_NOT_CONVERGED = 4,
    /// A file could not be read or written.
    RINGMAIN_IO = 5,
    /// No node or link has the given id.
    RINGMAIN_NOT_FOUND = 6,
    /// An index is past the end of the nodes, links, warnings or points.
    RINGMAIN_OUT_OF_RANGE = 7,
    /// The caller's buffer is too small; the size needed was written to the size output.
    RINGMAIN_BUFFER_TOO_SMALL = 8,
    /// A bug in the library was caught at the boundary; the handles involved may be in any state
    /// and should be freed.
    RINGMAIN_PANIC = 9,
    /// The element at the index is not of the kind the function needs (a demand for a reservoir,
    /// a speed for a pipe...).
    RINGMAIN_WRONG_KIND = 10,
    /// The solver failed otherwise: device states kept cycling, or the linear system could not be
    /// factored; no results.
    RINGMAIN_SOLVE_FAILED = 11,
}

impl ringmain_status {
    /// Every status code, in order.
    pub const ALL: &'static [ringmain_status] = &[
        ringmain_status::RINGMAIN_OK,
        ringmain_status::RINGMAIN_INVALID_ARGUMENT,
        ringmain_status::RINGMAIN_NULL_POINTER,
        ringmain_status::RINGMAIN_MODEL_INVALID,
        ringmain_status::RINGMAIN_NOT_CONVERGED,
        ringmain_status::RINGMAIN_IO,
        ringmain_status::RINGMAIN_NOT_FOUND,
        ringmain_status::RINGMAIN_OUT_OF_RANGE,
        ringmain_status::RINGMAIN_BUFFER_TOO_SMALL,
        ringmain_status::RINGMAIN_PANIC,
        ringmain_status::RINGMAIN_WRONG_KIND,
        ringmain_status::RINGMAIN_SOLVE_FAILED,
    ];

    /// A short description of the code (the text of `ringmain_status_text`).
    pub fn text(self) -> &'static std::ffi::CStr {
        match self {
            ringmain_status::RINGMAIN_OK => c"success",
            ringmain_status::RINGMAIN_INVALID_ARGUMENT => c"invalid argument",
            ringmain_status::RINGMAIN_NULL_POINTER => c"null or misaligned pointer",
            ringmain_status::RINGMAIN_MODEL_INVALID => c"invalid model",
            ringmain_status::RINGMAIN_NOT_CONVERGED => c"the solver did not converge",
            ringmain_status::RINGMAIN_IO => c"file input or output failed",
            ringmain_status::RINGMAIN_NOT_FOUND => c"no element with this id",
            ringmain_status::RINGMAIN_OUT_OF_RANGE => c"index out of range",
            ringmain_status::RINGMAIN_BUFFER_TOO_SMALL => c"buffer too small",
            ringmain_status::RINGMAIN_PANIC => c"internal error (a bug in ringmain)",
            ringmain_status::RINGMAIN_WRONG_KIND => c"the element is not of the kind this function needs",
            ringmain_status::RINGMAIN_SOLVE_FAILED => c"the solver failed",
        }
    }
}

/// Gives a C enum its list of constants and its fallible conversion from a plain integer. The
/// match in `covers_every_constant` fails to compile when a constant is missing from the list.
/// (cbindgen does not expand macros, so the enums themselves are written out above.)
macro_rules! codes {
    ($name:ident, $what:literal, [$($var:ident),+ $(,)?]) => {
        impl $name {
            /// Every constant, in order.
            pub const ALL: &'static [$name] = &[$($name::$var),+];

            /// Converts an integer from C; an integer naming no constant is an invalid argument.
            pub fn from_code(code: u32, argument: &str) -> Result<Self, Failure> {
                Self::ALL.iter().copied().find(|v| *v as u32 == code).ok_or_else(|| {
                    let choices: Vec<String> =
                        Self::ALL.iter().map(|v| format!("{} ({v:?})", *v as u32)).collect();
                    Failure::invalid(format!(
                        "argument '{argument}': {code} is not a valid {}; expected one of {}",
                        $what,
                        choices.join(", ")
                    ))
                })
            }

            #[allow(dead_code)]
            fn covers_every_constant(self) {
                match self {
                    $($name::$var => {}),+
                }
            }
        }
    };
}

/// Unit of lengths, elevations, heads, tank levels and tank diameters (`ringmain_model_new`).
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_length_unit {
    /// metre (the default)
    RINGMAIN_LENGTH_M = 0,
    /// international foot
    RINGMAIN_LENGTH_FT = 1,
}

codes!(ringmain_length_unit, "length unit", [RINGMAIN_LENGTH_M, RINGMAIN_LENGTH_FT]);

/// Unit of pipe and valve diameters.
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_diameter_unit {
    /// millimetre (the default)
    RINGMAIN_DIAMETER_MM = 0,
    /// metre
    RINGMAIN_DIAMETER_M = 1,
    /// inch
    RINGMAIN_DIAMETER_IN = 2,
    /// foot
    RINGMAIN_DIAMETER_FT = 3,
}

codes!(
    ringmain_diameter_unit,
    "diameter unit",
    [RINGMAIN_DIAMETER_MM, RINGMAIN_DIAMETER_M, RINGMAIN_DIAMETER_IN, RINGMAIN_DIAMETER_FT]
);

/// Unit of flows and demands.
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_flow_unit {
    /// litre per second (the default)
    RINGMAIN_FLOW_LPS = 0,
    /// cubic metre per second
    RINGMAIN_FLOW_M3S = 1,
    /// cubic metre per hour
    RINGMAIN_FLOW_M3H = 2,
    /// megalitre per day
    RINGMAIN_FLOW_MLD = 3,
    /// US gallon per minute
    RINGMAIN_FLOW_GPM = 4,
    /// cubic foot per second
    RINGMAIN_FLOW_CFS = 5,
    /// million US gallons per day
    RINGMAIN_FLOW_MGD = 6,
}

codes!(
    ringmain_flow_unit,
    "flow unit",
    [
        RINGMAIN_FLOW_LPS,
        RINGMAIN_FLOW_M3S,
        RINGMAIN_FLOW_M3H,
        RINGMAIN_FLOW_MLD,
        RINGMAIN_FLOW_GPM,
        RINGMAIN_FLOW_CFS,
        RINGMAIN_FLOW_MGD
    ]
);

/// Unit of pressures (results and pressure-valve settings).
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_pressure_unit {
    /// metre of the model's water, pressure head (the default)
    RINGMAIN_PRESSURE_M = 0,
    /// kilopascal
    RINGMAIN_PRESSURE_KPA = 1,
    /// bar
    RINGMAIN_PRESSURE_BAR = 2,
    /// pound-force per square inch
    RINGMAIN_PRESSURE_PSI = 3,
    /// foot of the model's water, pressure head
    RINGMAIN_PRESSURE_FT = 4,
}

codes!(
    ringmain_pressure_unit,
    "pressure unit",
    [RINGMAIN_PRESSURE_M, RINGMAIN_PRESSURE_KPA, RINGMAIN_PRESSURE_BAR, RINGMAIN_PRESSURE_PSI, RINGMAIN_PRESSURE_FT]
);

/// Unit of the absolute roughness of pipes under Darcy–Weisbach (Hazen–Williams C has none).
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_roughness_unit {
    /// millimetre (the default)
    RINGMAIN_ROUGHNESS_MM = 0,
    /// metre
    RINGMAIN_ROUGHNESS_M = 1,
    /// inch
    RINGMAIN_ROUGHNESS_IN = 2,
    /// foot
    RINGMAIN_ROUGHNESS_FT = 3,
}

codes!(
    ringmain_roughness_unit,
    "roughness unit",
    [RINGMAIN_ROUGHNESS_MM, RINGMAIN_ROUGHNESS_M, RINGMAIN_ROUGHNESS_IN, RINGMAIN_ROUGHNESS_FT]
);

/// Friction law of every pipe of a model.
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_headloss {
    /// Hazen–Williams; pipe roughness is the coefficient C (the default).
    RINGMAIN_HEADLOSS_HAZEN_WILLIAMS = 0,
    /// Darcy–Weisbach with Colebrook–White; pipe roughness is the absolute roughness.
    RINGMAIN_HEADLOSS_DARCY_WEISBACH = 1,
}

codes!(ringmain_headloss, "head-loss law", [RINGMAIN_HEADLOSS_HAZEN_WILLIAMS, RINGMAIN_HEADLOSS_DARCY_WEISBACH]);

/// A quantity whose unit label `ringmain_model_unit_label` returns.
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_quantity {
    /// lengths, elevations, heads, levels, head losses
    RINGMAIN_QUANTITY_LENGTH = 0,
    /// pipe and valve diameters
    RINGMAIN_QUANTITY_DIAMETER = 1,
    /// flows and demands
    RINGMAIN_QUANTITY_FLOW = 2,
    /// pressures
    RINGMAIN_QUANTITY_PRESSURE = 3,
    /// pipe roughness (empty text under Hazen–Williams, whose C has no unit)
    RINGMAIN_QUANTITY_ROUGHNESS = 4,
    /// velocities
    RINGMAIN_QUANTITY_VELOCITY = 5,
    /// pump power (kW, or hp when lengths are in feet)
    RINGMAIN_QUANTITY_POWER = 6,
}

codes!(
    ringmain_quantity,
    "quantity",
    [
        RINGMAIN_QUANTITY_LENGTH,
        RINGMAIN_QUANTITY_DIAMETER,
        RINGMAIN_QUANTITY_FLOW,
        RINGMAIN_QUANTITY_PRESSURE,
        RINGMAIN_QUANTITY_ROUGHNESS,
        RINGMAIN_QUANTITY_VELOCITY,
        RINGMAIN_QUANTITY_POWER
    ]
);

/// What a node is.
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_node_kind {
    /// a junction with a demand
    RINGMAIN_NODE_JUNCTION = 0,
    /// a fixed-head reservoir
    RINGMAIN_NODE_RESERVOIR = 1,
    /// a tank (fixed head `elevation + level` in a snapshot)
    RINGMAIN_NODE_TANK = 2,
}

codes!(ringmain_node_kind, "node kind", [RINGMAIN_NODE_JUNCTION, RINGMAIN_NODE_RESERVOIR, RINGMAIN_NODE_TANK]);

/// What a link is.
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_link_kind {
    /// a pipe
    RINGMAIN_LINK_PIPE = 0,
    /// a pump
    RINGMAIN_LINK_PUMP = 1,
    /// a control valve
    RINGMAIN_LINK_VALVE = 2,
}

codes!(ringmain_link_kind, "link kind", [RINGMAIN_LINK_PIPE, RINGMAIN_LINK_PUMP, RINGMAIN_LINK_VALVE]);

/// The kind of a control valve.
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_valve_type {
    /// holds the downstream pressure at the setting (a pressure)
    RINGMAIN_VALVE_PRESSURE_REDUCING = 0,
    /// holds the upstream pressure at the setting (a pressure)
    RINGMAIN_VALVE_PRESSURE_SUSTAINING = 1,
    /// holds the flow at the setting (a flow)
    RINGMAIN_VALVE_FLOW_CONTROL = 2,
    /// a set loss coefficient K (dimensionless)
    RINGMAIN_VALVE_THROTTLE = 3,
}

codes!(
    ringmain_valve_type,
    "valve type",
    [
        RINGMAIN_VALVE_PRESSURE_REDUCING,
        RINGMAIN_VALVE_PRESSURE_SUSTAINING,
        RINGMAIN_VALVE_FLOW_CONTROL,
        RINGMAIN_VALVE_THROTTLE
    ]
);

/// The status a user sets on a link.
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_link_status {
    /// in service (for a valve: held fully open, not regulating)
    RINGMAIN_STATUS_OPEN = 0,
    /// out of service, carries no flow
    RINGMAIN_STATUS_CLOSED = 1,
    /// valves only: regulating by its setting (a valve's default)
    RINGMAIN_STATUS_AUTOMATIC = 2,
}

codes!(ringmain_link_status, "link status", [RINGMAIN_STATUS_OPEN, RINGMAIN_STATUS_CLOSED, RINGMAIN_STATUS_AUTOMATIC]);

/// The format of model text (`ringmain_model_write`).
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_format {
    /// TOML
    RINGMAIN_FORMAT_TOML = 0,
    /// JSON
    RINGMAIN_FORMAT_JSON = 1,
}

codes!(ringmain_format, "model format", [RINGMAIN_FORMAT_TOML, RINGMAIN_FORMAT_JSON]);

/// The state of a link in a solution (`ringmain_results_link_states`).
/// `ringmain_link_state_text` gives its status word and the reason.
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_link_state {
    /// open and carrying flow
    RINGMAIN_STATE_OPEN = 0,
    /// closed by the user
    RINGMAIN_STATE_CLOSED = 1,
    /// a check valve closed against reverse flow
    RINGMAIN_STATE_CHECK_VALVE_CLOSED = 2,
    /// open, but cut off from every reservoir and tank
    RINGMAIN_STATE_DISCONNECTED = 3,
    /// a pump at zero speed
    RINGMAIN_STATE_PUMP_STOPPED = 4,
    /// a pump closed because the system asks for more head than its shutoff head
    RINGMAIN_STATE_PUMP_SHUTOFF = 5,
    /// a control valve regulating (holding its setting)
    RINGMAIN_STATE_ACTIVE = 6,
    /// a pressure-reducing valve fully open: the upstream head is too low to regulate
    RINGMAIN_STATE_OPEN_UPSTREAM_LOW = 7,
    /// a pressure-sustaining valve fully open: the upstream pressure is above the setting
    RINGMAIN_STATE_OPEN_ABOVE_SETTING = 8,
    /// a flow-control valve fully open: the head available cannot drive the set flow
    RINGMAIN_STATE_OPEN_BELOW_SETTING = 9,
    /// a control valve closed: flow would reverse, or the downstream pressure is above the setting
    RINGMAIN_STATE_VALVE_CLOSED = 10,
    /// a state of a newer core that this version of the interface does not name
    RINGMAIN_STATE_OTHER = 255,
}

codes!(
    ringmain_link_state,
    "link state",
    [
        RINGMAIN_STATE_OPEN,
        RINGMAIN_STATE_CLOSED,
        RINGMAIN_STATE_CHECK_VALVE_CLOSED,
        RINGMAIN_STATE_DISCONNECTED,
        RINGMAIN_STATE_PUMP_STOPPED,
        RINGMAIN_STATE_PUMP_SHUTOFF,
        RINGMAIN_STATE_ACTIVE,
        RINGMAIN_STATE_OPEN_UPSTREAM_LOW,
        RINGMAIN_STATE_OPEN_ABOVE_SETTING,
        RINGMAIN_STATE_OPEN_BELOW_SETTING,
        RINGMAIN_STATE_VALVE_CLOSED,
        RINGMAIN_STATE_OTHER
    ]
);

impl ringmain_length_unit {
    /// The core's unit.
    pub fn unit(self) -> LengthUnit {
        match self {
            Self::RINGMAIN_LENGTH_M => LengthUnit::Metre,
            Self::RINGMAIN_LENGTH_FT => LengthUnit::Foot,
        }
    }
}

impl ringmain_diameter_unit {
    /// The core's unit.
    pub fn unit(self) -> DiameterUnit {
        match self {
            Self::RINGMAIN_DIAMETER_MM => DiameterUnit::Millimetre,
            Self::RINGMAIN_DIAMETER_M => DiameterUnit::Metre,
            Self::RINGMAIN_DIAMETER_IN => DiameterUnit::Inch,
            Self::RINGMAIN_DIAMETER_FT => DiameterUnit::Foot,
        }
    }
}

impl ringmain_flow_unit {
    /// The core's unit.
    pub fn unit(self) -> FlowUnit {
        match self {
            Self::RINGMAIN_FLOW_LPS => FlowUnit::LitrePerSecond,
            Self::RINGMAIN_FLOW_M3S => FlowUnit::CubicMetrePerSecond,
            Self::RINGMAIN_FLOW_M3H => FlowUnit::CubicMetrePerHour,
            Self::RINGMAIN_FLOW_MLD => FlowUnit::MegalitrePerDay,
            Self::RINGMAIN_FLOW_GPM => FlowUnit::GallonPerMinute,
            Self::RINGMAIN_FLOW_CFS => FlowUnit::CubicFootPerSecond,
            Self::RINGMAIN_FLOW_MGD => FlowUnit::MillionGallonPerDay,
        }
    }
}

impl ringmain_pressure_unit {
    /// The core's unit.
    pub fn unit(self) -> PressureUnit {
        match self {
            Self::RINGMAIN_PRESSURE_M => PressureUnit::MetreOfWater,
            Self::RINGMAIN_PRESSURE_KPA => PressureUnit::Kilopascal,
            Self::RINGMAIN_PRESSURE_BAR => PressureUnit::Bar,
            Self::RINGMAIN_PRESSURE_PSI => PressureUnit::Psi,
            Self::RINGMAIN_PRESSURE_FT => PressureUnit::FootOfWater,
        }
    }
}

impl ringmain_roughness_unit {
    /// The core's unit.
    pub fn unit(self) -> RoughnessUnit {
        match self {
            Self::RINGMAIN_ROUGHNESS_MM => RoughnessUnit::Millimetre,
            Self::RINGMAIN_ROUGHNESS_M => RoughnessUnit::Metre,
            Self::RINGMAIN_ROUGHNESS_IN => RoughnessUnit::Inch,
            Self::RINGMAIN_ROUGHNESS_FT => RoughnessUnit::Foot,
        }
    }
}

impl ringmain_headloss {
    /// The core's law.
    pub fn law(self) -> HeadLossLaw {
        match self {
            Self::RINGMAIN_HEADLOSS_HAZEN_WILLIAMS => HeadLossLaw::HazenWilliams,
            Self::RINGMAIN_HEADLOSS_DARCY_WEISBACH => HeadLossLaw::DarcyWeisbach,
        }
    }

    /// The code of a core law.
    pub fn of(law: HeadLossLaw) -> Self {
        match law {
            HeadLossLaw::HazenWilliams => Self::RINGMAIN_HEADLOSS_HAZEN_WILLIAMS,
            HeadLossLaw::DarcyWeisbach => Self::RINGMAIN_HEADLOSS_DARCY_WEISBACH,
        }
    }
}

impl ringmain_valve_type {
    /// The core's valve type.
    pub fn valve(self) -> ValveType {
        match self {
            Self::RINGMAIN_VALVE_PRESSURE_REDUCING => ValveType::PressureReducing,
            Self::RINGMAIN_VALVE_PRESSURE_SUSTAINING => ValveType::PressureSustaining,
            Self::RINGMAIN_VALVE_FLOW_CONTROL => ValveType::FlowControl,
            Self::RINGMAIN_VALVE_THROTTLE => ValveType::Throttle,
        }
    }

    /// The code of a core valve type.
    pub fn of(valve: ValveType) -> Self {
        match valve {
            ValveType::PressureReducing => Self::RINGMAIN_VALVE_PRESSURE_REDUCING,
            ValveType::PressureSustaining => Self::RINGMAIN_VALVE_PRESSURE_SUSTAINING,
            ValveType::FlowControl => Self::RINGMAIN_VALVE_FLOW_CONTROL,
            ValveType::Throttle => Self::RINGMAIN_VALVE_THROTTLE,
        }
    }
}

impl ringmain_link_state {
    /// The code of a core link state.
    pub fn of(state: LinkState) -> Self {
        match state {
            LinkState::Open => Self::RINGMAIN_STATE_OPEN,
            LinkState::Closed => Self::RINGMAIN_STATE_CLOSED,
            LinkState::CheckValveClosed => Self::RINGMAIN_STATE_CHECK_VALVE_CLOSED,
            LinkState::Disconnected => Self::RINGMAIN_STATE_DISCONNECTED,
            LinkState::PumpStopped => Self::RINGMAIN_STATE_PUMP_STOPPED,
            LinkState::PumpShutoff => Self::RINGMAIN_STATE_PUMP_SHUTOFF,
            LinkState::Active => Self::RINGMAIN_STATE_ACTIVE,
            LinkState::OpenUpstreamLow => Self::RINGMAIN_STATE_OPEN_UPSTREAM_LOW,
            LinkState::OpenAboveSetting => Self::RINGMAIN_STATE_OPEN_ABOVE_SETTING,
            LinkState::OpenBelowSetting => Self::RINGMAIN_STATE_OPEN_BELOW_SETTING,
            LinkState::ValveClosed => Self::RINGMAIN_STATE_VALVE_CLOSED,
            _ => Self::RINGMAIN_STATE_OTHER,
        }
    }

    /// The core's state (`None` for `RINGMAIN_STATE_OTHER`).
    pub fn state(self) -> Option<LinkState> {
        Some(match self {
            Self::RINGMAIN_STATE_OPEN => LinkState::Open,
            Self::RINGMAIN_STATE_CLOSED => LinkState::Closed,
            Self::RINGMAIN_STATE_CHECK_VALVE_CLOSED => LinkState::CheckValveClosed,
            Self::RINGMAIN_STATE_DISCONNECTED => LinkState::Disconnected,
            Self::RINGMAIN_STATE_PUMP_STOPPED => LinkState::PumpStopped,
            Self::RINGMAIN_STATE_PUMP_SHUTOFF => LinkState::PumpShutoff,
            Self::RINGMAIN_STATE_ACTIVE => LinkState::Active,
            Self::RINGMAIN_STATE_OPEN_UPSTREAM_LOW => LinkState::OpenUpstreamLow,
            Self::RINGMAIN_STATE_OPEN_ABOVE_SETTING => LinkState::OpenAboveSetting,
            Self::RINGMAIN_STATE_OPEN_BELOW_SETTING => LinkState::OpenBelowSetting,
            Self::RINGMAIN_STATE_VALVE_CLOSED => LinkState::ValveClosed,
            Self::RINGMAIN_STATE_OTHER => return None,
        })
    }
}

impl ringmain_node_kind {
    /// The code of a node kind; an error naming the node for a kind this interface has no code for.
    pub fn of(node: &ringmain_core::Node) -> Result<Self, Failure> {
        use ringmain_core::NodeKind;
        match &node.kind {
            NodeKind::Junction { .. } => Ok(ringmain_node_kind::RINGMAIN_NODE_JUNCTION),
            NodeKind::Reservoir { .. } => Ok(ringmain_node_kind::RINGMAIN_NODE_RESERVOIR),
            NodeKind::Tank(_) => Ok(ringmain_node_kind::RINGMAIN_NODE_TANK),
            #[allow(unreachable_patterns)]
            other => Err(Failure::wrong_kind(format!(
                "node '{}': a {} has no code in this version of the interface",
                ringmain_core::error::printable(&node.id),
                other.label()
            ))),
        }
    }
}

impl ringmain_link_kind {
    /// The code of a link kind; an error naming the link for a kind this interface has no code for.
    pub fn of(link: &ringmain_core::Link) -> Result<Self, Failure> {
        use ringmain_core::LinkKind;
        match &link.kind {
            LinkKind::Pipe(_) => Ok(ringmain_link_kind::RINGMAIN_LINK_PIPE),
            LinkKind::Pump(_) => Ok(ringmain_link_kind::RINGMAIN_LINK_PUMP),
            LinkKind::Valve(_) => Ok(ringmain_link_kind::RINGMAIN_LINK_VALVE),
            #[allow(unreachable_patterns)]
            other => Err(Failure::wrong_kind(format!(
                "link '{}': a {} has no code in this version of the interface",
                ringmain_core::error::printable(&link.id),
                other.label()
            ))),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codes_convert_both_ways_and_reject_unknown_integers() {
        for &s in ringmain_link_state::ALL {
            assert_eq!(ringmain_link_state::from_code(s as u32, "state").unwrap(), s);
            if let Some(core) = s.state() {
                assert_eq!(ringmain_link_state::of(core), s);
            }
        }
        for &v in ringmain_valve_type::ALL {
            assert_eq!(ringmain_valve_type::of(v.valve()), v);
        }
        let e = ringmain_valve_type::from_code(4, "valve_type").unwrap_err();
        assert!(e.message.contains("4 is not a valid valve type"), "{}", e.message);
        assert!(e.message.contains("3 (RINGMAIN_VALVE_THROTTLE)"), "{}", e.message);
        assert!(ringmain_flow_unit::from_code(u32::MAX, "flow").is_err());
    }

    #[test]
    fn unit_codes_cover_every_core_unit_in_order() {
        // The codes follow the order of the core's lists, so a unit added there shows up here.
        let length: Vec<_> = ringmain_length_unit::ALL.iter().map(|u| u.unit()).collect();
        assert_eq!(length, LengthUnit::ALL);
        let diameter: Vec<_> = ringmain_diameter_unit::ALL.iter().map(|u| u.unit()).collect();
        assert_eq!(diameter, DiameterUnit::ALL);
        let flow: Vec<_> = ringmain_flow_unit::ALL.iter().map(|u| u.unit()).collect();
        assert_eq!(flow, FlowUnit::ALL);
        let pressure: Vec<_> = ringmain_pressure_unit::ALL.iter().map(|u| u.unit()).collect();
        assert_eq!(pressure, PressureUnit::ALL);
        let roughness: Vec<_> = ringmain_roughness_unit::ALL.iter().map(|u| u.unit()).collect();
        assert_eq!(roughness, RoughnessUnit::ALL);
        let valves: Vec<_> = ringmain_valve_type::ALL.iter().map(|v| v.valve()).collect();
        assert_eq!(valves, ValveType::ALL);
    }
}
