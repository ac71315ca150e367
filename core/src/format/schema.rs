//! What a model file may hold: the kinds of element, as enums matched exhaustively, and the keys
//! each place and each kind accepts. The reader checks every key against these lists, the
//! syntax tree shares the element keys instead of copying them, and the writer's round-trip test
//! checks that each is written back. A new kind of element is a new variant here; the compiler
//! then points at every match in the reader that must handle it.

use std::sync::OnceLock;

/// A kind of entry that a `kind` key chooses (nodes, links, `[[quality]]` entries).
pub trait EntryKind: Copy + Sized + 'static {
    /// Every kind, in the order messages list them.
    const ALL: &'static [Self];
    /// The kind of an entry without a `kind` key.
    const DEFAULT: Self;
    /// The name written in the file.
    fn name(self) -> &'static str;
    /// The keys an entry of this kind accepts.
    fn keys(self) -> &'static [&'static str];

    /// The kind a file's name stands for.
    fn from_name(name: &str) -> Option<Self> {
        Self::ALL.iter().copied().find(|k| k.name() == name)
    }

    /// Every key of every kind of this entry, sorted, each once.
    fn all_keys() -> Vec<&'static str> {
        let mut keys: Vec<&str> = Self::ALL.iter().flat_map(|k| k.keys().iter().copied()).collect();
        keys.sort_unstable();
        keys.dedup();
        keys
    }
}

/// Defines a kind of entry: its variants, each with the name the file gives it and the keys it
/// accepts, and their [`EntryKind`] implementation (one list, so the names, the keys and the
/// variants cannot drift apart).
macro_rules! entry_kinds {
    ($(#[$doc:meta])* $ty:ident, default $default:ident; $($variant:ident = $name:literal: [$($key:literal),* $(,)?],)+) => {
        $(#[$doc])*
        #[derive(Clone, Copy, Debug, PartialEq, Eq)]
        pub enum $ty {
            $(#[doc = concat!("`kind = \"", $name, "\"`.")] $variant,)+
        }

        impl EntryKind for $ty {
            const ALL: &'static [Self] = &[$($ty::$variant),+];
            const DEFAULT: Self = $ty::$default;

            fn name(self) -> &'static str {
                match self {
                    $($ty::$variant => $name,)+
                }
            }

            fn keys(self) -> &'static [&'static str] {
                match self {
                    $($ty::$variant => &[$($key),*],)+
                }
            }
        }
    };
}

entry_kinds! {
    /// The kind of a `[[nodes]]` entry (a junction when not given).
    NodeEntry, default Junction;
    Junction = "junction": [
        "id", "kind", "elevation", "demand", "pattern", "demands", "full_pressure",
        "zero_pressure", "exponent", "outlet", "x", "y", "zone", "quality", "quality_pattern",
        "initial_quality", "booster",
    ],
    Reservoir = "reservoir": [
        "id", "kind", "head", "head_pattern", "elevation", "x", "y", "zone", "quality",
        "quality_pattern", "initial_quality", "booster",
    ],
    Tank = "tank": [
        "id", "kind", "elevation", "level", "min_level", "max_level", "diameter", "volume_curve",
        "x", "y", "zone", "initial_quality", "booster", "mixing", "mixing_fraction",
    ],
}

entry_kinds! {
    /// The kind of a `[[links]]` entry (a pipe when not given).
    LinkEntry, default Pipe;
    Pipe = "pipe": [
        "id", "kind", "from", "to", "length", "diameter", "roughness", "minor_loss", "fittings",
        "status", "check_valve", "leakage_rate", "path",
    ],
    Pump = "pump": [
        "id", "kind", "from", "to", "head_curve", "power", "efficiency_curve", "efficiency",
        "speed", "speed_pattern", "elevation", "npsh_required_curve", "status", "path",
    ],
    Valve = "valve": [
        "id", "kind", "valve", "from", "to", "diameter", "setting", "setting_pattern",
        "minor_loss", "fittings", "status", "path",
    ],
}

entry_kinds! {
    /// The kind of a `[[quality]]` entry (a substance when not given).
    QualityEntry, default Substance;
    Age = "age": [
        "id", "kind", "initial",
    ],
    Source = "source": [
        "id", "kind", "source", "initial",
    ],
    Substance = "substance": [
        "id", "kind", "unit", "bulk_rate", "wall_rate", "diffusivity", "initial",
    ],
}

/// The keys of a `[criteria]` table.
pub const CRITERIA_KEYS: &[&str] = &[
    "must_converge",
    "all_demands_supplied",
    "min_pressure",
    "max_pressure",
    "max_velocity",
    "max_headloss",
    "min_supply_margin",
    "source_capacity",
    "min_tank_reserve",
    "min_delivered",
    "fire_residual",
    "fail_on_warnings",
    "groups",
    "max_age",
    "min_residual",
    "after",
];

/// The keys of one `[[criteria.groups]]` entry.
pub const GROUP_KEYS: &[&str] = &["name", "zone", "ids", "min_pressure", "max_pressure", "min_fire_flow"];

pub(crate) const TOP_KEYS: &[&str] = &[
    "title",
    "units",
    "hydraulics",
    "criteria",
    "pressure_demand",
    "background_leakage",
    // The same table under its short name, as the issue that specified it spells it.
    "leakage",
    "simulation",
    "electricity",
    "map",
    "patterns",
    "nodes",
    "links",
    "controls",
    "quality",
];
pub(crate) const SIMULATION_KEYS: &[&str] = &[
    "duration",
    "hydraulic_step",
    "report_interval",
    "start_clock",
    "level_tolerance",
    "transport_step",
    "quality_tolerance",
];
/// Keys of a `[[quality]]` entry by kind.
pub(crate) const ENERGY_KEYS: &[&str] = &["price_per_kwh", "tariff_pattern", "currency"];
pub(crate) const PATTERN_KEYS: &[&str] = &["id", "step", "multipliers"];
pub(crate) const DEMAND_KEYS: &[&str] = &["base", "pattern"];
pub(crate) const CONTROL_KEYS: &[&str] = &["id", "link", "status", "speed", "setting", "when", "priority"];
pub(crate) const CONDITION_KEYS: &[&str] =
    &["tank", "level_above", "level_below", "node", "pressure_above", "pressure_below", "clock", "after", "all", "any"];
pub(crate) const PRESSURE_DEMAND_KEYS: &[&str] = &["full_pressure", "zero_pressure", "exponent"];
pub(crate) const LEAKAGE_KEYS: &[&str] = &["rate", "reference_pressure", "exponent"];
pub(crate) const OUTLET_KEYS: &[&str] = &["coefficient", "exponent"];
pub(crate) const MAP_KEYS: &[&str] = &["coordinates"];
pub(crate) const UNIT_KEYS: &[&str] = &["length", "diameter", "flow", "pressure", "roughness"];
pub(crate) const HYDRAULIC_KEYS: &[&str] = &[
    "headloss",
    "kinematic_viscosity",
    "water_temperature",
    "max_iterations",
    "head_tolerance",
    "flow_tolerance",
    "fittings_method",
    "site_elevation",
];
pub(crate) const FITTING_KEYS: &[&str] = &["kind", "count", "radius", "angle", "opening"];

/// Every key the reader accepts, by where it stands: `(place, kind, keys)`, the place being a
/// path in the file (`""` the top level, `"nodes"`, `"nodes.outlet"`, `"controls.when"`...) and
/// the kind the element's kind where keys depend on it (`""` otherwise). The writer's round-trip
/// test checks each is written back.
#[cfg(test)]
pub(crate) fn accepted_keys() -> Vec<(&'static str, &'static str, &'static [&'static str])> {
    let mut out: Vec<(&'static str, &'static str, &'static [&'static str])> = vec![
        ("", "", TOP_KEYS),
        ("units", "", UNIT_KEYS),
        ("hydraulics", "", HYDRAULIC_KEYS),
        ("pressure_demand", "", PRESSURE_DEMAND_KEYS),
        ("background_leakage", "", LEAKAGE_KEYS),
        ("map", "", MAP_KEYS),
        ("simulation", "", SIMULATION_KEYS),
        ("electricity", "", ENERGY_KEYS),
        ("patterns", "", PATTERN_KEYS),
        ("nodes.demands", "", DEMAND_KEYS),
        ("nodes.outlet", "", OUTLET_KEYS),
        ("links.fittings", "", FITTING_KEYS),
        ("controls", "", CONTROL_KEYS),
        ("controls.when", "", CONDITION_KEYS),
    ];
    out.extend(QualityEntry::ALL.iter().map(|k| ("quality", k.name(), k.keys())));
    out.extend(NodeEntry::ALL.iter().map(|k| ("nodes", k.name(), k.keys())));
    out.extend(LinkEntry::ALL.iter().map(|k| ("links", k.name(), k.keys())));
    out
}

/// Every key of node and link entries, sorted: the keys the syntax tree shares instead of
/// copying them for each of a large model's elements.
pub(crate) fn element_keys() -> &'static [&'static str] {
    static KEYS: OnceLock<Vec<&'static str>> = OnceLock::new();
    KEYS.get_or_init(|| {
        let mut keys = NodeEntry::all_keys();
        keys.extend(LinkEntry::all_keys());
        keys.sort_unstable();
        keys.dedup();
        keys
    })
}
