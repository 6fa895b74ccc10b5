//! Calibration outputs: everything `calibrate` prints and writes, built as strings from a
//! [`CalibrationResult`] and the run that produced it, and the coefficient set that `apply` reads back.
//!
//! Every builder is pure. The one piece of I/O is [`write_outputs`], which puts the built files into a
//! folder through [`crate::storage`], refusing to replace earlier outputs unless asked to.
//!
//! Files written into the output folder (names are a contract scripts rely on):
//! - [`COEFFICIENTS_CSV`]: one row per group (see [`coefficients::CSV_HEADER`]);
//! - [`COEFFICIENTS_TOML`]: a `[[group]]` list that `apply` reads (see `docs/coefficients-file.md`);
//! - [`CALIBRATED_NETWORK`]: the input network with the fitted C written in, otherwise byte-identical;
//! - [`REPORT_MD`]: what was fitted, how, how well, and the caution;
//! - [`FIT_SVG`]: measured against modelled pressure, before and after, with the 1:1 line;
//! - [`PIPES_CSV`]: every pipe's group and C before and after, to join back onto a GIS by pipe id;
//! - [`RESULTS_GEOJSON`] (when the network has plan coordinates): pipes and used tests as features.
//!
//! Every file goes through [`write_outputs`], so whatever rule it applies to a run covers them all.

pub mod coefficients;
mod json;
mod markdown;
pub mod per_pipe;
mod plot;
mod sections;
pub mod table;
mod text;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

pub use coefficients::{
    CoefficientEntry, CoefficientError, CoefficientErrorKind, CoefficientSet, coefficients_csv,
    coefficients_toml, load_coefficients, parse_coefficients_csv, parse_coefficients_toml,
};
pub use json::{json_summary, valve_states_json};
pub use markdown::report_markdown;
pub use per_pipe::{PIPES_CSV_HEADER, pipes_csv, results_geojson};
pub use plot::fit_svg;
pub use text::text_summary;

use crate::calibrate::{CalibrationOptions, CalibrationResult, CalibrationTest, GroupStatus, Job};
use crate::network::Network;
use crate::network::edit::{NetworkEditError, apply_c_factors};
use crate::storage::{WriteError, write_new};

/// File name of the coefficient table.
pub const COEFFICIENTS_CSV: &str = "coefficients.csv";
/// File name of the coefficient set `apply` reads.
pub const COEFFICIENTS_TOML: &str = "coefficients.toml";
/// File name of the network with the fitted C applied.
pub const CALIBRATED_NETWORK: &str = "calibrated.toml";
/// File name of the written report.
pub const REPORT_MD: &str = "report.md";
/// File name of the measured-against-modelled plot.
pub const FIT_SVG: &str = "fit.svg";
/// File name of the per-pipe C table.
pub const PIPES_CSV: &str = "pipes.csv";
/// File name of the per-pipe and per-test map layer.
pub const RESULTS_GEOJSON: &str = "results.geojson";
/// Every file [`write_outputs`] may write, in the order it writes them ([`RESULTS_GEOJSON`] only for
/// a network with plan coordinates).
pub const OUTPUT_FILES: [&str; 7] = [
    COEFFICIENTS_CSV,
    COEFFICIENTS_TOML,
    CALIBRATED_NETWORK,
    REPORT_MD,
    FIT_SVG,
    PIPES_CSV,
    RESULTS_GEOJSON,
];
/// The only outputs of a fit that did not converge: the report (marked NOT CONVERGED at its top) and
/// the plot (titled so). An allow-list, so that an output added later (a per-pipe export, say) is
/// withheld from an unconverged fit without anyone remembering to.
pub const UNCONVERGED_OUTPUTS: [&str; 2] = [REPORT_MD, FIT_SVG];

/// A field test left out of the calibration, and why (from [`crate::fieldtest::calibration_tests`]).
pub use crate::fieldtest::ExcludedTest;
use crate::fieldtest::Finding;

/// A calibration run as the outputs describe it: inputs, settings and result.
#[derive(Debug, Clone, Copy)]
pub struct RunContext<'a> {
    pub network: &'a Network,
    /// Display names of the input files.
    pub network_file: &'a str,
    pub sheet_file: &'a str,
    pub options: &'a CalibrationOptions,
    /// The tests the fit used, in the order given to [`crate::calibrate::calibrate`].
    pub tests: &'a [CalibrationTest],
    pub excluded: &'a [ExcludedTest],
    pub result: &'a CalibrationResult,
    /// Screening warnings of each used test (parallel to `tests`): a warning keeps a test in the fit,
    /// and the outputs say which.
    pub warnings: &'a [Vec<Finding>],
    /// Set when the fit is exported although the sheet or the groups changed after it: the answer the
    /// user gave, written at the top of the report.
    pub out_of_date: Option<&'a str>,
}

impl<'a> RunContext<'a> {
    /// The run of `job` that gave `result`, with the display names of its input files.
    pub fn of_job(
        job: &'a Job,
        result: &'a CalibrationResult,
        network_file: &'a str,
        sheet_file: &'a str,
        out_of_date: Option<&'a str>,
    ) -> Self {
        Self {
            network: &job.network,
            network_file,
            sheet_file,
            options: &job.options,
            tests: &job.tests,
            excluded: &job.excluded,
            result,
            warnings: &job.warnings,
            out_of_date,
        }
    }
}

/// The version of roughcal that wrote an output, as the report and `calibrated.toml` name it.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");

/// Where a run's inputs came from and when it ran: what makes a report a deliverable. Built at the
/// edge (the clock and the file bytes are read there); empty fields are reported as not recorded.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Provenance {
    /// The run date, YYYY-MM-DD (UTC).
    pub run_date: String,
    /// SHA-256 of the network file as read, lower-case hex.
    pub network_sha256: Option<String>,
    /// SHA-256 of the field sheet as read, lower-case hex.
    pub sheet_sha256: Option<String>,
    /// The sheet's `date` cell of each test, by test id.
    pub test_dates: BTreeMap<String, String>,
}

impl Provenance {
    /// The provenance of a run on `network` and `sheet` (the bytes as read); the test dates are the
    /// `date` cells of `parsed_sheet` (the same sheet parsed; no screening needed for them).
    pub fn of(
        run_date: String,
        network: &[u8],
        sheet: &[u8],
        parsed_sheet: &crate::fieldtest::FieldSheet,
    ) -> Self {
        Self {
            run_date,
            network_sha256: Some(sha256_hex(network)),
            sheet_sha256: Some(sha256_hex(sheet)),
            test_dates: crate::fieldtest::read_tests(parsed_sheet)
                .tests
                .iter()
                .map(|t| (t.test_id.clone(), t.date.clone()))
                .collect(),
        }
    }
}

/// SHA-256 of `bytes` as lower-case hex (FIPS 180-4).
pub fn sha256_hex(bytes: &[u8]) -> String {
    use sha2::Digest as _;
    sha2::Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// The calendar date (proleptic Gregorian, UTC) `days` days after 1970-01-01, as YYYY-MM-DD.
/// Days-from-civil inverse (H. Hinnant, "chrono-Compatible Low-Level Date Algorithms", from memory).
pub fn civil_date(days: i64) -> String {
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = doy - (153 * mp + 2) / 5 + 1;
    let month = if mp < 10 { mp + 3 } else { mp - 9 };
    let year = yoe + era * 400 + i64::from(month <= 2);
    format!("{year:04}-{month:02}-{day:02}")
}

/// "1 test", "2 tests": a count with its noun, singular or plural.
pub fn count_of(count: usize, noun: &str) -> String {
    if count == 1 {
        format!("1 {noun}")
    } else {
        format!("{count} {noun}s")
    }
}

/// The header `calibrated.toml` starts with: which network, from which sheet, on which date, by which
/// version. Replaces the input's own leading comment block (it described the uncalibrated file).
pub fn calibrated_header(run: &RunContext<'_>, provenance: &Provenance) -> String {
    let date = if provenance.run_date.is_empty() {
        "an unrecorded date"
    } else {
        provenance.run_date.as_str()
    };
    format!(
        "# Calibration of {} from the field sheet {}, made on {date} by roughcal {VERSION}.\n\
         # Fitted C-factors written to 0.1. Results are an aid, to be reviewed by a licensed engineer;\n\
         # local codes and the fire authority govern.\n",
        run.network_file, run.sheet_file
    )
}

/// Why an output could not be built.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ReportError {
    // Not `#[from]`: the cause is in the message, and a source as well would print it twice.
    #[error("cannot write the fitted C into the network text: {0}")]
    Edit(NetworkEditError),
    #[error("cannot draw the fit plot: {0}")]
    Plot(String),
    #[error("the result has {result} pipe C-factors but the network has {network} pipes")]
    PipeCount { result: usize, network: usize },
    #[error("cannot build pipes.csv: {0}")]
    Csv(String),
}

/// The network text with the pipes of every fitted group (status fitted or at bound) given their C after
/// the fit. Every other pipe is left as written, so the output is the input byte for byte except the fitted values.
pub fn calibrated_network(
    network_text: &str,
    network: &Network,
    result: &CalibrationResult,
) -> Result<String, ReportError> {
    if result.pipe_c_after.len() != network.pipes.len() {
        return Err(ReportError::PipeCount {
            result: result.pipe_c_after.len(),
            network: network.pipes.len(),
        });
    }
    // Only groups the fit moved are written: a locked or uninformed group keeps each pipe's own C.
    let moved: Vec<usize> = result
        .groups
        .iter()
        .filter(|g| matches!(g.status, GroupStatus::Fitted | GroupStatus::AtBound))
        .map(|g| g.group)
        .collect();
    let changed: BTreeMap<String, f64> = network
        .pipes
        .iter()
        .zip(&result.pipe_c_after)
        .filter(|(pipe, c)| pipe.group.is_some_and(|g| moved.contains(&g)) && pipe.c_factor != **c)
        .map(|(pipe, &c)| (pipe.id.clone(), c))
        .collect();
    apply_c_factors(network_text, &changed).map_err(ReportError::Edit)
}

/// `text` without its leading block of `#` comment lines (and the blank lines after it).
fn strip_leading_comments(text: &str) -> &str {
    let mut rest = text;
    while let Some(line) = rest.lines().next() {
        if !line.trim_start().starts_with('#') && !line.trim().is_empty() {
            break;
        }
        rest = &rest[line.len()..];
        rest = rest
            .strip_prefix("\r\n")
            .or_else(|| rest.strip_prefix('\n'))
            .unwrap_or(rest);
        if rest.is_empty() {
            break;
        }
    }
    rest
}

/// The output files of a run, named and built, ready for [`write_outputs`].
#[derive(Debug, Clone, PartialEq)]
pub struct CalibrationOutputs {
    /// (file name, content), in [`OUTPUT_FILES`] order.
    pub files: Vec<(&'static str, String)>,
    /// Whether the fit converged; [`write_outputs`] writes only [`UNCONVERGED_OUTPUTS`] when not.
    pub converged: bool,
}

impl CalibrationOutputs {
    /// Builds every output of `run`; `network_text` is the network file as read.
    pub fn build(run: &RunContext<'_>, network_text: &str) -> Result<Self, ReportError> {
        Self::build_with(run, network_text, None)
    }

    /// As [`Self::build`], as a deliverable: the report names the run date, the inputs' SHA-256 and the
    /// test dates, and `calibrated.toml` starts with [`calibrated_header`] and has its fitted C to 0.1.
    pub fn build_delivered(
        run: &RunContext<'_>,
        network_text: &str,
        provenance: &Provenance,
    ) -> Result<Self, ReportError> {
        Self::build_with(run, network_text, Some(provenance))
    }

    fn build_with(
        run: &RunContext<'_>,
        network_text: &str,
        provenance: Option<&Provenance>,
    ) -> Result<Self, ReportError> {
        let calibrated = match provenance {
            None => calibrated_network(network_text, run.network, run.result)?,
            Some(p) => {
                let mut rounded = run.result.clone();
                for c in &mut rounded.pipe_c_after {
                    *c = (*c * 10.0).round() / 10.0;
                }
                let text = calibrated_network(network_text, run.network, &rounded)?;
                let body = text.trim_start_matches('\n');
                let body = strip_leading_comments(body);
                format!("{}\n{body}", calibrated_header(run, p))
            }
        };
        let report = match provenance {
            None => report_markdown(run),
            Some(p) => markdown::report_markdown_delivered(run, p),
        };
        Ok(Self {
            files: vec![
                (COEFFICIENTS_CSV, coefficients_csv(run.result)),
                (
                    COEFFICIENTS_TOML,
                    coefficients_toml(run.result, run.network_file),
                ),
                (CALIBRATED_NETWORK, calibrated),
                (REPORT_MD, report),
                (FIT_SVG, fit_svg(run.result, run.network.units)?),
                (PIPES_CSV, pipes_csv(run.network, &run.result.pipe_c_after)?),
            ]
            .into_iter()
            .chain(results_geojson(run).map(|text| (RESULTS_GEOJSON, text)))
            .collect(),
            converged: run.result.converged,
        })
    }

    /// Content of one output by file name.
    pub fn get(&self, name: &str) -> Option<&str> {
        self.files
            .iter()
            .find(|(n, _)| *n == name)
            .map(|(_, content)| content.as_str())
    }
}

/// Why the outputs were not written.
#[derive(Debug, thiserror::Error)]
pub enum OutputWriteError {
    #[error(
        "{} already holds {}; refusing to overwrite without --force",
        .folder.display(),
        .files.join(", ")
    )]
    Exists { folder: PathBuf, files: Vec<String> },
    // The io error is part of the message, not a `source`, so that error chains print it once.
    #[error("cannot create the output folder {}: {cause}", .folder.display())]
    CreateFolder {
        folder: PathBuf,
        cause: std::io::Error,
    },
    #[error(transparent)]
    Write(#[from] WriteError),
    #[error("{}: cannot remove an earlier run's output beside an unconverged report: {cause}", .path.display())]
    RemoveStale {
        path: PathBuf,
        cause: std::io::Error,
    },
}

/// The outputs of a run already present in `folder`.
pub fn existing_outputs(folder: &Path) -> Vec<&'static str> {
    OUTPUT_FILES
        .into_iter()
        .filter(|name| folder.join(name).exists())
        .collect()
}

/// The one check that `folder` holds no output of an earlier run ([`OutputWriteError::Exists`] naming
/// them if it does): [`write_outputs`] makes it before writing without `force`, and `calibrate --out`
/// makes it before a long run so that it refuses at once rather than after the fit.
pub fn check_no_outputs(folder: &Path) -> Result<(), OutputWriteError> {
    let existing = existing_outputs(folder);
    if existing.is_empty() {
        return Ok(());
    }
    Err(OutputWriteError::Exists {
        folder: folder.to_path_buf(),
        files: existing.iter().map(|s| s.to_string()).collect(),
    })
}

/// Writes `outputs` into `folder` (created if missing), each file atomically. Without `force`, nothing
/// is written when the folder already holds any of [`OUTPUT_FILES`]. Returns the paths written.
///
/// This is the one place calibration outputs reach the disk. A fit that did not converge gets only
/// [`UNCONVERGED_OUTPUTS`]: no coefficient set, no calibrated network, nothing that could pass for a
/// fit. With `force`, the other outputs an earlier run left in the folder are removed, so the folder
/// never pairs an unconverged report with an older run's coefficients.
pub fn write_outputs(
    folder: &Path,
    outputs: &CalibrationOutputs,
    force: bool,
) -> Result<Vec<PathBuf>, OutputWriteError> {
    if !force {
        check_no_outputs(folder)?;
    }
    std::fs::create_dir_all(folder).map_err(|cause| OutputWriteError::CreateFolder {
        folder: folder.to_path_buf(),
        cause,
    })?;
    let mut written = Vec::with_capacity(outputs.files.len());
    for (name, content) in &outputs.files {
        let path = folder.join(name);
        if !outputs.converged && !UNCONVERGED_OUTPUTS.contains(name) {
            if path.exists() {
                std::fs::remove_file(&path).map_err(|cause| OutputWriteError::RemoveStale {
                    path: path.clone(),
                    cause,
                })?;
            }
            continue;
        }
        write_new(&path, content.as_bytes(), force)?;
        written.push(path);
    }
    Ok(written)
}
