//! The machine-readable summary `calibrate --json` prints.

use serde_json::{Value, json};

use crate::calibrate::{CAUTION, FitStatistics};

use super::RunContext;
use super::sections::{self, field_available_flow};
use crate::hydraulics::ValveState;
use crate::network::Network;

/// The valves of one solved state as `{id, state, flow, head_loss}`, the shape of `solve --json`'s
/// `valves`: `flow` and `head_loss` through the caller's conversions from m^3/s and m (the network's
/// units in the calibration report, the sheet's in `tests`); `head_loss` is null where an end is
/// isolated.
pub fn valve_states_json(
    net: &Network,
    states: &[ValveState],
    flow_from_m3s: impl Fn(f64) -> f64,
    length_from_m: impl Fn(f64) -> f64,
) -> Value {
    states
        .iter()
        .map(|v| {
            json!({
                "id": net.valves.get(v.valve).map(|valve| valve.id.as_str()),
                "state": v.status.label(),
                "flow": flow_from_m3s(v.flow_m3s),
                "head_loss": v.head_loss_m.map(&length_from_m),
            })
        })
        .collect()
}

fn statistics(s: &FitStatistics) -> Value {
    json!({
        "n": s.n,
        "mean_error": s.mean_error,
        "rmse": s.rmse,
        "max_abs_error": s.max_abs_error,
        "share_within": {
            "tight": s.within_tight,
            "loose": s.within_loose,
            "share_tight": s.share_within_tight,
            "share_loose": s.share_within_loose,
        },
    })
}

/// `{"groups": [...], "before": {...}, "after": {...}, "tests": [...]}` plus run details; pressures in
/// the network's units.
pub fn json_summary(run: &RunContext<'_>) -> Value {
    let result = run.result;
    let groups: Vec<Value> = result
        .groups
        .iter()
        .map(|g| {
            json!({
                "name": g.name,
                "start": g.start_c,
                "fitted": g.fitted_c,
                "std_error": g.std_error,
                "status": g.status.label(),
                "ci_low": g.ci95.map(|ci| ci.0),
                "ci_high": g.ci95.map(|ci| ci.1),
                "min": g.min_c,
                "max": g.max_c,
                "pipes": g.pipe_count,
                "tests_informing": g.tests_informing,
                "suggested_test_nodes": g.suggested_test_nodes,
            })
        })
        .collect();
    let net = run.network;
    let valves = |states: &[ValveState]| {
        valve_states_json(
            net,
            states,
            |q| net.flows().from_m3s(q),
            |h| net.units.length_from_m(h),
        )
    };
    let tests: Vec<Value> = result
        .tests
        .iter()
        .enumerate()
        .map(|(i, t)| {
            let warnings: Vec<Value> = run
                .warnings
                .get(i)
                .map(|w| w.as_slice())
                .unwrap_or_default()
                .iter()
                .map(|w| json!({"rule": w.rule.key(), "column": w.column, "reason": w.reason}))
                .collect();
            let fire_flow = result.fire_flow.get(i);
            let before = result.fire_flow_before.get(i);
            let field = run.tests.get(i).and_then(|t| field_available_flow(run, t));
            let residuals = sections::standardised_residuals(run, i);
            json!({
                "test": t.id,
                "warnings": warnings,
                "field_available_flow": field,
                "model_available_flow_before": before.and_then(|f| f.flow),
                "model_available_flow_after": fire_flow.and_then(|f| f.flow),
                "model_available_flow_std_error": fire_flow.and_then(|f| f.std_error),
                "model_available_flow_ci": fire_flow.and_then(|f| f.ci95).map(|(lo, hi)| [lo, hi]),
                "measured_residual": t.measured_residual,
                "modelled_before": t.modelled_residual_before,
                "modelled_after": t.modelled_residual_after,
                "measured_static": t.measured_static,
                "modelled_static_before": t.modelled_static_before,
                "modelled_static_after": t.modelled_static_after,
                "rmse_before": t.before.rmse,
                "rmse_after": t.after.rmse,
                "valves_static_after": valves(&t.valves_static_after),
                "valves_residual_after": valves(&t.valves_residual_after),
                "standardised_residuals": residuals,
            })
        })
        .collect();
    let strongly: Vec<Value> = result
        .strongly_correlated
        .iter()
        .map(|(a, b, r)| json!({"groups": [a, b], "correlation": r}))
        .collect();
    let excluded: Vec<Value> = run
        .excluded
        .iter()
        .map(|e| json!({"test": e.test_id, "data_row": e.row + 1, "line": e.line, "reason": e.reason, "left_out": e.left_out}))
        .collect();
    json!({
        "groups": groups,
        "before": statistics(&result.before),
        "after": statistics(&result.after),
        "tests": tests,
        "units": run.network.unit_labels(),
        "fire_flow_target": run.options.target_residual_m * run.network.units.pressure_per_head_m(),
        "fit": result.fit.label(),
        "converged": result.converged,
        "termination": result.termination,
        "iterations": result.iterations.len(),
        "reduced_chi_square": result.reduced_chi_square,
        "correlation": {
            "groups": result.correlation_groups,
            "matrix": result.correlation,
            "strongly_correlated": strongly,
        },
        "excluded": excluded,
        "misfit_caution": sections::misfit_caution(run),
        "caution": CAUTION,
    })
}
