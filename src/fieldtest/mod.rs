//! Hydrant flow tests: the field sheet (text, as the crew keyed it in), its typed reading, the trade's
//! conversions (pitot flow, flow available at a target residual) and the screening of every test.
//!
//! Library code only: no I/O except [`load_sheet`] and [`save_sheet`] at the edge.

pub mod sheet;

pub use sheet::{
    EditError, FieldSheet, SheetColumn, SheetError, SheetErrorKind, load_sheet, save_sheet,
    template_header,
};
