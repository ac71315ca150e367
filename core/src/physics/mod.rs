//! Physics of single elements: water properties, friction laws, minor losses, pump curves, the
//! outflow relations of junctions (pressure-dependent demand, outlets, leakage).
//!
//! Entry points: [`water::WaterProperties::at_celsius`], [`friction::Friction`] (the friction part
//! of a pipe's head loss, with coefficients computed once), [`friction::minor_loss_coefficient`].
//! The network solver combines them per link in [`mod@crate::solve`].

pub mod friction;
pub mod outflow;
pub mod pump;
pub mod water;

pub use friction::{friction_factor, minor_loss_coefficient, Friction};
pub use water::WaterProperties;
