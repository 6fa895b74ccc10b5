//! The bundled demo, embedded so the binary carries it wherever it is copied.
//!
//! PROVISIONAL: until the demo district (`demo-network/district.toml`, `field-sheets/demo.csv`) lands
//! on main, this is the small demo network with a short invented sheet.

/// The demo network file.
pub const NETWORK: &str = include_str!("../../demo-network/small.toml");
/// File name of the network copy in the scratch folder.
pub const NETWORK_FILE_NAME: &str = "small.toml";
/// The demo field sheet (invented readings).
pub const SHEET: &str = "test,date,time,residual_node,flow_node,static_psi,residual_psi,flow_gpm,pitot_psi,outlet_in,coefficient,condition,note
D1,2024-05-07,09:05,J-102,J-103,56,41,,24,2.5,0.9,,
D2,2024-05-07,09:40,J-104,J-106,62,44,,30,2.5,0.9,,
D3,2024-05-07,10:20,J-105,J-107,71,52,640,,,,,
";
/// File name of the sheet copy in the scratch folder.
pub const SHEET_FILE_NAME: &str = "demo.csv";
