//! Physics of single elements: water properties, friction laws, minor losses and named
//! fittings, pump curves, the standard atmosphere, the outflow relations of junctions
//! (pressure-dependent demand, outlets, leakage).
//!
//! Entry points: [`water::WaterProperties::at_celsius`], [`friction::Friction`] (the friction part
//! of a pipe's head loss, with coefficients computed once), [`friction::minor_loss_coefficient`],
//! [`fittings::Fitting::k_parts`] (the K of a named fitting), [`atmosphere::pressure_at_elevation`].
//! The network solver combines them per link in [`mod@crate::solve`].

pub mod atmosphere;
pub mod fittings;
pub mod flow_power;
pub mod friction;
pub mod outflow;
pub mod pump;
pub mod water;

pub use friction::{friction_factor, minor_loss_coefficient, Friction};
pub use water::WaterProperties;
