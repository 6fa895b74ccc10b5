//! The network model, its units, and (at the edge) its file format.

pub mod model;
pub mod units;

pub use model::*;
pub use units::UnitSystem;
