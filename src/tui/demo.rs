//! The bundled demo (the invented Alder Flats district and its test day), embedded so the binary
//! carries it wherever it is copied.

/// The demo network file.
pub const NETWORK: &str = include_str!("../../demo-network/district.toml");
/// File name of the network copy in the scratch folder.
pub const NETWORK_FILE_NAME: &str = "district.toml";
/// The demo field sheet (invented readings).
pub const SHEET: &str = include_str!("../../field-sheets/demo.csv");
/// File name of the sheet copy in the scratch folder.
pub const SHEET_FILE_NAME: &str = "demo.csv";
