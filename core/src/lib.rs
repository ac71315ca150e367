//! ringmain-core: flows and pressures in looped water-distribution networks.
//!
//! Data flows one way: a model file is read into a [`Model`] ([`mod@format`]), the gradient
//! method of Todini & Pilati solves it ([`mod@solve`]), and the [`Solution`] goes to writers (in the
//! command-line program and the C library). SI units inside; [`units`] converts at the edges.
//!
//! ```
//! let text = r#"
//! [[nodes]]
//! id = "Source"
//! kind = "reservoir"
//! head = 50.0
//! [[nodes]]
//! id = "J-1"
//! elevation = 10.0
//! demand = 5.0
//! [[links]]
//! id = "P-1"
//! from = "Source"
//! to = "J-1"
//! length = 400.0
//! diameter = 150
//! roughness = 120
//! "#;
//! let model = ringmain_core::read_str(text, ringmain_core::Format::Toml, "example.toml").unwrap();
//! let solution = ringmain_core::solve(&model).unwrap();
//! let j = model.node_index("J-1").unwrap();
//! assert!(solution.pressure[j] > 30.0 && solution.pressure[j] < 40.0);
//! ```
//!
//! Error policy: anything a user or a file can cause is a [`ModelError`] or [`SolveError`]
//! naming the element and key; a panic is a bug.

#![warn(missing_docs)]

pub mod analysis;
pub mod duty;
pub mod error;
pub mod format;
pub mod generate;
pub mod import;
pub mod json_text;
pub mod model;
pub mod output;
pub mod physics;
pub mod quality;
pub mod simulate;
pub mod solve;
pub mod units;
pub mod warning;

pub use error::{Element, ModelError, SolveError};
pub use format::{read_bytes, read_str, Format};
pub use model::{HeadLossLaw, Link, LinkKind, LinkStatus, Model, Node, NodeKind, Pipe, Tank};
pub use simulate::{simulate, Run, SimulateError, SimulateOptions};
pub use solve::{solve, LinkState, Solution, SolveOptions, Solver};
pub use units::UnitSystem;
