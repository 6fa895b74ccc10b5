//! `roughcal calibrate NETWORK SHEET [--out DIR] ...`: fit each roughness group's C to the field
//! sheet, print the result, and with `--out` write the coefficient set, calibrated network, report and
//! plot.

use std::io::{IsTerminal as _, Write as _};
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::atomic::AtomicBool;

use anyhow::{Context as _, bail};
use roughcal::calibrate::{self as core, CalibrationOptions, FitTarget, Job};
use roughcal::fieldtest::{StaticHeads, load_sheet};
use roughcal::network::{Network, read_network};
use roughcal::report::{
    CalibrationOutputs, Provenance, RunContext, check_no_outputs, json_summary, text_summary,
    write_outputs,
};

use super::network_or_report;

pub struct Args {
    pub network: PathBuf,
    pub sheet: PathBuf,
    pub out: Option<PathBuf>,
    pub force: bool,
    pub fit: FitTarget,
    pub gauge_sd: Option<f64>,
    pub prior_sd: Option<f64>,
    pub within: Option<Vec<f64>>,
    pub max_iterations: u64,
    pub json: bool,
}

pub fn run(args: Args) -> anyhow::Result<ExitCode> {
    let network_file = args.network.display().to_string();
    let Some(read) = network_or_report(&args.network, read_network(&args.network))? else {
        return Ok(ExitCode::from(1));
    };
    let network = read.loaded.network;
    let options = options(&args, &network)?;
    // Refuse before a long run rather than after it.
    if let Some(out) = &args.out
        && !args.force
    {
        check_no_outputs(out)?;
    }
    let sheet = match load_sheet(&args.sheet) {
        Ok(sheet) => sheet,
        Err(error) => {
            eprintln!("roughcal: {error}");
            return Ok(ExitCode::from(1));
        }
    };
    // Every warning `tests` gives (the modelled-static one too) goes with its test into the outputs.
    let static_heads = StaticHeads::solve(&network);
    let job = Job::new(network, read.text, &sheet, options, &static_heads);

    let result = job.run(&mut progress_line(job.tests.len()), &AtomicBool::new(false));
    if std::io::stderr().is_terminal() {
        eprintln!();
    }
    let result = result?;
    let sheet_file = args.sheet.display().to_string();
    let run = RunContext::of_job(&job, &result, &network_file, &sheet_file, None);
    if args.json {
        println!("{}", serde_json::to_string_pretty(&json_summary(&run))?);
    } else {
        print!("{}", text_summary(&run));
    }
    if let Some(out) = &args.out {
        let sheet_bytes = std::fs::read(&args.sheet)
            .with_context(|| format!("cannot read field sheet {sheet_file}"))?;
        let provenance = Provenance::of(
            super::today_utc(),
            job.network_text.as_bytes(),
            &sheet_bytes,
            &sheet,
        );
        let outputs = CalibrationOutputs::build_delivered(&run, &job.network_text, &provenance)?;
        let written = write_outputs(out, &outputs, args.force)?;
        for path in written {
            // Keep stdout a single JSON document under --json.
            if args.json {
                eprintln!("wrote {}", path.display());
            } else {
                println!("wrote {}", path.display());
            }
        }
    }
    if !result.converged {
        eprintln!("roughcal: {}", roughcal_not_converged(&result));
        return Ok(ExitCode::from(1));
    }
    Ok(ExitCode::SUCCESS)
}

/// The progress line on stderr when it is a terminal, rewritten in place at every optimizer
/// iteration (nothing when stderr is a file or a pipe, so logs and scripts see only the result).
fn progress_line(tests: usize) -> impl FnMut(&core::IterationReport) {
    let terminal = std::io::stderr().is_terminal();
    if terminal {
        eprint!("fitting {tests} tests: solving the model at the start values...");
    }
    move |report: &core::IterationReport| {
        if terminal {
            let mut err = std::io::stderr().lock();
            let _ = write!(
                err,
                "\r\x1b[2Kfitting {tests} tests: iteration {}, objective {:.4}, largest C step {:.3}",
                report.iteration, report.objective, report.step_c
            );
            let _ = err.flush();
        }
    }
}

fn roughcal_not_converged(result: &core::CalibrationResult) -> String {
    format!(
        "NOT CONVERGED after {} iterations ({})",
        result.iterations.len(),
        result.termination
    )
}

/// Calibration options from the flags; pressures given in the network's units become metres of water.
fn options(args: &Args, network: &Network) -> anyhow::Result<CalibrationOptions> {
    let units = network.units;
    let unit = units.pressure_label();
    let positive = |flag: &str, value: f64| -> anyhow::Result<f64> {
        if value.is_finite() && value > 0.0 {
            Ok(value)
        } else {
            bail!("{flag} must be a positive number ({unit}), got {value}")
        }
    };
    let mut options = CalibrationOptions::for_units(units);
    options.fit = args.fit;
    if let Some(sd) = args.gauge_sd {
        options.gauge_sd_m = units.pressure_to_head_m(positive("--gauge-sd", sd)?);
    }
    if let Some(sd) = args.prior_sd {
        if !(sd.is_finite() && sd > 0.0) {
            bail!("--prior-sd must be a positive number (units of C), got {sd}");
        }
        options.prior_sd_c = Some(sd);
    }
    if let Some(within) = &args.within {
        let [tight, loose] = within.as_slice() else {
            bail!("--within takes two values ({unit})");
        };
        let tight = positive("--within", *tight)?;
        let loose = positive("--within", *loose)?;
        if tight >= loose {
            bail!("--within: the first threshold ({tight}) must be below the second ({loose})");
        }
        options.within_m = (
            units.pressure_to_head_m(tight),
            units.pressure_to_head_m(loose),
        );
    }
    if args.max_iterations == 0 {
        bail!("--max-iterations must be at least 1");
    }
    options.max_iterations = args.max_iterations;
    Ok(options)
}
