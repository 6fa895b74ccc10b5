//! roughcal: calibrate the Hazen-Williams roughness of a water distribution model from hydrant flow tests.
//!
//! The core (`network` model, `hydraulics`, `fieldtest`, `calibrate`) is pure library code with no I/O;
//! file loading, the CLI and the terminal UI sit at the edges.

pub mod calibrate;
pub mod demo;
pub mod fieldtest;
pub mod hydraulics;
pub mod network;
pub mod storage;
pub mod tui;
