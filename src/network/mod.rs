//! The network model, its units, and (at the edge) its file format.

pub mod edit;
pub mod file;
pub mod gis;
pub mod graph;
pub mod import;
pub mod lonlat;
pub mod model;
mod pump_curve;
mod read;
pub mod suggest;
pub mod summary;
pub mod synthetic;
pub mod units;
pub mod write;

pub use model::*;
pub use read::{NetworkText, read_network};
pub use units::{FlowUnit, UnitLabels, UnitSystem};
