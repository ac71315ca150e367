//! The `[criteria]` table of a model (or of a criteria file), typed as read: every key given, in
//! the order written, its value checked and converted into SI when the file was read
//! (`format::criteria` reads it; `analysis::Criteria::apply` lays one table over another, so a
//! criteria file overrides a model's own table key by key).
//!
//! Each value also keeps the form it was written in ([`Written`]), so that writing a model gives
//! back its table as the user wrote it (`"20 psi"` stays `"20 psi"`, not a head in metres).

use super::Model;
use crate::error::{printable, Element, ModelError};
use crate::units::did_you_mean;

/// A value of the table as the file gave it.
#[derive(Clone, Debug, PartialEq)]
pub enum Written {
    /// `true` or `false`.
    Bool(bool),
    /// A bare number (in the model's units).
    Number(f64),
    /// A string, such as `"20 psi"` or `"95 %"`.
    Text(String),
    /// A list of strings.
    List(Vec<String>),
}

/// A limit: its value in SI and as written.
#[derive(Clone, Debug, PartialEq)]
pub struct Limit {
    /// In SI (pressures as pressure head in m of the model's water, shares as fractions,
    /// quality values in their constituent's unit, durations in s).
    pub si: f64,
    /// As written.
    pub written: Written,
}

/// How much headroom a source must keep below its capacity.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum SupplyMargin {
    /// A flow, m³/s: supply ≤ capacity − margin.
    Flow(f64),
    /// A fraction of the capacity: supply ≤ (1 − fraction) × capacity.
    Fraction(f64),
}

impl SupplyMargin {
    /// The largest supply allowed at a source of `capacity` (m³/s).
    pub fn allowed_supply(self, capacity: f64) -> f64 {
        match self {
            SupplyMargin::Flow(q) => capacity - q,
            SupplyMargin::Fraction(f) => capacity * (1.0 - f),
        }
    }
}

/// The kinds of model warning, each with a short code used in reports and in
/// `fail_on_warnings` (the warnings themselves are found by `analysis::diagnostics`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum DiagnosticKind {
    /// A junction that no reservoir or tank reaches through any link, open or closed.
    IsolatedJunction,
    /// A junction with a demand that only closed links join to a source.
    ClosedOffDemand,
    /// Two pipes joining the same two nodes.
    ParallelPipes,
    /// Hazen–Williams C outside the plausible range.
    RoughnessRange,
    /// A diameter outside the plausible range.
    DiameterRange,
    /// An elevation far from its neighbours'.
    ElevationOutlier,
    /// A velocity above the plausible maximum in the solved base scenario.
    HighVelocity,
    /// A relative pump speed above the plausible maximum (an rpm typed as a relative speed?).
    PumpSpeed,
    /// A head tolerance above the plausible maximum.
    HeadTolerance,
}

impl DiagnosticKind {
    /// Every kind.
    pub const ALL: &'static [DiagnosticKind] = &[
        DiagnosticKind::IsolatedJunction,
        DiagnosticKind::ClosedOffDemand,
        DiagnosticKind::ParallelPipes,
        DiagnosticKind::RoughnessRange,
        DiagnosticKind::DiameterRange,
        DiagnosticKind::ElevationOutlier,
        DiagnosticKind::HighVelocity,
        DiagnosticKind::PumpSpeed,
        DiagnosticKind::HeadTolerance,
    ];

    /// The short code.
    pub fn code(self) -> &'static str {
        match self {
            DiagnosticKind::IsolatedJunction => "isolated-junction",
            DiagnosticKind::ClosedOffDemand => "closed-off-demand",
            DiagnosticKind::ParallelPipes => "parallel-pipes",
            DiagnosticKind::RoughnessRange => "roughness-range",
            DiagnosticKind::DiameterRange => "diameter-range",
            DiagnosticKind::ElevationOutlier => "elevation-outlier",
            DiagnosticKind::HighVelocity => "high-velocity",
            DiagnosticKind::PumpSpeed => "pump-speed",
            DiagnosticKind::HeadTolerance => "head-tolerance",
        }
    }

    /// Parses a code.
    pub fn parse(code: &str) -> Option<Self> {
        Self::ALL.iter().copied().find(|d| d.code() == code)
    }
}

/// One key of a `[criteria]` table with its value (see `analysis::criteria` for what each means).
#[derive(Clone, Debug, PartialEq)]
pub enum CriteriaEntry {
    /// `must_converge`.
    MustConverge(bool),
    /// `all_demands_supplied`.
    AllDemandsSupplied(bool),
    /// `min_pressure`, m.
    MinPressure(Limit),
    /// `max_pressure`, m.
    MaxPressure(Limit),
    /// `max_velocity`, m/s.
    MaxVelocity(Limit),
    /// `max_headloss`, m/m.
    MaxHeadloss(Limit),
    /// `min_supply_margin`, and as written.
    MinSupplyMargin(SupplyMargin, Written),
    /// `source_capacity`: source node id → capacity, m³/s.
    SourceCapacity(Vec<(String, Limit)>),
    /// `min_tank_reserve`, m.
    MinTankReserve(Limit),
    /// `min_delivered`, a fraction.
    MinDelivered(Limit),
    /// `fire_residual`, m.
    FireResidual(Limit),
    /// `fail_on_warnings`, and as written.
    FailOnWarnings(Vec<DiagnosticKind>, Written),
    /// `[[criteria.groups]]`.
    Groups(Vec<GroupTable>),
    /// `max_age`, s.
    MaxAge(Limit),
    /// `min_residual`: constituent id → lowest value, in its unit.
    MinResidual(Vec<(String, Limit)>),
    /// `after`, s.
    After(Limit),
}

impl CriteriaEntry {
    /// The key in the file.
    pub fn key(&self) -> &'static str {
        match self {
            CriteriaEntry::MustConverge(_) => "must_converge",
            CriteriaEntry::AllDemandsSupplied(_) => "all_demands_supplied",
            CriteriaEntry::MinPressure(_) => "min_pressure",
            CriteriaEntry::MaxPressure(_) => "max_pressure",
            CriteriaEntry::MaxVelocity(_) => "max_velocity",
            CriteriaEntry::MaxHeadloss(_) => "max_headloss",
            CriteriaEntry::MinSupplyMargin(..) => "min_supply_margin",
            CriteriaEntry::SourceCapacity(_) => "source_capacity",
            CriteriaEntry::MinTankReserve(_) => "min_tank_reserve",
            CriteriaEntry::MinDelivered(_) => "min_delivered",
            CriteriaEntry::FireResidual(_) => "fire_residual",
            CriteriaEntry::FailOnWarnings(..) => "fail_on_warnings",
            CriteriaEntry::Groups(_) => "groups",
            CriteriaEntry::MaxAge(_) => "max_age",
            CriteriaEntry::MinResidual(_) => "min_residual",
            CriteriaEntry::After(_) => "after",
        }
    }
}

/// One `[[criteria.groups]]` entry: its keys in the order written.
#[derive(Clone, Debug, PartialEq)]
pub struct GroupTable {
    /// The group's keys.
    pub entries: Vec<GroupEntry>,
}

/// One key of a group.
#[derive(Clone, Debug, PartialEq)]
pub enum GroupEntry {
    /// `name`.
    Name(String),
    /// `zone`: zone tags, and whether they were written as a list.
    Zone(Vec<String>, bool),
    /// `ids`: id patterns, and whether they were written as a list.
    Ids(Vec<String>, bool),
    /// `min_pressure`, m.
    MinPressure(Limit),
    /// `max_pressure`, m.
    MaxPressure(Limit),
    /// `min_fire_flow`, m³/s.
    MinFireFlow(Limit),
}

impl GroupEntry {
    /// The key in the file.
    pub fn key(&self) -> &'static str {
        match self {
            GroupEntry::Name(_) => "name",
            GroupEntry::Zone(..) => "zone",
            GroupEntry::Ids(..) => "ids",
            GroupEntry::MinPressure(_) => "min_pressure",
            GroupEntry::MaxPressure(_) => "max_pressure",
            GroupEntry::MinFireFlow(_) => "min_fire_flow",
        }
    }
}

/// A `[criteria]` table: the keys given, in the order written.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct CriteriaTable {
    /// The keys given.
    pub entries: Vec<CriteriaEntry>,
}

impl CriteriaTable {
    /// Checks the sources the table names against `model`: every `source_capacity` node is a
    /// reservoir or a tank of it (the reader cannot check them before the nodes are read; the
    /// `min_residual` constituents it checks as it reads them). Errors name the table and the key
    /// (`source_capacity.J1`); the caller adds the file.
    pub fn check(&self, model: &Model) -> Result<(), ModelError> {
        for entry in &self.entries {
            if let CriteriaEntry::SourceCapacity(list) = entry {
                for (id, _) in list {
                    source_node(model, id).map_err(|m| table_error(&format!("source_capacity.{id}"), m))?;
                }
            }
        }
        Ok(())
    }
}

/// An error of the `[criteria]` table at `key`.
pub fn table_error(key: &str, message: impl Into<String>) -> ModelError {
    ModelError::at(Some(Element::Table("criteria".into())), Some(key), message)
}

/// The index of source node `id` of `model`, or why it cannot supply.
pub fn source_node(model: &Model, id: &str) -> Result<usize, String> {
    let Some(i) = model.node_index(id) else {
        let hint = did_you_mean(id, model.nodes().iter().map(|n| n.id.as_str()), '\'');
        return Err(format!("refers to node '{}', which is not defined{hint}", printable(id)));
    };
    if matches!(model.nodes()[i].kind, super::NodeKind::Junction { .. }) {
        return Err(format!("node '{}' is a junction; only reservoirs and tanks supply", printable(id)));
    }
    Ok(i)
}

/// The index of the constituent `id` of `model` that a lowest value may limit, or why not.
pub fn substance(model: &Model, id: &str) -> Result<usize, String> {
    let q = &model.time.quality;
    let Some(c) = q.index(id) else {
        let hint = did_you_mean(id, q.constituents.iter().map(|c| c.id.as_str()), '\'');
        return Err(format!(
            "names constituent '{}', which the model's [[quality]] does not define{hint}",
            printable(id)
        ));
    };
    if matches!(q.constituents[c].kind, crate::quality::ConstituentKind::Age) {
        return Err(format!("'{}' is a water age; limit it with max_age", q.constituents[c].id));
    }
    Ok(c)
}
