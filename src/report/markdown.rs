//! `report.md`: the written record of a calibration run.

use std::fmt::Write as _;

use crate::calibrate::{CAUTION, INFORMED_C_CHANGE};

use super::sections;
use super::table::{Align, TextTable};
use super::{Provenance, RunContext, VERSION, count_of};

/// The whole report: caution first, then inputs and method, groups, correlation, statistics before and
/// after (overall and per test), groups no test informs, and the optimizer's iterations.
pub fn report_markdown(run: &RunContext<'_>) -> String {
    report(run, None)
}

/// The report as a deliverable: as [`report_markdown`], with the run date, the inputs' SHA-256 and the
/// test dates from `provenance`.
pub fn report_markdown_delivered(run: &RunContext<'_>, provenance: &Provenance) -> String {
    report(run, Some(provenance))
}

fn report(run: &RunContext<'_>, provenance: Option<&Provenance>) -> String {
    let result = run.result;
    let units = run.network.units;
    let unit = units.pressure_label();
    let mut out = String::new();
    let title = if run.network.title.is_empty() {
        run.network_file
    } else {
        run.network.title.as_str()
    };
    if result.converged {
        let _ = writeln!(out, "# Roughness calibration: {title}\n");
    } else {
        let _ = writeln!(out, "# NOT CONVERGED: roughness calibration: {title}\n");
        let _ = writeln!(out, "> **{}.**\n", sections::not_converged_line(result));
    }
    if let Some(answer) = run.out_of_date {
        let _ = writeln!(out, "> **Fit out of date.** {answer}\n");
    }
    let _ = writeln!(out, "> **Caution.** {CAUTION}\n");

    let _ = writeln!(out, "## What was fitted and how\n");
    let run_date = provenance
        .map(|p| p.run_date.as_str())
        .filter(|d| !d.is_empty())
        .unwrap_or("not recorded");
    let _ = writeln!(out, "- Run: {run_date}, roughcal {VERSION}");
    let hash = |h: Option<&String>| h.map_or_else(String::new, |h| format!(", SHA-256 `{h}`"));
    let _ = writeln!(
        out,
        "- Network: `{}`{}",
        run.network_file,
        hash(provenance.and_then(|p| p.network_sha256.as_ref()))
    );
    let _ = writeln!(
        out,
        "- Field sheet: `{}`{}",
        run.sheet_file,
        hash(provenance.and_then(|p| p.sheet_sha256.as_ref()))
    );
    let _ = writeln!(
        out,
        "- Units: {} (pressures in {unit}, flows in {})",
        units.key(),
        run.network.flows().label()
    );
    let _ = writeln!(out, "- Fit target: {}", sections::fit_target(result.fit));
    let _ = writeln!(out, "- Settings: {}", sections::settings_line(run));
    let _ = writeln!(
        out,
        "- A group counts as informed by a test when a change of {INFORMED_C_CHANGE} in its C moves \
         one of the test's fitted readings by at least {} gauge standard deviations.",
        run.options.informed_response_sd
    );
    let _ = writeln!(
        out,
        "- Optimizer: Gauss-Newton with a backtracking line search, each C kept inside its group's \
         bounds; {} (limit {} iterations).",
        sections::optimizer_line(result),
        run.options.max_iterations
    );
    if let Some(chi) = result.reduced_chi_square {
        let _ = writeln!(
            out,
            "- Reduced chi-square at the solution: {chi:.2} (about 1 when the gauge accuracy explains \
             the remaining misfit; larger values widen the standard errors accordingly)."
        );
    }
    let _ = writeln!(out);

    let _ = writeln!(out, "## Tests\n");
    let _ = writeln!(out, "{} used:\n", count_of(run.tests.len(), "test"));
    out.push_str(&sections::used_tests_table(run, provenance.map(|p| &p.test_dates)).markdown());
    let _ = writeln!(out);
    let warnings = sections::warning_lines(run);
    if !warnings.is_empty() {
        let _ = writeln!(
            out,
            "Screening warnings of the tests used (a warning keeps a test in the fit; review them):\n"
        );
        for warning in &warnings {
            let _ = writeln!(out, "- {warning}");
        }
        let _ = writeln!(out);
    }
    let (left_out, screened): (Vec<_>, Vec<_>) = run.excluded.iter().partition(|e| e.left_out);
    if !left_out.is_empty() {
        let _ = writeln!(
            out,
            "{} left out on the sheet (`use` = no), by choice:\n",
            count_of(left_out.len(), "test")
        );
        out.push_str(&excluded_table(&left_out).markdown());
        let _ = writeln!(out);
    }
    if screened.is_empty() {
        let _ = writeln!(out, "No test was screened out.\n");
    } else {
        let _ = writeln!(
            out,
            "{} screened out (an error finding):\n",
            count_of(screened.len(), "test")
        );
        out.push_str(&excluded_table(&screened).markdown());
        let _ = writeln!(out);
    }

    let _ = writeln!(out, "## Roughness groups (Hazen-Williams C)\n");
    out.push_str(&sections::group_table(result).markdown());
    let _ = writeln!(
        out,
        "\nThe 95 % interval is the fitted value plus or minus 1.96 standard errors (normal \
         approximation), clipped to the group's bounds.\n"
    );

    let _ = writeln!(out, "## Correlation of the fitted C\n");
    match sections::correlation_table(result) {
        Some(table) => {
            out.push_str(&table.markdown());
            let _ = writeln!(out);
        }
        None => {
            let _ = writeln!(
                out,
                "Fewer than two groups were fitted inside their bounds: no correlation to show.\n"
            );
        }
    }
    for warning in sections::correlation_warnings(result) {
        let _ = writeln!(out, "- **Warning:** {warning}");
    }
    if !result.strongly_correlated.is_empty() {
        let _ = writeln!(out);
    }

    let _ = writeln!(out, "## Fit before and after\n");
    out.push_str(&sections::statistics_table(result, units).markdown());
    if let Some(caution) = sections::misfit_caution(run) {
        let _ = writeln!(out, "\n> **Caution:** {caution}");
    }
    let _ = writeln!(out, "\n### Per test ({unit})\n");
    out.push_str(&sections::per_test_table(result).markdown());
    let _ = writeln!(out);

    let _ = writeln!(out, "## {}\n", sections::fire_flow_heading(run));
    out.push_str(&sections::fire_flow_table(run).markdown());
    let _ = writeln!(
        out,
        "\nField: the test's own flow extrapolated to the target from its static and residual readings, \
         Q_R = Q_F ((S - T) / (S - R))^0.54 (NFPA 291). Model: the model's total hydrant flow (split as in the test) at which the modelled residual at the \
         gauge falls to the target, with the fitted C. The interval is first order (the delta method): \
         the flow's sensitivity to each group's C, from the same adjoint solves as the fit, through the \
         covariance of the fitted C; plus or minus 1.96 standard errors. It covers the C uncertainty \
         only, not errors of the model's layout, demands or boundary grades.\n\n> **Caution.** {CAUTION}\n"
    );

    let not_informed = sections::not_informed_lines(result);
    let _ = writeln!(out, "## Groups no test informs\n");
    if not_informed.is_empty() {
        let _ = writeln!(
            out,
            "Every unlocked group was informed by at least one test.\n"
        );
    } else {
        for line in not_informed {
            let _ = writeln!(out, "- {line}");
        }
        let _ = writeln!(out);
    }

    if !result.iterations.is_empty() {
        let _ = writeln!(out, "## Optimizer iterations\n");
        let mut table = TextTable::new(&[
            ("iteration", Align::Right),
            ("objective", Align::Right),
            ("largest C step", Align::Right),
        ]);
        for it in &result.iterations {
            table.row(vec![
                it.iteration.to_string(),
                format!("{:.4}", it.objective),
                format!("{:.3}", it.step_c),
            ]);
        }
        out.push_str(&table.markdown());
        let _ = writeln!(out);
    }

    let _ = writeln!(out, "## Review\n");
    let _ = writeln!(
        out,
        "To be completed by the reviewing engineer before the results are used.\n\n\
         - Reviewing engineer: ______________________________\n\
         - Licence number: ______________________________\n\
         - Date: ______________________________\n\
         - Signature: ______________________________\n"
    );
    let _ = writeln!(out, "---\n\n**Caution.** {CAUTION}");
    out
}

/// Test, sheet line and reason of each test not used.
fn excluded_table(excluded: &[&super::ExcludedTest]) -> TextTable {
    let mut table = TextTable::new(&[
        ("test", Align::Left),
        ("sheet line", Align::Right),
        ("reason", Align::Left),
    ]);
    for e in excluded {
        table.row(vec![
            e.test_id.clone(),
            e.line.to_string(),
            e.reason.clone(),
        ]);
    }
    table
}
