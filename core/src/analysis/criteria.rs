//! The service criteria a model is checked against, read from a `[criteria]` table.
//!
//! The table comes from the model file or from a separate criteria file, each read into a typed
//! [`CriteriaTable`] when its file is read (`format::criteria`: every limit a number in the
//! model's units, `min_pressure = 20`, or a string with its unit, `"20 m"`, `"30 psi"`,
//! `"2.5 m/s"`, `"3 m/km"`, `"120 L/s"`, `"10 %"`, converted into SI there and nowhere else).
//! [`Criteria::apply`] lays one table over what is already set, so that a repository-wide file
//! can override a model's own table key by key.
//!
//! ```toml
//! [criteria]
//! must_converge = true            # a scenario the solver cannot finish fails (default true)
//! all_demands_supplied = true     # a junction with a demand cut off from every source fails (default)
//! min_pressure = "20 m"           # junctions
//! max_pressure = "80 m"
//! max_velocity = "2.5 m/s"        # pipes and valves carrying flow
//! max_headloss = "3 m/km"         # head loss per length of pipe, friction and minor losses
//! min_supply_margin = "10 %"      # headroom below each source's capacity (or a flow, "5 L/s")
//! min_tank_reserve = "0.5 m"      # each tank's level above its min_level
//! min_delivered = "95 %"          # share of its demand each junction receives, and of the
//!                                 # total (meaningful with [pressure_demand])
//! fire_residual = "20 psi"        # residual pressure of min_fire_flow (default 20 psi, common
//!                                 # practice in North America)
//! fail_on_warnings = ["parallel-pipes"]   # model warnings that count as failures (or true: all)
//!
//! [criteria.source_capacity]      # what each source can deliver; supply = net outflow
//! "Works" = "120 L/s"
//!
//! # Water quality over a simulation (`ringmain simulate --criteria`, and `check` when the model
//! # has [simulation]): junctions over the reported times after a spin-up
//! max_age = "72 h"                # every age constituent
//! min_residual = { chlorine = "0.2 mg/L" }   # per substance, in its unit
//! after = "48h"                   # spin-up not checked
//!
//! [[criteria.groups]]             # limits for some nodes, replacing the global ones there
//! name = "high zone"
//! zone = "high"                   # nodes with this zone tag (a string or a list)
//! ids = "HZ-*"                    # and/or ids matching a pattern (* any text, ? one character)
//! min_pressure = "15 m"
//! min_fire_flow = "25 L/s"        # each junction of the group gives at least this fire flow
//!                                 # at the residual pressure (see `ringmain fire-flow`)
//! ```

use super::glob_match;
use crate::error::ModelError;
use crate::model::criteria::{
    source_node, substance, table_error, CriteriaEntry, CriteriaTable, GroupEntry, GroupTable, Limit,
};
pub use crate::model::criteria::{DiagnosticKind, SupplyMargin};
use crate::model::Model;
use crate::units::{Converter, PressureUnit, UnitSystem};

/// The residual pressure of `min_fire_flow` when the criteria do not give one: 20 psi, common
/// practice in North America (as pressure head of water at 1000 kg/m³ this is 14.06 m; here it is
/// converted with the model's water like every pressure).
pub const FIRE_RESIDUAL_PSI: f64 = 20.0;

/// Pressure limits for a group of nodes.
#[derive(Clone, Debug, PartialEq)]
pub struct Group {
    /// The group's name, for reports (its 1-based position when not given).
    pub name: String,
    /// Zone tags; a node must carry one of them (when any are given).
    pub zones: Vec<String>,
    /// Id patterns; a node's id must match one of them (when any are given).
    pub ids: Vec<String>,
    /// Lowest pressure head allowed, m.
    pub min_pressure: Option<f64>,
    /// Highest pressure head allowed, m.
    pub max_pressure: Option<f64>,
    /// Smallest available fire flow at each of its junctions, m³/s.
    pub min_fire_flow: Option<f64>,
}

impl Group {
    /// The `i`-th group of a table (0-based; named by its 1-based position when it has no name).
    fn from_table((i, table): (usize, &GroupTable)) -> Group {
        let mut g = Group {
            name: format!("{}", i + 1),
            zones: Vec::new(),
            ids: Vec::new(),
            min_pressure: None,
            max_pressure: None,
            min_fire_flow: None,
        };
        for entry in &table.entries {
            match entry {
                GroupEntry::Name(name) => g.name = name.clone(),
                GroupEntry::Zone(zones, _) => g.zones = zones.clone(),
                GroupEntry::Ids(ids, _) => g.ids = ids.clone(),
                GroupEntry::MinPressure(l) => g.min_pressure = Some(l.si),
                GroupEntry::MaxPressure(l) => g.max_pressure = Some(l.si),
                GroupEntry::MinFireFlow(l) => g.min_fire_flow = Some(l.si),
            }
        }
        g
    }

    /// Whether the group selects this node: both conditions that are given must hold.
    pub fn selects(&self, id: &str, zone: Option<&str>) -> bool {
        let zone_ok = self.zones.is_empty() || zone.is_some_and(|z| self.zones.iter().any(|g| g == z));
        let id_ok = self.ids.is_empty() || self.ids.iter().any(|p| glob_match(p, id));
        zone_ok && id_ok
    }
}

/// Service criteria, SI inside (pressures as pressure head in m of the model's water).
#[derive(Clone, Debug, PartialEq)]
pub struct Criteria {
    /// A scenario the solver cannot finish is a failure (otherwise it is only reported).
    pub must_converge: bool,
    /// A junction with a positive demand that no source reaches is a failure.
    pub all_demands_supplied: bool,
    /// Lowest pressure head at junctions, m.
    pub min_pressure: Option<f64>,
    /// Highest pressure head at junctions, m.
    pub max_pressure: Option<f64>,
    /// Highest mean velocity in pipes and valves, m/s.
    pub max_velocity: Option<f64>,
    /// Highest head loss per length of pipe, m/m.
    pub max_headloss: Option<f64>,
    /// Headroom every source with a capacity keeps.
    pub min_supply_margin: Option<SupplyMargin>,
    /// Capacity of sources, by node index, m³/s.
    pub source_capacity: Vec<(usize, f64)>,
    /// Lowest tank level above its `min_level`, m.
    pub min_tank_reserve: Option<f64>,
    /// Smallest share of its demand every junction receives, and of the total, as a fraction.
    pub min_delivered: Option<f64>,
    /// Residual pressure head of `min_fire_flow`, m (`None`: 20 psi).
    pub fire_residual: Option<f64>,
    /// Model warnings that count as failures.
    pub fail_on_warnings: Vec<DiagnosticKind>,
    /// Limits for groups of nodes.
    pub groups: Vec<Group>,
    /// Highest water age at junctions over a simulation, s.
    pub max_age: Option<f64>,
    /// Lowest value of a constituent at junctions over a simulation: constituent index, value.
    pub min_residual: Vec<(usize, f64)>,
    /// Quality criteria skip the reported times before this elapsed time, s (spin-up).
    pub after: f64,
}

impl Default for Criteria {
    /// Must converge and supply every demand; no limits.
    fn default() -> Self {
        Criteria {
            must_converge: true,
            all_demands_supplied: true,
            min_pressure: None,
            max_pressure: None,
            max_velocity: None,
            max_headloss: None,
            min_supply_margin: None,
            source_capacity: Vec::new(),
            min_tank_reserve: None,
            min_delivered: None,
            fire_residual: None,
            fail_on_warnings: Vec::new(),
            groups: Vec::new(),
            max_age: None,
            min_residual: Vec::new(),
            after: 0.0,
        }
    }
}

/// What a limit measures, for parsing its unit and for writing it back: the quantities of
/// [`crate::units`], converted by its [`Converter`].
pub use crate::units::Quantity;

impl Criteria {
    /// Lays `table` over `self`: each key given replaces the same key already set (whole tables
    /// and lists included), so that a criteria file overrides a model's own table key by key.
    /// Errors name the table and the key (a node or constituent `table` names that `model` does
    /// not have; a lowest pressure left above the highest); the caller adds the file.
    pub fn apply(&mut self, table: &CriteriaTable, model: &Model) -> Result<(), ModelError> {
        let mut next = self.clone();
        for entry in &table.entries {
            match entry {
                CriteriaEntry::MustConverge(b) => next.must_converge = *b,
                CriteriaEntry::AllDemandsSupplied(b) => next.all_demands_supplied = *b,
                CriteriaEntry::MinPressure(l) => next.min_pressure = Some(l.si),
                CriteriaEntry::MaxPressure(l) => next.max_pressure = Some(l.si),
                CriteriaEntry::MaxVelocity(l) => next.max_velocity = Some(l.si),
                CriteriaEntry::MaxHeadloss(l) => next.max_headloss = Some(l.si),
                CriteriaEntry::MinTankReserve(l) => next.min_tank_reserve = Some(l.si),
                CriteriaEntry::MinSupplyMargin(m, _) => next.min_supply_margin = Some(*m),
                CriteriaEntry::MinDelivered(l) => next.min_delivered = Some(l.si),
                CriteriaEntry::FireResidual(l) => next.fire_residual = Some(l.si),
                CriteriaEntry::SourceCapacity(list) => {
                    next.source_capacity = resolve(list, "source_capacity", |id| source_node(model, id))?
                }
                CriteriaEntry::FailOnWarnings(kinds, _) => next.fail_on_warnings = kinds.clone(),
                CriteriaEntry::Groups(groups) => {
                    next.groups = groups.iter().enumerate().map(Group::from_table).collect()
                }
                CriteriaEntry::MaxAge(l) => next.max_age = Some(l.si),
                CriteriaEntry::MinResidual(list) => {
                    next.min_residual = resolve(list, "min_residual", |id| substance(model, id))?
                }
                CriteriaEntry::After(l) => next.after = l.si,
            }
        }
        if let (Some(lo), Some(hi)) = (next.min_pressure, next.max_pressure) {
            if lo > hi {
                let given = table.entries.iter().any(|e| matches!(e, CriteriaEntry::MaxPressure(_)));
                let key = if given { "max_pressure" } else { "min_pressure" };
                return Err(table_error(key, "min_pressure is above max_pressure"));
            }
        }
        *self = next;
        Ok(())
    }

    /// The criteria of one table over the defaults.
    pub fn from_table(table: &CriteriaTable, model: &Model) -> Result<Criteria, ModelError> {
        let mut c = Criteria::default();
        c.apply(table, model)?;
        Ok(c)
    }

    /// The criteria of the model's own `[criteria]` table (the defaults when it has none).
    pub fn of_model(model: &Model) -> Result<Criteria, ModelError> {
        match &model.criteria {
            Some(table) => Criteria::from_table(table, model),
            None => Ok(Criteria::default()),
        }
    }

    /// Whether any limit on results is set (beyond converging and supplying every demand).
    pub fn has_limits(&self) -> bool {
        self.min_pressure.is_some()
            || self.max_pressure.is_some()
            || self.max_velocity.is_some()
            || self.max_headloss.is_some()
            || self.min_supply_margin.is_some()
            || !self.source_capacity.is_empty()
            || self.min_tank_reserve.is_some()
            || self.min_delivered.is_some()
            || !self.groups.is_empty()
            || self.has_quality_limits()
    }

    /// Whether a water-quality limit is set (these need a simulation).
    pub fn has_quality_limits(&self) -> bool {
        self.max_age.is_some() || !self.min_residual.is_empty()
    }
}

/// The residual pressure head of `min_fire_flow`, m: the criteria's, else 20 psi converted with
/// the model's water.
pub fn fire_residual(criteria: &Criteria, model: &Model) -> f64 {
    criteria.fire_residual.unwrap_or_else(|| {
        let density = model.options.water_properties().density;
        PressureUnit::Psi.to_head(FIRE_RESIDUAL_PSI, density)
    })
}

/// A limit in SI written in the model's units, e.g. `"20.00 m"`.
pub fn format_in_units(q: Quantity, si: f64, units: &UnitSystem, density: f64) -> String {
    let (v, unit) = to_units(q, si, units, density);
    if unit.is_empty() {
        format!("{v:.3}")
    } else if q == Quantity::Flow {
        format!("{v:.3} {unit}")
    } else {
        format!("{v:.2} {unit}")
    }
}

/// An SI value of a quantity in the model's units, with the unit's label.
pub fn to_units(q: Quantity, si: f64, units: &UnitSystem, density: f64) -> (f64, &'static str) {
    let c = Converter::new(*units, density, false);
    (c.from_si(q, si), c.label(q))
}

/// A list of a criteria table keyed by id (`key.id = limit`), each id resolved by `lookup` to a
/// position in the model; an id it refuses is an error naming `key.id`.
fn resolve(
    list: &[(String, Limit)],
    key: &str,
    lookup: impl Fn(&str) -> Result<usize, String>,
) -> Result<Vec<(usize, f64)>, ModelError> {
    list.iter()
        .map(|(id, l)| lookup(id).map(|i| (i, l.si)).map_err(|m| table_error(&format!("{key}.{id}"), m)))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::format::tree::{parse_toml, Value};
    use crate::model::Node;
    use crate::units::PSI;

    fn model() -> Model {
        let mut m = Model::default();
        m.add_node(Node::reservoir("Works", 60.0)).unwrap();
        m.add_node(Node::junction("J-1", 10.0, 0.005)).unwrap();
        m
    }

    fn read(text: &str) -> Result<Criteria, ModelError> {
        let v = parse_toml(text).unwrap();
        let Value::Table(t) = v else { unreachable!() };
        let m = model();
        let table = crate::format::criteria::read_table(&t[0].1, &m)?;
        table.check(&m)?;
        Criteria::from_table(&table, &m)
    }

    #[test]
    fn limits_with_units() {
        let c = read(
            "[criteria]\nmin_pressure = \"30 psi\"\nmax_pressure = 80\nmax_velocity = \"2.5 m/s\"\n\
             max_headloss = \"3 m/km\"\nmin_supply_margin = \"10 %\"\n[criteria.source_capacity]\nWorks = \"120 L/s\"\n",
        )
        .unwrap();
        let rho = model().options.water_properties().density;
        // 30 psi = 30 × 6894.757293168 Pa (exact definition), as head of water at 20 °C.
        let expected = 30.0 * PSI / (rho * crate::units::GRAVITY);
        assert!((c.min_pressure.unwrap() - expected).abs() < 1e-12);
        assert_eq!(c.max_pressure, Some(80.0));
        assert_eq!(c.max_velocity, Some(2.5));
        assert!((c.max_headloss.unwrap() - 0.003).abs() < 1e-15);
        assert_eq!(c.min_supply_margin, Some(SupplyMargin::Fraction(0.1)));
        assert_eq!(c.source_capacity.len(), 1);
        assert!((c.source_capacity[0].1 - 0.12).abs() < 1e-15);
        assert!(c.must_converge && c.all_demands_supplied);
    }

    #[test]
    fn errors_name_the_key_and_suggest() {
        let e = read("[criteria]\nmin_pressure = \"20 M\"\n").unwrap_err();
        assert_eq!(e.key.as_deref(), Some("min_pressure"));
        assert!(e.message.contains("unknown unit \"M\"") && e.message.contains("did you mean \"m\""), "{e}");
        let e = read("[criteria]\nmax_velocity = \"2.5 m/S\"\n").unwrap_err();
        assert!(e.message.contains("did you mean \"m/s\""), "{e}");
        let e = read("[criteria]\nmin_presure = 20\n").unwrap_err();
        assert!(e.message.contains("did you mean 'min_pressure'"), "{e}");
        let e = read("[criteria]\nmin_pressure = \"1e400 m\"\n").unwrap_err();
        assert!(e.message.contains("finite"), "{e}");
        let e = read("[[criteria.groups]]\nzone = \"high\"\nmin_pressure = \"x m\"\n").unwrap_err();
        assert_eq!(e.key.as_deref(), Some("groups[1].min_pressure"));
        let e = read("[criteria.source_capacity]\nWorkz = 5\n").unwrap_err();
        assert!(e.message.contains("did you mean 'Works'"), "{e}");
        let e = read("[criteria]\nmin_pressure = 50\nmax_pressure = 40\n").unwrap_err();
        assert_eq!(e.key.as_deref(), Some("max_pressure"));
    }

    #[test]
    fn groups_select_by_zone_and_pattern() {
        let c =
            read("[[criteria.groups]]\nname = \"hz\"\nzone = [\"high\", \"top\"]\nids = \"HZ-*\"\nmin_pressure = 15\n")
                .unwrap();
        let g = &c.groups[0];
        assert!(g.selects("HZ-12", Some("top")));
        assert!(!g.selects("HZ-12", None));
        assert!(!g.selects("LZ-1", Some("high")));
    }
}
