//! Calibrate the demo district against its field sheet from the library API: load, screen, fit, and
//! print each group's fitted C with its 95 % interval.
//!
//! `cargo run --release --example calibrate_demo`
//!
//! The district and its readings are invented (Alder Flats). Results are an aid to engineering
//! judgement, reviewed by a licensed engineer; local codes and the fire authority govern.

use std::path::Path;
use std::process::ExitCode;
use std::sync::atomic::AtomicBool;

use roughcal::calibrate::{CAUTION, CalibrationOptions, calibrate};
use roughcal::fieldtest::{calibration_tests, load_sheet, screen_sheet};
use roughcal::network::file::load_network_file;

fn main() -> ExitCode {
    match run() {
        Ok(code) => code,
        Err(message) => {
            eprintln!("roughcal example: {message}");
            ExitCode::FAILURE
        }
    }
}

fn run() -> Result<ExitCode, String> {
    let net = load_network_file(Path::new("demo-network/district.toml"))
        .map_err(|e| e.to_string())?
        .network;
    let sheet = load_sheet(Path::new("field-sheets/demo.csv")).map_err(|e| e.to_string())?;
    // Screening finds what is wrong with each row; rows with errors are left out of the fit.
    let reading = screen_sheet(&sheet, Some(&net));
    let (tests, excluded) = calibration_tests(&net, &reading);
    println!(
        "{} tests in the fit, {} left out",
        tests.len(),
        excluded.len()
    );

    let options = CalibrationOptions::for_units(net.units);
    let mut progress = |report: &roughcal::calibrate::IterationReport| {
        eprintln!(
            "iteration {:>3}: objective {:.4}",
            report.iteration, report.objective
        );
    };
    let result = calibrate(
        &net,
        &tests,
        &options,
        &mut progress,
        &AtomicBool::new(false),
    )
    .map_err(|e| e.to_string())?;
    if !result.converged {
        // Nothing that did not converge is handed on as a result.
        println!("NOT CONVERGED: {}", result.termination);
        return Ok(ExitCode::FAILURE);
    }
    // Fit statistics are in the network's own pressure unit.
    let unit = net.units.pressure_label();
    println!(
        "rms error {:.2} {unit} before, {:.2} {unit} after",
        result.before.rmse, result.after.rmse
    );
    for group in &result.groups {
        let interval = group
            .ci95
            .map(|(lo, hi)| format!("{lo:.0} to {hi:.0}"))
            .unwrap_or_else(|| "-".to_string());
        println!(
            "  {:<16} C {:>5.1} -> {:>5.1}  (95 %: {interval}, {})",
            group.name,
            group.start_c,
            group.fitted_c,
            group.status.label()
        );
    }
    println!("{CAUTION}");
    Ok(ExitCode::SUCCESS)
}
