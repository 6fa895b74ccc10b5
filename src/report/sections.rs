//! The tables and sentences that both the terminal summary and the written report show, built once.

use crate::calibrate::{CalibrationResult, FitStatistics, FitTarget, GroupStatus};
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
        "Model fire flow after the fit at {:.0} {} residual ({}, 95 % interval from the C covariance)",
        run.options.target_residual_m * units.pressure_per_head_m(),
        units.pressure_label(),
        run.network.flows().label()
    )
}

/// The model's flow available at the target residual at each tested hydrant, after the fit, with
/// its first-order 95 % interval.
pub fn fire_flow_table(result: &CalibrationResult) -> TextTable {
    let mut table = TextTable::new(&[
        ("test", Align::Left),
        ("available flow", Align::Right),
        ("std error", Align::Right),
        ("95 % low", Align::Right),
        ("95 % high", Align::Right),
    ]);
    let cell = |v: Option<f64>| v.map_or_else(|| "-".to_string(), flow);
    for estimate in &result.fire_flow {
        table.row(vec![
            estimate.test_id.clone(),
            cell(estimate.flow),
            cell(estimate.std_error),
            cell(estimate.ci95.map(|ci| ci.0)),
            cell(estimate.ci95.map(|ci| ci.1)),
        ]);
    }
    table
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
pub fn used_tests_table(run: &RunContext<'_>) -> TextTable {
    let net = run.network;
    let flows = net.flows();
    let mut table = TextTable::new(&[
        ("test", Align::Left),
        ("residual hydrant", Align::Left),
        ("flowing", Align::Left),
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
