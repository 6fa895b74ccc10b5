//! roughcal: calibrate the Hazen-Williams roughness of a water distribution model from hydrant flow tests.
//!
//! The core (`network` model, `hydraulics`, `fieldtest`, `calibrate`) is pure library code with no I/O;
//! file loading, the CLI and the terminal UI sit at the edges.

// Nothing read from a file or the keyboard may panic: no unwrap/expect/panic outside tests (see
// DEVELOPERS.md, "No panic paths"). Indexing is left to review: the solver indexes by ids it built.
#![cfg_attr(
    not(test),
    deny(clippy::unwrap_used, clippy::expect_used, clippy::panic)
)]

pub mod calibrate;
pub mod city;
pub mod demo;
pub mod fieldtest;
pub mod hydraulics;
pub mod network;
pub mod report;
pub mod storage;
pub mod tui;
