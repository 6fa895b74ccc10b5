//! `roughcal calibrate NETWORK SHEET [--out DIR] ...`: fit each roughness group's C to the field
//! sheet, print the result, and with `--out` write the coefficient set, calibrated network, report and
//! plot.

use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::sync::atomic::AtomicBool;

use anyhow::{Context as _, bail};
use roughcal::calibrate::{self as core, CalibrationOptions};
use roughcal::fieldtest::{
    StaticHeads, calibration_input, load_sheet, screen_sheet, with_static_findings,
};
use roughcal::network::Network;
use roughcal::network::file::parse_network;
use roughcal::report::{
    CalibrationOutputs, OutputWriteError, Provenance, RunContext, existing_outputs, json_summary,
    text_summary, write_outputs,
};

use super::{FitTarget, load_network_or_report};

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
    let network_text = std::fs::read_to_string(&args.network)
        .with_context(|| format!("cannot read network file {network_file}"))?;
    let parse = |_: &Path| parse_network(&network_text, &network_file);
    let Some(loaded) = load_network_or_report(&args.network, parse)? else {
        return Ok(ExitCode::from(1));
    };
    let network = loaded.network;
    let options = options(&args, &network)?;
    // Refuse before a long run rather than after it.
    if let Some(out) = &args.out
        && !args.force
    {
        refuse_existing(out)?;
    }
    let sheet = match load_sheet(&args.sheet) {
        Ok(sheet) => sheet,
        Err(error) => {
            eprintln!("roughcal: {error}");
            return Ok(ExitCode::from(1));
        }
    };
    // Every warning `tests` gives (the modelled-static one too) goes with its test into the outputs.
    let reading = with_static_findings(
        &network,
        screen_sheet(&sheet, Some(&network)),
        &StaticHeads::solve(&network),
    );
    let input = calibration_input(&network, &reading);
    let (tests, excluded) = (input.tests, input.excluded);

    let mut progress = |report: &core::IterationReport| {
        eprintln!(
            "iteration {:>3}: objective {:.4}, largest C step {:.3}",
            report.iteration, report.objective, report.step_c
        );
    };
    let result = core::calibrate(
        &network,
        &tests,
        &options,
        &mut progress,
        &AtomicBool::new(false),
    )?;
    let sheet_file = args.sheet.display().to_string();
    let run = RunContext {
        network: &network,
        network_file: &network_file,
        sheet_file: &sheet_file,
        options: &options,
        tests: &tests,
        excluded: &excluded,
        result: &result,
        warnings: &input.warnings,
        out_of_date: None,
    };
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
            network_text.as_bytes(),
            &sheet_bytes,
            &reading,
        );
        let outputs = CalibrationOutputs::build_delivered(&run, &network_text, &provenance)?;
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

fn roughcal_not_converged(result: &core::CalibrationResult) -> String {
    format!(
        "NOT CONVERGED after {} iterations ({})",
        result.iterations.len(),
        result.termination
    )
}

fn refuse_existing(out: &Path) -> anyhow::Result<()> {
    let existing = existing_outputs(out);
    if existing.is_empty() {
        return Ok(());
    }
    Err(OutputWriteError::Exists {
        folder: out.to_path_buf(),
        files: existing.iter().map(|s| s.to_string()).collect(),
    }
    .into())
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
    options.fit = match args.fit {
        FitTarget::Pressures => core::FitTarget::Pressures,
        FitTarget::Drop => core::FitTarget::Drop,
    };
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
