//! The Fit view: runs the calibration, shows its progress and outcome, and exports it.

use std::path::PathBuf;

use crate::calibrate::{
    CalibrationError, CalibrationOptions, CalibrationResult, IterationReport, Job,
};
use crate::report::{CalibrationOutputs, RunContext};

use super::super::app::{Action, Confirm, Effect};
use super::super::edit::TextInput;
use super::{Ctx, moved};

/// What the report of an out-of-date export says about it: the question and the answer.
pub const OUT_OF_DATE_ANSWER: &str = "The sheet or the roughness groups were edited after this fit \
     ran. Asked whether to export the old fit anyway, the user answered yes: what follows describes the \
     readings and groups as they were when the fit ran, not the files as they are now.";

/// An export to write.
#[derive(Debug, Clone)]
pub struct ExportJob {
    /// The folder, or with `numbered` the stem of `<folder>-<n>` (first free n).
    pub folder: PathBuf,
    pub numbered: bool,
    /// Overwrite outputs already in the folder (only after the user said yes).
    pub force: bool,
    pub outputs: CalibrationOutputs,
}

/// A calibration run in progress.
#[derive(Debug, Clone)]
pub struct RunningFit {
    pub iterations: Vec<IterationReport>,
    /// What the run was given.
    pub job: Job,
    pub cancelling: bool,
}

/// A finished fit with what it was run on.
#[derive(Debug, Clone)]
pub struct FitOutcome {
    pub result: CalibrationResult,
    /// The network, tests and options of the run: the export describes these, not later edits.
    pub job: Job,
    /// Pipe C before the fit, in pipe order.
    pub pipe_c_before: Vec<f64>,
    /// Indices into `result.tests`, largest absolute error after the fit first.
    pub by_error: Vec<usize>,
}

/// Fit view state.
#[derive(Debug, Clone, Default)]
pub struct FitState {
    pub running: Option<RunningFit>,
    pub outcome: Option<FitOutcome>,
    /// Why the last run gave no result.
    pub failure: Option<String>,
    /// The sheet or the groups changed since the outcome was computed.
    pub stale: bool,
    /// The user said yes to exporting the out-of-date outcome (cleared by the next fit).
    pub export_out_of_date: bool,
    pub first_row: usize,
    /// The export folder of this session, once chosen.
    pub export_folder: Option<PathBuf>,
    /// The folder being typed after Ctrl+E; empty means a new `roughcal-export-N` beside the sheet.
    pub export_prompt: Option<TextInput>,
}

impl FitState {
    /// The sheet or the network changed: an outcome no longer describes them.
    pub fn inputs_changed(&mut self) {
        self.stale = self.outcome.is_some();
        self.export_out_of_date = false;
    }

    pub fn update(&mut self, ctx: &mut Ctx, action: Action) -> Vec<Effect> {
        if self.export_prompt.is_some() {
            return self.prompt_action(ctx, action);
        }
        match action {
            Action::MoveCursor(m) => {
                let count = self.outcome.as_ref().map_or(0, |o| o.by_error.len());
                self.first_row = moved(self.first_row, count, m, 10);
            }
            Action::RunCalibration => return self.run(ctx),
            Action::CancelCalibration => {
                if let Some(running) = &mut self.running {
                    running.cancelling = true;
                    ctx.info("cancelling the fit...");
                    return vec![Effect::CancelCalibration];
                }
            }
            Action::CalibrationProgress(report) => {
                if let Some(running) = &mut self.running {
                    running.iterations.push(report);
                }
            }
            Action::CalibrationFinished(result) => self.finish(ctx, *result),
            Action::Export => self.open_export_prompt(ctx),
            Action::ExportRefused(folder) => {
                ctx.info(format!(
                    "overwrite the outputs in {}? (y/n)",
                    folder.display()
                ));
                *ctx.confirm = Some(Confirm::OverwriteExport(folder));
            }
            Action::ExportFinished(Ok(folder)) => {
                ctx.info(format!(
                    "exported (an aid for a licensed engineer to review) to {}",
                    folder.display()
                ));
                self.export_folder = Some(folder);
            }
            Action::ExportFinished(Err(message)) => ctx.error(format!("export failed: {message}")),
            _ => {}
        }
        Vec::new()
    }

    fn run(&mut self, ctx: &mut Ctx) -> Vec<Effect> {
        if self.running.is_some() {
            ctx.info("a fit is already running (Esc cancels it)");
            return Vec::new();
        }
        let session = &ctx.session;
        let job = Job::new(
            session.network.clone(),
            session.network_text.clone(),
            &session.sheet,
            CalibrationOptions::for_units(session.network.units),
            ctx.static_heads,
        );
        if job.tests.is_empty() {
            ctx.error("no usable test on the sheet: fix the flagged rows first");
            return Vec::new();
        }
        self.failure = None;
        ctx.info(format!(
            "fitting {} tests... (Esc cancels)",
            job.tests.len()
        ));
        self.running = Some(RunningFit {
            iterations: Vec::new(),
            job: job.clone(),
            cancelling: false,
        });
        vec![Effect::StartCalibration(Box::new(job))]
    }

    fn finish(&mut self, ctx: &mut Ctx, result: Result<CalibrationResult, CalibrationError>) {
        let Some(running) = self.running.take() else {
            return;
        };
        match result {
            Ok(result) => {
                let mut by_error: Vec<usize> = (0..result.tests.len()).collect();
                let error = |i: usize| {
                    let t = &result.tests[i];
                    (t.measured_static - t.modelled_static_after)
                        .abs()
                        .max((t.measured_residual - t.modelled_residual_after).abs())
                };
                by_error.sort_by(|&a, &b| error(b).total_cmp(&error(a)));
                let converged = result.converged;
                let termination = result.termination.clone();
                self.outcome = Some(FitOutcome {
                    pipe_c_before: ctx.session.network.c_factors(),
                    job: running.job,
                    result,
                    by_error,
                });
                self.stale = false;
                self.export_out_of_date = false;
                self.first_row = 0;
                ctx.changed.fit = true;
                if converged {
                    ctx.info(format!("fit done: {termination}. Ctrl+E exports"));
                } else {
                    ctx.error(format!("FIT DID NOT CONVERGE: {termination}"));
                }
            }
            Err(CalibrationError::Cancelled) => {
                ctx.info("fit cancelled; the previous result is kept")
            }
            Err(e) => {
                self.failure = Some(e.to_string());
                ctx.error(format!("fit failed: {e}"));
            }
        }
    }

    /// Ctrl+E: refuses a fit that did not converge, asks first about one the edits since have made
    /// out of date, then asks where to export.
    fn open_export_prompt(&mut self, ctx: &mut Ctx) {
        let Some(outcome) = &self.outcome else {
            ctx.error("nothing to export yet: run the fit first (Ctrl+R)");
            return;
        };
        if !outcome.result.converged {
            ctx.error(
                "the last fit did NOT converge: it is not a fit and is not exported; adjust the \
                 bounds or the sheet and run the fit again (Ctrl+R)",
            );
            return;
        }
        if self.stale && !self.export_out_of_date {
            *ctx.confirm = Some(Confirm::ExportOutOfDate);
            ctx.info(
                "fit out of date: the sheet or groups changed since it ran. Ctrl+R fits again; \
                 export the old fit anyway (the report says so)? (y/n)",
            );
            return;
        }
        self.ask_export_folder();
    }

    /// The user said yes to exporting an out-of-date fit.
    pub fn export_out_of_date_anyway(&mut self) {
        self.export_out_of_date = true;
        self.ask_export_folder();
    }

    /// Opens the export folder prompt, offering this session's export folder if there is one.
    fn ask_export_folder(&mut self) {
        let offered = self
            .export_folder
            .as_ref()
            .map(|f| f.display().to_string())
            .unwrap_or_default();
        self.export_prompt = Some(TextInput::new(&offered));
    }

    /// Typing in the export prompt; Enter exports, Esc gives up.
    fn prompt_action(&mut self, ctx: &mut Ctx, action: Action) -> Vec<Effect> {
        if let Some(prompt) = &mut self.export_prompt
            && prompt.apply(&action)
        {
            return Vec::new();
        }
        let Some(prompt) = self.export_prompt.take() else {
            return Vec::new();
        };
        match action {
            Action::CommitEdit(_) | Action::CompleteOrCommit => {
                let typed = prompt.buffer.trim();
                let folder = (!typed.is_empty()).then(|| PathBuf::from(typed));
                self.export(ctx, false, folder)
            }
            _ => {
                ctx.info("export cancelled");
                Vec::new()
            }
        }
    }

    /// Writes the outputs into `folder`, or into a new numbered folder beside the sheet when `None`.
    pub fn export(&mut self, ctx: &mut Ctx, force: bool, folder: Option<PathBuf>) -> Vec<Effect> {
        let Some(outcome) = &self.outcome else {
            ctx.error("nothing to export yet: run the fit first (Ctrl+R)");
            return Vec::new();
        };
        let job = &outcome.job;
        let network_file = ctx.session.network_path.display().to_string();
        let sheet_file = ctx.session.sheet_path.display().to_string();
        let run = RunContext::of_job(
            job,
            &outcome.result,
            &network_file,
            &sheet_file,
            (self.stale && self.export_out_of_date).then_some(OUT_OF_DATE_ANSWER),
        );
        if !outcome.result.converged || (self.stale && !self.export_out_of_date) {
            // The prompt was opened before the state changed (a refit finished, an edit came in).
            ctx.error("the fit changed while the export was asked for: press Ctrl+E again");
            return Vec::new();
        }
        // The same provenance `calibrate --out` writes: the sheet as saved (every edit is saved at once).
        let sheet_text = ctx.session.sheet.to_csv_string();
        let provenance = crate::report::Provenance::of(
            crate::storage::today_utc(),
            job.network_text.as_bytes(),
            sheet_text.as_bytes(),
            &ctx.session.sheet,
        );
        let outputs =
            match CalibrationOutputs::build_delivered(&run, &job.network_text, &provenance) {
                Ok(outputs) => outputs,
                Err(e) => {
                    ctx.error(format!("export failed: {e}"));
                    return Vec::new();
                }
            };
        let numbered = folder.is_none();
        let folder = folder.unwrap_or_else(|| {
            let base = ctx
                .session
                .sheet_path
                .parent()
                .filter(|p| !p.as_os_str().is_empty())
                .map_or_else(|| PathBuf::from("."), PathBuf::from);
            base.join("roughcal-export")
        });
        ctx.info("exporting...");
        vec![Effect::WriteExport(Box::new(ExportJob {
            folder,
            numbered,
            force,
            outputs,
        }))]
    }
}
