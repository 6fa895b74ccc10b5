//! The tables and sentences that both the terminal summary and the written report show, built once.

use crate::calibrate::{CalibrationResult, CalibrationTest, FitStatistics, FitTarget, GroupStatus};
use crate::fieldtest::fireflow::available_flow;
use crate::network::UnitSystem;

use super::RunContext;
use super::table::{Align, TextTable};

/// A C-factor as shown in tables.
pub fn c(value: f64) -> String {
    format!("{value:.1}")
}

/// A pressure in the network's units as shown in tables.
pub fn pressure(value: f64) -> String {
    format!("{value:.1}")
}

/// A share 0..1 as a percentage.
pub fn share(value: f64) -> String {
    format!("{:.0} %", value * 100.0)
}

/// The fit target in words.
pub fn fit_target(fit: FitTarget) -> &'static str {
    match fit {
        FitTarget::Pressures => "pressures (static and residual readings at each residual hydrant)",
        FitTarget::Drop => "pressure drop (static minus residual at each residual hydrant)",
    }
}

/// Gauge accuracy and prior, in the network's pressure units.
pub fn settings_line(run: &RunContext<'_>) -> String {
    let units = run.network.units;
    let prior = match run.options.prior_sd_c {
        Some(sd) => format!("C held near its start value with a standard deviation of {sd}"),
        None => "none".to_string(),
    };
    format!(
        "gauge accuracy {} {} (one standard deviation); prior: {prior}",
        pressure(units.pressure_from_head_m(run.options.gauge_sd_m)),
        units.pressure_label()
    )
}

/// "converged after 7 iterations (reason)" or the NOT CONVERGED warning.
pub fn optimizer_line(result: &CalibrationResult) -> String {
    let count = result.iterations.len();
    let plural = if count == 1 { "" } else { "s" };
    if result.converged {
        format!(
            "converged after {count} iteration{plural} ({})",
            result.termination
        )
    } else {
        not_converged_line(result)
    }
}

/// The line that says a run must not be used.
pub fn not_converged_line(result: &CalibrationResult) -> String {
    format!(
        "NOT CONVERGED: the optimizer stopped after {} iterations without settling ({}); the C-factors \
         below are not a fit and must not be used",
        result.iterations.len(),
        result.termination
    )
}

/// One row per group: pipes, start, fitted, standard error, 95 % interval, tests informing, status.
pub fn group_table(result: &CalibrationResult) -> TextTable {
    let mut table = TextTable::new(&[
        ("group", Align::Left),
        ("pipes", Align::Right),
        ("start C", Align::Right),
        ("fitted C", Align::Right),
        ("std error", Align::Right),
        ("95 % interval", Align::Right),
        ("tests", Align::Right),
        ("status", Align::Left),
    ]);
    for group in &result.groups {
        table.row(vec![
            group.name.clone(),
            group.pipe_count.to_string(),
            c(group.start_c),
            c(group.fitted_c),
            group.std_error.map_or_else(|| "-".into(), c),
            group
                .ci95
                .map_or_else(|| "-".into(), |(lo, hi)| format!("{} to {}", c(lo), c(hi))),
            group.tests_informing.to_string(),
            group.status.label().to_string(),
        ]);
    }
    table
}

/// Before and after side by side: count, mean error, RMSE, largest error, the two shares within.
pub fn statistics_table(result: &CalibrationResult, units: UnitSystem) -> TextTable {
    let unit = units.pressure_label();
    let mut table = TextTable::new(&[
        ("measured minus modelled", Align::Left),
        ("before", Align::Right),
        ("after", Align::Right),
    ]);
    type Cell = fn(&FitStatistics) -> String;
    let rows: [(String, Cell); 6] = [
        ("readings".into(), |s| s.n.to_string()),
        (format!("mean error ({unit})"), |s| pressure(s.mean_error)),
        (format!("RMSE ({unit})"), |s| pressure(s.rmse)),
        (format!("largest |error| ({unit})"), |s| {
            pressure(s.max_abs_error)
        }),
        (
            format!("within {} {unit}", pressure(result.after.within_tight)),
            |s| share(s.share_within_tight),
        ),
        (
            format!("within {} {unit}", pressure(result.after.within_loose)),
            |s| share(s.share_within_loose),
        ),
    ];
    for (label, value) in rows {
        table.row(vec![label, value(&result.before), value(&result.after)]);
    }
    table
}

/// Measured and modelled pressures of every test, before and after, and its RMSE.
pub fn per_test_table(result: &CalibrationResult) -> TextTable {
    let mut table = TextTable::new(&[
        ("test", Align::Left),
        ("static", Align::Right),
        ("model before", Align::Right),
        ("model after", Align::Right),
        ("residual", Align::Right),
        ("model before", Align::Right),
        ("model after", Align::Right),
        ("RMSE before", Align::Right),
        ("RMSE after", Align::Right),
    ]);
    for test in &result.tests {
        table.row(vec![
            test.id.clone(),
            pressure(test.measured_static),
            pressure(test.modelled_static_before),
            pressure(test.modelled_static_after),
            pressure(test.measured_residual),
            pressure(test.modelled_residual_before),
            pressure(test.modelled_residual_after),
            pressure(test.before.rmse),
            pressure(test.after.rmse),
        ]);
    }
    table
}

/// A flow in the network's units as shown in tables.
pub fn flow(value: f64) -> String {
    format!("{value:.0}")
}

/// The heading of the fire-flow table: target residual and units.
pub fn fire_flow_heading(run: &RunContext<'_>) -> String {
    let units = run.network.units;
    format!(
        "Fire flow at {:.0} {} residual ({}): field readings (NFPA 291), model before and after the fit, \
         95 % interval from the C covariance",
        run.options.target_residual_m * units.pressure_per_head_m(),
        units.pressure_label(),
        run.network.flows().label()
    )
}

/// Fire flow at the target residual per test: from the field readings (NFPA 291), from the model
/// before and after the fit, and the after value's first-order 95 % interval.
pub fn fire_flow_table(run: &RunContext<'_>) -> TextTable {
    let result = run.result;
    let mut table = TextTable::new(&[
        ("test", Align::Left),
        ("field", Align::Right),
        ("model before", Align::Right),
        ("model after", Align::Right),
        ("std error", Align::Right),
        ("95 % low", Align::Right),
        ("95 % high", Align::Right),
    ]);
    let cell = |v: Option<f64>| v.map_or_else(|| "-".to_string(), flow);
    for (i, estimate) in result.fire_flow.iter().enumerate() {
        let field = run.tests.get(i).and_then(|t| field_available_flow(run, t));
        let before = result.fire_flow_before.get(i).and_then(|f| f.flow);
        table.row(vec![
            estimate.test_id.clone(),
            cell(field),
            cell(before),
            cell(estimate.flow),
            cell(estimate.std_error),
            cell(estimate.ci95.map(|ci| ci.0)),
            cell(estimate.ci95.map(|ci| ci.1)),
        ]);
    }
    table
}

/// The flow a test's own readings say is available at the run's target residual, in the network's flow
/// unit: `Q_R = Q_F ((S - T) / (S - R))^0.54` (NFPA 291); 0 when the target is not below the static,
/// `None` when the test cannot be extrapolated.
pub fn field_available_flow(run: &RunContext<'_>, test: &CalibrationTest) -> Option<f64> {
    let units = run.network.units;
    let total_m3s: f64 = test.hydrant_flows_m3s.iter().map(|h| h.1).sum();
    available_flow(
        units.flow_from_m3s(total_m3s),
        units.pressure_from_head_m(test.static_head_m),
        units.pressure_from_head_m(test.residual_head_m),
        units.pressure_from_head_m(run.options.target_residual_m),
    )
    .value()
}

/// Misfit ratio above which the fit says the gauge accuracy does not explain the misfit (reduced
/// chi-square; about 1 for a model and readings that agree within the gauge accuracy; common practice,
/// no source).
pub const MISFIT_RATIO_LIMIT: f64 = 2.0;

/// A standardised residual beyond this many standard deviations is flagged as a likely reading or
/// model error (about a 0.3 % chance for a normal error; common practice, no source).
pub const STANDARDISED_RESIDUAL_LIMIT: f64 = 3.0;

/// How many tests the misfit caution names.
const MISFIT_NAMED_TESTS: usize = 3;

/// The standardised residuals of test `i` after the fit: measured minus modelled over its standard
/// deviation (the gauge accuracy; sqrt 2 times it for a drop), as the fit weights them, by reading
/// (`static`, `residual` or `drop`).
pub fn standardised_residuals(run: &RunContext<'_>, i: usize) -> Vec<(&'static str, f64)> {
    let Some(t) = run.result.tests.get(i) else {
        return Vec::new();
    };
    let sd = run
        .network
        .units
        .pressure_from_head_m(run.options.gauge_sd_m);
    match run.result.fit {
        FitTarget::Pressures => vec![
            ("static", (t.measured_static - t.modelled_static_after) / sd),
            (
                "residual",
                (t.measured_residual - t.modelled_residual_after) / sd,
            ),
        ],
        FitTarget::Drop => {
            let measured = t.measured_static - t.measured_residual;
            let modelled = t.modelled_static_after - t.modelled_residual_after;
            vec![(
                "drop",
                (measured - modelled) / (sd * std::f64::consts::SQRT_2),
            )]
        }
    }
}

/// When the misfit ratio (reduced chi-square) exceeds [`MISFIT_RATIO_LIMIT`]: a caution naming the
/// tests with the largest standardised residuals, those beyond [`STANDARDISED_RESIDUAL_LIMIT`]
/// flagged as likely reading or model errors. `None` when the fit is within the limit.
pub fn misfit_caution(run: &RunContext<'_>) -> Option<String> {
    let ratio = run.result.reduced_chi_square?;
    if ratio <= MISFIT_RATIO_LIMIT {
        return None;
    }
    let mut largest: Vec<(&str, &'static str, f64)> = run
        .result
        .tests
        .iter()
        .enumerate()
        .filter_map(|(i, t)| {
            standardised_residuals(run, i)
                .into_iter()
                .max_by(|a, b| a.1.abs().total_cmp(&b.1.abs()))
                .map(|(reading, r)| (t.id.as_str(), reading, r))
        })
        .collect();
    largest.sort_by(|a, b| b.2.abs().total_cmp(&a.2.abs()));
    let named: Vec<String> = largest
        .iter()
        .take(MISFIT_NAMED_TESTS)
        .map(|(id, reading, r)| {
            let flag = if r.abs() > STANDARDISED_RESIDUAL_LIMIT {
                ": likely a reading or model error"
            } else {
                ""
            };
            format!("{id} ({reading} {r:+.1}{flag})")
        })
        .collect();
    Some(format!(
        "misfit ratio {ratio:.1} is above {MISFIT_RATIO_LIMIT}: the gauge accuracy does not explain the \
         misfit; largest standardised residuals: {}; check those readings and the model around them \
         before using the fit",
        named.join(", ")
    ))
}

/// The correlation matrix of the groups fitted inside their bounds, when there are two or more.
pub fn correlation_table(result: &CalibrationResult) -> Option<TextTable> {
    if result.correlation_groups.len() < 2 {
        return None;
    }
    let mut columns = vec![("", Align::Left)];
    columns.extend(
        result
            .correlation_groups
            .iter()
            .map(|name| (name.as_str(), Align::Right)),
    );
    let mut table = TextTable::new(&columns);
    for (name, row) in result.correlation_groups.iter().zip(&result.correlation) {
        let mut cells = vec![name.clone()];
        cells.extend(row.iter().map(|r| format!("{r:.2}")));
        table.row(cells);
    }
    Some(table)
}

/// One warning per pair of groups the tests cannot tell apart (|correlation| > 0.9).
pub fn correlation_warnings(result: &CalibrationResult) -> Vec<String> {
    result
        .strongly_correlated
        .iter()
        .map(|(a, b, r)| {
            format!(
                "{a} and {b} are correlated at {r:.2}: the tests cannot tell their C apart; a test \
                 that loads one group without the other would separate them"
            )
        })
        .collect()
}

/// One line per group no test informs, naming where a test would stress it.
pub fn not_informed_lines(result: &CalibrationResult) -> Vec<String> {
    result
        .groups
        .iter()
        .filter(|g| g.status == GroupStatus::NotInformed)
        .map(|g| {
            let nodes = if g.suggested_test_nodes.is_empty() {
                "no junction found on its pipes".to_string()
            } else {
                format!(
                    "a test at {} would stress it",
                    g.suggested_test_nodes.join(", ")
                )
            };
            format!(
                "{}: no test moves its pipes enough to fit it; C kept at {}; {nodes}",
                g.name,
                c(g.fitted_c)
            )
        })
        .collect()
}

/// Tests used: residual junction, flowing hydrants and their flow, condition.
pub fn used_tests_table(
    run: &RunContext<'_>,
    dates: Option<&std::collections::BTreeMap<String, String>>,
) -> TextTable {
    let net = run.network;
    let flows = net.flows();
    let mut table = TextTable::new(&[
        ("test", Align::Left),
        ("date", Align::Left),
        ("residual hydrant", Align::Left),
        ("flow hydrants", Align::Left),
        (&format!("flow ({})", flows.label()), Align::Right),
        ("condition", Align::Left),
    ]);
    for test in run.tests {
        let junction = |j: usize| net.junctions.get(j).map_or("?", |x| x.id.as_str());
        let flowing: Vec<&str> = test
            .hydrant_flows_m3s
            .iter()
            .map(|h| junction(h.0))
            .collect();
        let flow: f64 = test.hydrant_flows_m3s.iter().map(|h| h.1).sum();
        table.row(vec![
            test.id.clone(),
            dates
                .and_then(|d| d.get(&test.id))
                .filter(|d| !d.trim().is_empty())
                .cloned()
                .unwrap_or_else(|| "-".to_string()),
            junction(test.residual_junction).to_string(),
            flowing.join(", "),
            format!("{:.0}", flows.from_m3s(flow)),
            test.condition
                .and_then(|c| net.conditions.get(c))
                .map_or_else(|| "base".to_string(), |c| c.name.clone()),
        ]);
    }
    table
}

/// The screening warnings of the tests the fit used, one line each (`TEST: column: reason`): a warning
/// keeps a test in the fit, flagged for review.
pub fn warning_lines(run: &RunContext<'_>) -> Vec<String> {
    run.tests
        .iter()
        .zip(run.warnings)
        .flat_map(|(test, warnings)| {
            warnings
                .iter()
                .map(move |w| format!("{}: {}: {}", test.id, w.column, w.reason))
        })
        .collect()
}
