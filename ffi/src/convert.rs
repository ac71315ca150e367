//! Conversions between the core's SI values and the model's own units, the units every value
//! crossing the boundary is in: the core's one converter ([`ringmain_core::units::Converter`],
//! made by `Model::converter`), which the command-line program's writers and the model reader
//! and writer use too. Lengths, heads, levels and head losses in the length unit; velocities in
//! the length unit per second; diameters in the diameter unit; flows and demands in the flow
//! unit; pressures in the pressure unit (through the density of the model's water); pipe
//! roughness as the Hazen–Williams C, or in the roughness unit under Darcy–Weisbach; pump power
//! in kW, or hp when lengths are in feet; valve settings as a pressure, a flow or a loss
//! coefficient by valve type (`ValveType::setting_quantity`).

pub use ringmain_core::units::{Converter as Units, Quantity};
