//! `roughcal fireflow SHEET`: flow available at a target residual for every test of a sheet, with the
//! findings of the rules that need only the sheet.

use std::path::Path;
use std::process::ExitCode;

use anyhow::bail;
use serde_json::{Value, json};

use roughcal::calibrate::CAUTION;
use roughcal::fieldtest::{
    AvailableFlow, FieldSheet, Severity, SheetReading, default_target, load_sheet, screen_sheet,
};
use roughcal::network::UnitSystem;

pub fn run(sheet_path: &Path, target: Option<f64>, json: bool) -> anyhow::Result<ExitCode> {
    let sheet = match load_sheet(sheet_path) {
        Ok(sheet) => sheet,
        Err(error) => {
            eprintln!("roughcal: {error}");
            return Ok(ExitCode::from(1));
        }
    };
    let target = target.unwrap_or_else(|| default_target(sheet.units()));
    if !target.is_finite() || target < 0.0 {
        bail!("--target must be a pressure of zero or more, not {target}");
    }
    let reading = screen_sheet(&sheet, None);
    if json {
        println!(
            "{}",
            serde_json::to_string_pretty(&to_json(&sheet, &reading, target))?
        );
    } else {
        print!("{}", table(&sheet, &reading, target));
    }
    Ok(ExitCode::SUCCESS)
}

/// What a row says: its id and, when it gave a test, flow, pressures and available flow.
struct RowResult {
    row: usize,
    line: usize,
    test: String,
    total_flow: Option<f64>,
    static_pressure: Option<f64>,
    residual_pressure: Option<f64>,
    available: Option<AvailableFlow>,
}

fn results(sheet: &FieldSheet, reading: &SheetReading, target: f64) -> Vec<RowResult> {
    reading
        .rows()
        .into_iter()
        .map(|row| {
            let test = reading.test_for_row(row);
            RowResult {
                row,
                line: sheet.line(row).unwrap_or_default(),
                test: test.map_or_else(
                    || {
                        reading
                            .findings_for_row(row)
                            .next()
                            .map(|f| f.test_id.clone())
                            .unwrap_or_default()
                    },
                    |t| t.test_id.clone(),
                ),
                total_flow: test.map(|t| t.total_flow()),
                static_pressure: test.map(|t| t.static_pressure()),
                residual_pressure: test.map(|t| t.residual_pressure()),
                available: test.map(|t| t.available_flow(target)),
            }
        })
        .collect()
}

fn available_note(available: Option<AvailableFlow>, target: f64, unit: &str) -> Option<String> {
    match available? {
        AvailableFlow::Flow(_) => None,
        AvailableFlow::NoneAtTarget => Some(format!(
            "the target {target} {unit} is not below the static pressure: no flow is available at it"
        )),
        AvailableFlow::Undefined => {
            Some("the residual is not below the static: the test cannot be extrapolated".into())
        }
    }
}

fn to_json(sheet: &FieldSheet, reading: &SheetReading, target: f64) -> Value {
    let units = sheet.units();
    let tests: Vec<Value> = results(sheet, reading, target)
        .into_iter()
        .map(|r| {
            let findings: Vec<Value> = reading.findings_for_row(r.row).map(finding_json).collect();
            json!({
                "test": r.test,
                "line": r.line,
                "total_flow": r.total_flow,
                "static": r.static_pressure,
                "residual": r.residual_pressure,
                "available_flow": r.available.and_then(AvailableFlow::value),
                "available_note": available_note(r.available, target, units.pressure_label()),
                "findings": findings,
            })
        })
        .collect();
    json!({
        "target": target,
        "units": units.labels(),
        "caution": CAUTION,
        "tests": tests,
    })
}

/// A screening finding as JSON (shared by `fireflow` and `tests`).
pub(super) fn finding_json(f: &roughcal::fieldtest::Finding) -> Value {
    json!({
        "severity": f.severity.key(),
        "rule": f.rule.key(),
        "column": f.column,
        "reason": f.reason,
        "line": f.line,
    })
}

/// A pressure reading of the table, to one decimal as gauges are read (0.5 psi steps show as keyed).
fn reading_cell(value: Option<f64>) -> String {
    value.map_or_else(|| "-".to_string(), |v| format!("{v:.1}"))
}

/// `1 error`, `2 errors`.
fn count(n: usize, word: &str) -> String {
    format!("{n} {word}{}", if n == 1 { "" } else { "s" })
}

/// A flow of the table: whole gpm; L/s to one decimal.
fn cell(value: Option<f64>, units: UnitSystem) -> String {
    let decimals = match units {
        UnitSystem::Us => 0,
        UnitSystem::Si => 1,
    };
    value.map_or_else(|| "-".to_string(), |v| format!("{v:.decimals$}"))
}

fn table(sheet: &FieldSheet, reading: &SheetReading, target: f64) -> String {
    let units = sheet.units();
    let (flow, pressure) = (units.flow_label(), units.pressure_label());
    let rows = results(sheet, reading, target);
    let header = [
        "test".to_string(),
        "line".to_string(),
        format!("flow {flow}"),
        format!("static {pressure}"),
        format!("residual {pressure}"),
        format!("at {target} {pressure}, {flow}"),
        "findings".to_string(),
    ];
    let mut lines: Vec<[String; 7]> = vec![header];
    for r in &rows {
        let (errors, warnings) = reading
            .findings_for_row(r.row)
            .fold((0, 0), |(e, w), f| match f.severity {
                Severity::Error => (e + 1, w),
                Severity::Warning => (e, w + 1),
            });
        let findings = match (errors, warnings) {
            (0, 0) => String::new(),
            (e, 0) => count(e, "error"),
            (0, w) => count(w, "warning"),
            (e, w) => format!("{}, {}", count(e, "error"), count(w, "warning")),
        };
        lines.push([
            if r.test.is_empty() {
                "?".into()
            } else {
                r.test.clone()
            },
            r.line.to_string(),
            cell(r.total_flow, units),
            reading_cell(r.static_pressure),
            reading_cell(r.residual_pressure),
            cell(r.available.and_then(AvailableFlow::value), units),
            findings,
        ]);
    }
    let mut widths = [0usize; 7];
    for line in &lines {
        for (w, text) in widths.iter_mut().zip(line) {
            *w = (*w).max(text.chars().count());
        }
    }
    let mut out = format!(
        "Fire flow available at {target} {pressure} residual, {} ({} units)\n\n",
        sheet.file_name(),
        units.key()
    );
    for line in &lines {
        let mut text = String::new();
        for (i, (cell, width)) in line.iter().zip(widths).enumerate() {
            let pad = width.saturating_sub(cell.chars().count());
            if i == 0 || i == 6 {
                text.push_str(cell);
                text.push_str(&" ".repeat(pad));
            } else {
                text.push_str(&" ".repeat(pad));
                text.push_str(cell);
            }
            text.push_str("  ");
        }
        out.push_str(text.trim_end());
        out.push('\n');
    }
    if reading.findings.is_empty() {
        out.push_str("\nNo findings.\n");
    } else {
        out.push_str("\nFindings:\n");
        for f in &reading.findings {
            let test = if f.test_id.is_empty() {
                "?"
            } else {
                &f.test_id
            };
            out.push_str(&format!(
                "  line {} {test}: {}: {}: {}\n",
                f.line,
                f.severity.key(),
                f.column,
                f.reason
            ));
        }
    }
    for r in &rows {
        if let Some(note) = available_note(r.available, target, pressure) {
            out.push_str(&format!("  line {} {}: {note}\n", r.line, r.test));
        }
    }
    out.push_str(&format!("\nCaution: {CAUTION}\n"));
    out
}
