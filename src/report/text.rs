//! The terminal summary `calibrate` prints.

use std::fmt::Write as _;

use crate::calibrate::CAUTION;

use super::RunContext;
use super::coefficients::wrap;
use super::sections;

/// Aligned tables in the network's units, ending with the caution (and the NOT CONVERGED line first
/// when the optimizer did not settle).
pub fn text_summary(run: &RunContext<'_>) -> String {
    let result = run.result;
    let unit = run.network.units.pressure_label();
    let mut out = String::new();
    let _ = writeln!(
        out,
        "calibration of {} against {}",
        run.network_file, run.sheet_file
    );
    let _ = writeln!(out, "  fit: {}", sections::fit_target(result.fit));
    let _ = writeln!(out, "  {}", sections::settings_line(run));
    let _ = writeln!(
        out,
        "  tests: {} used, {} excluded",
        run.tests.len(),
        run.excluded.len()
    );
    for excluded in run.excluded {
        let word = if excluded.left_out {
            "left out"
        } else {
            "excluded"
        };
        let _ = writeln!(
            out,
            "    {word} {} (line {}): {}",
            excluded.test_id, excluded.line, excluded.reason
        );
    }
    for warning in sections::warning_lines(run) {
        let _ = writeln!(out, "    warning (kept in the fit) {warning}");
    }
    let _ = writeln!(out, "  optimizer: {}", sections::optimizer_line(result));
    let _ = writeln!(out);
    let _ = writeln!(out, "Roughness groups (Hazen-Williams C)");
    out.push_str(&sections::group_table(result).text("  "));
    for line in sections::not_informed_lines(result) {
        let _ = writeln!(out, "  not informed: {line}");
    }
    if let Some(table) = sections::correlation_table(result) {
        let _ = writeln!(out);
        let _ = writeln!(out, "Correlation of the fitted C");
        out.push_str(&table.text("  "));
    }
    for warning in sections::correlation_warnings(result) {
        let _ = writeln!(out, "  warning: {warning}");
    }
    let _ = writeln!(out);
    let _ = writeln!(out, "Fit statistics ({})", result.fit.label());
    out.push_str(&sections::statistics_table(result, run.network.units).text("  "));
    let _ = writeln!(out);
    if let Some(caution) = sections::misfit_caution(run) {
        for line in wrap(&format!("  caution: {caution}"), 100) {
            let _ = writeln!(out, "{line}");
        }
        let _ = writeln!(out);
    }
    let _ = writeln!(out, "Per test ({unit})");
    out.push_str(&sections::per_test_table(result).text("  "));
    let _ = writeln!(out);
    let _ = writeln!(out, "{}", sections::fire_flow_heading(run));
    out.push_str(&sections::fire_flow_table(run).text("  "));
    let _ = writeln!(out);
    if !result.converged {
        let _ = writeln!(out, "{}", sections::not_converged_line(result));
    }
    for line in wrap(&format!("Caution: {CAUTION}"), 100) {
        let _ = writeln!(out, "{line}");
    }
    out
}
