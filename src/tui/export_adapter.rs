//! LOCAL ADAPTER, to be replaced by `crate::report` when it lands on main: writes a minimal export
//! folder (coefficients.csv, calibrated.toml, report.md) from a calibration result. The workbench calls
//! it only through [`write_export`], from the runner's export effect.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use crate::calibrate::CalibrationResult;
use crate::network::Network;
use crate::network::edit::apply_group_c;
use crate::storage;

/// Everything an export needs, copied out of the workbench state.
#[derive(Debug, Clone)]
pub struct ExportJob {
    /// The folder, or with `numbered` the stem of `<folder>-<n>` (first free n).
    pub folder: PathBuf,
    pub numbered: bool,
    /// Overwrite outputs already in the folder.
    pub force: bool,
    pub result: CalibrationResult,
    pub network: Network,
    pub network_text: String,
    /// The sheet or groups changed after the fit.
    pub stale: bool,
    pub caution: &'static str,
}

/// Why an export was not written.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ExportFailure {
    /// The folder already holds outputs and `force` was not given.
    Exists(PathBuf),
    Failed(String),
}

/// The files an export writes.
pub const OUTPUT_FILES: [&str; 3] = ["coefficients.csv", "calibrated.toml", "report.md"];

fn numbered_folder(stem: &Path) -> PathBuf {
    let mut n = 1;
    loop {
        let mut name = stem.as_os_str().to_owned();
        name.push(format!("-{n}"));
        let candidate = PathBuf::from(name);
        if !candidate.exists() {
            return candidate;
        }
        n += 1;
    }
}

/// Writes the export and returns its folder.
pub fn write_export(job: &ExportJob) -> Result<PathBuf, ExportFailure> {
    let folder = if job.numbered {
        numbered_folder(&job.folder)
    } else {
        job.folder.clone()
    };
    if !job.force && OUTPUT_FILES.iter().any(|f| folder.join(f).exists()) {
        return Err(ExportFailure::Exists(folder));
    }
    std::fs::create_dir_all(&folder)
        .map_err(|e| ExportFailure::Failed(format!("{}: {e}", folder.display())))?;
    let result = &job.result;
    let mut csv =
        String::from("group,pipes,start_c,fitted_c,min_c,max_c,ci95_low,ci95_high,status\n");
    for g in &result.groups {
        let (low, high) = g.ci95.map_or((String::new(), String::new()), |(l, h)| {
            (format!("{l:.1}"), format!("{h:.1}"))
        });
        let _ = writeln!(
            csv,
            "{},{},{:.1},{:.1},{},{},{low},{high},{}",
            g.name,
            g.pipe_count,
            g.start_c,
            g.fitted_c,
            g.min_c,
            g.max_c,
            g.status.label()
        );
    }
    let fitted: BTreeMap<String, f64> = result
        .groups
        .iter()
        .map(|g| (g.name.clone(), (g.fitted_c * 10.0).round() / 10.0))
        .collect();
    let calibrated = apply_group_c(&job.network_text, &fitted)
        .map_err(|e| ExportFailure::Failed(format!("calibrated.toml: {e}")))?;
    let units = job.network.units.pressure_label();
    let mut report = format!(
        "# Calibration of {}\n\n> {}\n\n",
        job.network.title, job.caution
    );
    if !result.converged {
        let _ = writeln!(
            report,
            "**The fit did not converge:** {}\n",
            result.termination
        );
    }
    if job.stale {
        report.push_str("**The sheet or the groups changed after this fit.**\n\n");
    }
    let _ = writeln!(
        report,
        "RMSE before {:.2} {units}, after {:.2} {units}; {} readings.\n",
        result.before.rmse, result.after.rmse, result.after.n
    );
    for (name, text) in [
        ("coefficients.csv", csv),
        ("calibrated.toml", calibrated),
        ("report.md", report),
    ] {
        storage::write_atomic(&folder.join(name), text.as_bytes())
            .map_err(|e| ExportFailure::Failed(e.to_string()))?;
    }
    Ok(folder)
}
