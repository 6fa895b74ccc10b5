//! Hydrant flow tests: the field sheet (text, as the crew keyed it in), its typed reading, the trade's
//! conversions (pitot flow, flow available at a target residual) and the screening of every test.
//!
//! Library code only: no I/O except [`load_sheet`] and [`save_sheet`] at the edge.
//!
//! Results are an aid to be reviewed by a licensed engineer; local codes and the fire authority govern.

pub mod fireflow;
pub mod model_check;
pub mod pitot;
pub mod reading;
pub mod screening;
pub mod sheet;

pub use fireflow::{AvailableFlow, available_flow, default_target};
pub use model_check::{
    CalibrationInput, ExcludedTest, ModelComparison, StaticHeads, calibration_input,
    calibration_tests, compare_with_model, static_findings, with_static_findings,
};
pub use pitot::{OutletShape, pitot_flow, pitot_flow_gpm, pitot_flow_lps};
pub use reading::{FlowTest, FlowingHydrant, SheetReading, read_tests, screen_sheet};
pub use screening::{Finding, Rule, Severity, check_modelled_static, screen};
pub use sheet::{
    EditError, FieldSheet, SheetColumn, SheetError, SheetErrorKind, load_sheet, save_sheet,
    template_header,
};
