//! One calibration run as both edges (the `calibrate` command and the workbench) build it: the network
//! and its file text, the field sheet screened against the model, and the settings. The outputs a run
//! writes are built from the job and its result ([`crate::report::CalibrationOutputs::of_job`]), so the
//! command and the workbench describe a run the same way.

use std::sync::atomic::AtomicBool;

use crate::fieldtest::{
    ExcludedTest, FieldSheet, Finding, StaticHeads, calibration_input, screen_sheet,
    with_static_findings,
};
use crate::network::Network;

use super::{
    CalibrationError, CalibrationOptions, CalibrationResult, CalibrationTest, IterationReport,
    calibrate,
};

/// A calibration to run, with everything its outputs later describe.
#[derive(Debug, Clone)]
pub struct Job {
    pub network: Network,
    /// The network file's text the run started from (the calibrated network is written into it).
    pub network_text: String,
    /// The sheet's usable tests, in sheet order.
    pub tests: Vec<CalibrationTest>,
    /// The screening warnings of each test (parallel to `tests`): a warning keeps a test in the fit.
    pub warnings: Vec<Vec<Finding>>,
    /// The sheet's tests left out of the fit, and why.
    pub excluded: Vec<ExcludedTest>,
    pub options: CalibrationOptions,
}

impl Job {
    /// The job of fitting `network` to `sheet`: the sheet screened against the model (the
    /// modelled-static check from `static_heads`, see [`StaticHeads::solve`]), every test with an
    /// error left out with its reasons, every warning kept beside its test.
    pub fn new(
        network: Network,
        network_text: String,
        sheet: &FieldSheet,
        options: CalibrationOptions,
        static_heads: &StaticHeads,
    ) -> Self {
        let reading =
            with_static_findings(&network, screen_sheet(sheet, Some(&network)), static_heads);
        let input = calibration_input(&network, &reading);
        Self {
            network,
            network_text,
            tests: input.tests,
            warnings: input.warnings,
            excluded: input.excluded,
            options,
        }
    }

    /// Runs the fit ([`calibrate`]): `progress` hears of every optimizer iteration, `cancel` stops the
    /// run at its next model evaluation.
    pub fn run(
        &self,
        progress: &mut dyn FnMut(&IterationReport),
        cancel: &AtomicBool,
    ) -> Result<CalibrationResult, CalibrationError> {
        calibrate(&self.network, &self.tests, &self.options, progress, cancel)
    }
}
