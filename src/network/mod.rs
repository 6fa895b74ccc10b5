//! The network model, its units, and (at the edge) its file format.

pub mod graph;
pub mod model;
pub mod synthetic;
pub mod units;

pub use model::*;
pub use units::UnitSystem;
