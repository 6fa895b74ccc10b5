//! The terminal workbench: key in readings, see findings as you type, fit, look, adjust, export.
//!
//! Layout: [`app`] holds the state, the actions and the router `update`; [`state`] holds each view's
//! state and its own update; [`edit`] the one text input; [`undo`] the one undo history; [`keymap`] turns keys into actions;
//! [`views`] draw the state; [`run`] executes effects and runs the event loop; [`worker`] runs the
//! calibration on its own thread. Results are a model-fitting aid reviewed by a licensed engineer;
//! local codes and the fire authority govern (see [`crate::calibrate::CAUTION`]).

pub mod app;
pub mod demo;
pub mod edit;
pub mod keymap;
pub mod layout;
pub mod map_model;
pub mod merge;
mod queries;
pub mod run;
mod saves;
pub mod session;
pub mod sheet_reading;
pub mod state;
pub mod theme;
pub mod undo;
pub mod views;
pub mod worker;

pub use app::{Action, App, Effect, View, update};
pub use run::{Runner, dispatch, run_terminal};
pub use session::{
    DemoCleanup, OpenError, clean_up_demo, demo_folder, demo_in, new_sheet, open_files,
};
pub use theme::Theme;
