//! What a model says about water quality: the constituents of `[[quality]]`, the values nodes
//! give them (sources, starting values, boosters) and how each tank mixes. SI inside: rates per
//! second, wall rates in m/s, diffusivities in m²/s, ages in seconds; source traces in percent
//! and substances in the unit the model names (the unit is only a label).

use std::collections::BTreeMap;

/// What a constituent measures.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum ConstituentKind {
    /// The water's age: time since it left a reservoir (or since the start, for water already
    /// in the network), s inside, hours in files and reports.
    Age,
    /// The percentage of the water that came from one node (a reservoir or tank).
    Source {
        /// The traced node's index.
        node: usize,
    },
    /// A dissolved substance reacting at first order in the water and at the pipe wall.
    Substance(Reaction),
}

/// First-order reaction coefficients of a substance (negative: decay).
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct Reaction {
    /// Rate in the water, 1/s.
    pub bulk_rate: f64,
    /// Rate at the pipe wall, m/s.
    pub wall_rate: f64,
    /// Molecular diffusivity in water, m²/s (the wall's mass-transfer limit).
    pub diffusivity: f64,
}

impl ConstituentKind {
    /// The name used in model files.
    pub fn label(&self) -> &'static str {
        match self {
            ConstituentKind::Age => "age",
            ConstituentKind::Source { .. } => "source",
            ConstituentKind::Substance(_) => "substance",
        }
    }
}

/// One `[[quality]]` entry.
#[derive(Clone, Debug, PartialEq)]
pub struct Constituent {
    /// Unique id among constituents (the key of results).
    pub id: String,
    /// What it measures.
    pub kind: ConstituentKind,
    /// Unit label of a substance's concentration ("mg/L" when not given).
    pub unit: String,
    /// Value everywhere at the start unless a node says otherwise (internal units).
    pub initial: f64,
}

impl Constituent {
    /// Multiplies an internal value into report units (age: seconds to hours).
    pub fn report_scale(&self) -> f64 {
        match self.kind {
            ConstituentKind::Age => 1.0 / 3600.0,
            _ => 1.0,
        }
    }

    /// The unit of reported values.
    pub fn report_unit(&self) -> &str {
        match self.kind {
            ConstituentKind::Age => "h",
            ConstituentKind::Source { .. } => "%",
            ConstituentKind::Substance(_) => &self.unit,
        }
    }
}

/// How the water in a tank mixes.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub enum Mixing {
    /// One completely mixed volume.
    #[default]
    Complete,
    /// Two completely mixed zones: water enters and leaves through the inlet zone, which holds
    /// this share (0 < f < 1) of the stored volume; the other zone exchanges water with it as
    /// the volume changes.
    TwoZone(f64),
    /// First in, first out: the water leaves in the order it came.
    PlugFlow,
    /// Last in, first out: the water that came last leaves first.
    Stacked,
}

impl Mixing {
    /// The name used in model files.
    pub fn label(&self) -> &'static str {
        match self {
            Mixing::Complete => "complete",
            Mixing::TwoZone(_) => "two-zone",
            Mixing::PlugFlow => "plug-flow",
            Mixing::Stacked => "stacked",
        }
    }

    /// Every name, for messages.
    pub const LABELS: &'static [&'static str] = &["complete", "two-zone", "plug-flow", "stacked"];
}

/// A value a node gives a constituent, optionally times a pattern.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SourceValue {
    /// Constituent index.
    pub constituent: usize,
    /// Value (internal units).
    pub value: f64,
    /// Pattern index multiplying it (clock time, like demand patterns).
    pub pattern: Option<usize>,
}

/// Everything the model says about water quality.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct QualityData {
    /// The constituents, in file order.
    pub constituents: Vec<Constituent>,
    /// Node index → values of the water leaving it (`quality`, `quality_pattern`): a reservoir's
    /// water, a tank's when traced, and the water a junction puts in (negative demand).
    pub sources: BTreeMap<usize, Vec<SourceValue>>,
    /// Node index → starting values (`initial_quality`), constituent index and value.
    pub initial: BTreeMap<usize, Vec<(usize, f64)>>,
    /// Node index → lowest values of the water leaving it (`booster`).
    pub boosters: BTreeMap<usize, Vec<(usize, f64)>>,
    /// Tank node index → mixing model (complete when absent).
    pub mixing: BTreeMap<usize, Mixing>,
}

impl QualityData {
    /// Index of a constituent by id.
    pub fn index(&self, id: &str) -> Option<usize> {
        self.constituents.iter().position(|c| c.id == id)
    }

    /// The starting value of constituent `c` at `node`.
    pub fn initial_at(&self, node: usize, c: usize) -> f64 {
        self.initial
            .get(&node)
            .and_then(|v| v.iter().find(|(k, _)| *k == c).map(|(_, x)| *x))
            .unwrap_or(self.constituents[c].initial)
    }

    /// The mixing model of a tank.
    pub fn mixing_of(&self, node: usize) -> Mixing {
        self.mixing.get(&node).copied().unwrap_or_default()
    }
}

/// Molecular diffusivity used when a substance gives none, m²/s: free chlorine in water at
/// 20 °C, the value commonly used for it (from memory of Rossman, Clark & Grayman 1994).
pub const DIFFUSIVITY: f64 = 1.21e-9;
