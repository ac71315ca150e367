//! Warnings: what an engineer should look at in a valid model or a solved network.
//!
//! One type for all of them: the model's checks ([`crate::analysis::diagnose_model`],
//! [`crate::analysis::plausibility`], [`crate::analysis::diagnose_solution`]) and the solver's
//! own (a node cut off, a negative pressure, a pump past its curve, in [`Solution::warnings`]).
//! Each has a kind with a short code (the codes a criteria table's `fail_on_warnings` lists), the
//! element concerned, the key when one value is the cause, and a message for people, with values
//! in the model's units. None of them stops a solve.
//!
//! [`Solution::warnings`]: crate::solve::Solution::warnings

use crate::error::Element;
pub use crate::model::criteria::DiagnosticKind;
use std::fmt;

/// Something an engineer should look at, in a model or a solved network.
#[derive(Clone, Debug, PartialEq)]
pub struct Warning {
    /// What kind of warning (for programs; the message is for people).
    pub kind: WarningKind,
    /// The element concerned.
    pub element: Option<Element>,
    /// The key concerned, when one value is the cause.
    pub key: Option<&'static str>,
    /// What to look at, values in the model's units.
    pub message: String,
}

impl Warning {
    /// The kind of the model's checks this is, if it is one.
    pub fn model_kind(&self) -> Option<DiagnosticKind> {
        match self.kind {
            WarningKind::Model(kind) => Some(kind),
            _ => None,
        }
    }
}

/// `element: key 'key': message`, each part only where there is one (as `ringmain solve` prints
/// it after `warning: `).
impl fmt::Display for Warning {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if let Some(e) = &self.element {
            write!(f, "{e}: ")?;
        }
        if let Some(key) = self.key {
            write!(f, "key '{key}': ")?;
        }
        f.write_str(&self.message)
    }
}

/// The kinds of [`Warning`], each with a short code.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum WarningKind {
    /// A node cut off from every reservoir and tank by closed links.
    CutOff,
    /// A junction drawing a fixed demand at a negative pressure.
    NegativePressure,
    /// A pump running past the end of its head curve.
    PumpPastCurve,
    /// A warning of the model's checks (`analysis::diagnostics`), of this kind.
    Model(DiagnosticKind),
}

impl WarningKind {
    /// The short code (a model warning's is its own, as in `fail_on_warnings`).
    pub fn code(self) -> &'static str {
        match self {
            WarningKind::CutOff => "cut-off",
            WarningKind::NegativePressure => "negative-pressure",
            WarningKind::PumpPastCurve => "pump-past-curve",
            WarningKind::Model(kind) => kind.code(),
        }
    }
}
