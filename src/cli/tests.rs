//! `roughcal tests NETWORK SHEET [--target T] [--json]`: every field test next to the model.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::Path;
use std::process::ExitCode;

use anyhow::bail;
use roughcal::calibrate::fireflow::fire_flow_estimates;
use roughcal::fieldtest::{
    AvailableFlow, ModelComparison, Severity, SheetReading, calibration_input, compare_with_model,
    default_target, load_sheet, screen_sheet,
};
use roughcal::hydraulics::ValveState;
use roughcal::network::file::load_network_file;
use roughcal::network::{Network, UnitSystem};
use roughcal::report::load_coefficients;
use roughcal::report::table::{Align, TextTable};
use roughcal::report::valve_states_json;
use serde_json::json;

use super::fireflow::finding_json;
use super::network_or_report;
use roughcal::calibrate::CAUTION;

pub fn run(
    network_path: &Path,
    sheet_path: &Path,
    target: Option<f64>,
    coefficients: Option<&Path>,
    json: bool,
) -> anyhow::Result<ExitCode> {
    let Some(loaded) = network_or_report(network_path, load_network_file(network_path))? else {
        return Ok(ExitCode::from(1));
    };
    let sheet = match load_sheet(sheet_path) {
        Ok(sheet) => sheet,
        Err(error) => {
            eprintln!("roughcal: {error}");
            return Ok(ExitCode::from(1));
        }
    };
    let units = sheet.units();
    let target = target.unwrap_or_else(|| default_target(units));
    if !target.is_finite() || target < 0.0 {
        bail!("--target must be a pressure of zero or more, not {target}");
    }
    let net = &loaded.network;
    let reading = screen_sheet(&sheet, Some(net));
    let comparisons = compare_with_model(net, &reading, target)?;
    let intervals = match coefficients {
        Some(path) => intervals(net, &reading, path, units.pressure_to_head_m(target))?,
        None => BTreeMap::new(),
    };
    let interval = |id: &str| intervals.get(id).copied();
    if json {
        let tests: Vec<_> = comparisons
            .iter()
            .map(|c| {
                json!({
                    "test": c.test_id,
                    "line": c.line,
                    "read_as_test": c.read,
                    "residual_node": c.residual_node,
                    "measured_static": c.measured_static,
                    "measured_residual": c.measured_residual,
                    "modelled_static": c.modelled_static,
                    "modelled_residual": c.modelled_residual,
                    "static_error": c.static_error(),
                    "residual_error": c.residual_error(),
                    "measured_drop": c.measured_drop(),
                    "modelled_drop": c.modelled_drop(),
                    "total_flow": c.total_flow,
                    "field_available_flow": c.field_available.value(),
                    "model_available_flow": c.model_available,
                    "model_available_flow_ci": interval(&c.test_id).map(|(lo, hi)| [lo, hi]),
                    "use": !reading.is_left_out(c.row),
                    "usable": c.read
                        && !c.has_error()
                        && !c.gauge_isolated_in_model
                        && !reading.is_left_out(c.row),
                    "negative_pressure_in_model": c.negative_pressure_somewhere,
                    "gauge_isolated_in_model": c.gauge_isolated_in_model,
                    "findings": c.findings.iter().map(finding_json).collect::<Vec<_>>(),
                    "valves_static": valves_json(net, units, &c.valves_static),
                    "valves_residual": valves_json(net, units, &c.valves_residual),
                })
            })
            .collect();
        let out = json!({
            "target": target,
            "units": units.labels(),
            "caution": CAUTION,
            "tests": tests,
        });
        println!("{}", serde_json::to_string_pretty(&out)?);
    } else {
        print!(
            "{}",
            table(
                &comparisons,
                &|row| reading.is_left_out(row),
                &interval,
                target,
                units.pressure_label(),
                units.flow_label()
            )
        );
        if !net.valves.is_empty() {
            print!("{}", valve_table(net, units, &comparisons));
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// The valves of one modelled state, flow in the sheet's flow unit and head loss in its length unit.
fn valves_json(net: &Network, units: UnitSystem, states: &[ValveState]) -> serde_json::Value {
    valve_states_json(
        net,
        states,
        |q| units.flow_from_m3s(q),
        |h| units.length_from_m(h),
    )
}

/// Every valve in every modelled test, static and flowing: a valve that opens, closes or starts to
/// regulate when the hydrant flows changes the drop the gauge sees.
fn valve_table(net: &Network, units: UnitSystem, rows: &[ModelComparison]) -> String {
    let flow = units.flow_label();
    let length = units.length_label();
    let mut table = TextTable::new(&[
        ("test", Align::Left),
        ("valve", Align::Left),
        ("static", Align::Left),
        ("flowing", Align::Left),
        (&format!("q {flow}"), Align::Right),
        (&format!("loss {length}"), Align::Right),
    ]);
    if rows.iter().all(|c| c.valves_residual.is_empty()) {
        return String::new();
    }
    for c in rows {
        for (still, flowing) in c.valves_static.iter().zip(&c.valves_residual) {
            table.row(vec![
                c.test_id.clone(),
                net.valves[flowing.valve].id.clone(),
                still.status.label().to_string(),
                flowing.status.label().to_string(),
                format!("{:.2}", units.flow_from_m3s(flowing.flow_m3s)),
                number(flowing.head_loss_m.map(|h| units.length_from_m(h)), 2),
            ]);
        }
    }
    format!(
        "\nControl valves in each modelled test (state static and flowing; flow and head loss while flowing)\n{}",
        table.text("")
    )
}

/// The 95 % interval of each usable test's model available flow (network flow unit), by test id,
/// propagated to first order from the covariance in the coefficient set (the delta method, as in
/// `calibrate`).
fn intervals(
    net: &Network,
    reading: &SheetReading,
    path: &Path,
    target_head_m: f64,
) -> anyhow::Result<BTreeMap<String, (f64, f64)>> {
    let set = load_coefficients(path)?;
    let Some(covariance) = set.covariance else {
        bail!(
            "{}: no [covariance] to give intervals with; use the coefficients.toml that `calibrate --out` wrote",
            path.display()
        );
    };
    let mut group_pipes = Vec::with_capacity(covariance.groups.len());
    for name in &covariance.groups {
        let Some(g) = net.groups.iter().position(|g| &g.name == name) else {
            bail!(
                "{}: [covariance] names group `{name}`, which the network does not have",
                path.display()
            );
        };
        group_pipes.push(
            net.pipes
                .iter()
                .enumerate()
                .filter(|(_, p)| p.group == Some(g))
                .map(|(k, _)| k)
                .collect(),
        );
    }
    let input = calibration_input(net, reading);
    let estimates = fire_flow_estimates(
        net,
        &input.tests,
        &net.c_factors(),
        &group_pipes,
        &covariance.matrix,
        target_head_m,
    )?;
    Ok(estimates
        .into_iter()
        .filter_map(|e| e.ci95.map(|ci| (e.test_id, ci)))
        .collect())
}

fn number(value: Option<f64>, decimals: usize) -> String {
    value.map_or_else(|| "-".into(), |v| format!("{v:.decimals$}"))
}

fn table(
    rows: &[ModelComparison],
    left_out: &dyn Fn(usize) -> bool,
    interval: &dyn Fn(&str) -> Option<(f64, f64)>,
    target: f64,
    pressure: &str,
    flow: &str,
) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "Field tests against the model (pressures {pressure}, flows {flow}; available flow at {target} {pressure})\n"
    );
    let p = |name: &str| format!("{name} ({pressure})");
    let q = |name: &str| format!("{name} ({flow})");
    let headers = [
        "test".to_string(),
        "residual hydrant".to_string(),
        p("static"),
        p("static model"),
        p("residual"),
        p("residual model"),
        p("static err"),
        p("residual err"),
        p("drop"),
        p("drop model"),
        q("avail field"),
        q("avail model"),
        q("avail model 95 %"),
        "findings".to_string(),
    ];
    let columns: Vec<(&str, Align)> = headers
        .iter()
        .enumerate()
        .map(|(i, h)| {
            let align = if i < 2 || i == 13 {
                Align::Left
            } else {
                Align::Right
            };
            (h.as_str(), align)
        })
        .collect();
    let mut table = TextTable::new(&columns).free_text_last();
    for c in rows {
        let mut flags: Vec<String> = c
            .findings
            .iter()
            .map(|f| {
                let word = match f.severity {
                    Severity::Error => "ERROR",
                    Severity::Warning => "warn",
                };
                format!("{word} {}: {}", f.column, f.reason)
            })
            .collect();
        if c.gauge_isolated_in_model {
            flags.push(
                "warn: the gauge's junction is isolated in the model (no open path to a fixed head): no modelled pressure"
                    .into(),
            );
        }
        if c.negative_pressure_somewhere {
            flags.push("warn: the model shows negative pressure somewhere while flowing".into());
        }
        if left_out(c.row) {
            flags.insert(
                0,
                "LEFT OUT use: left out on the sheet (use = no); not used by calibrate".into(),
            );
        }
        let field_available = match c.field_available {
            AvailableFlow::Undefined => None,
            other => other.value(),
        };
        table.row(vec![
            if c.test_id.is_empty() {
                format!("(line {})", c.line)
            } else {
                c.test_id.clone()
            },
            c.residual_node.clone(),
            number(c.measured_static, 1),
            number(c.modelled_static, 1),
            number(c.measured_residual, 1),
            number(c.modelled_residual, 1),
            number(c.static_error(), 1),
            number(c.residual_error(), 1),
            number(c.measured_drop(), 1),
            number(c.modelled_drop(), 1),
            number(field_available, 0),
            number(c.model_available, 0),
            interval(&c.test_id)
                .map_or_else(|| "-".to_string(), |(lo, hi)| format!("{lo:.0} to {hi:.0}")),
            flags.first().cloned().unwrap_or_default(),
        ]);
        // Further findings of the same test go on under its first.
        for flag in flags.iter().skip(1) {
            let mut cells = vec![String::new(); 13];
            cells.push(flag.clone());
            table.row(cells);
        }
    }
    let _ = write!(out, "{}", table.text(""));
    let _ = writeln!(
        out,
        "\nerr = measured minus modelled; avail field = NFPA 291 extrapolation of the field readings to the\ntarget, avail model = the model's flow at the target; its 95 % interval (with --coefficients) is\nfirst order through the fit's C covariance.\nCaution: {CAUTION}"
    );
    out
}
