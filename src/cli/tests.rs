//! `roughcal tests NETWORK SHEET [--target T] [--json]`: every field test next to the model.

use std::fmt::Write as _;
use std::path::Path;
use std::process::ExitCode;

use anyhow::bail;
use roughcal::fieldtest::{
    AvailableFlow, ModelComparison, Severity, compare_with_model, default_target, load_sheet,
    screen_sheet,
};
use roughcal::hydraulics::ValveState;
use roughcal::network::file::load_network_file;
use roughcal::network::{Network, UnitSystem};
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
                    "usable": c.read && !c.has_error() && !c.gauge_isolated_in_model,
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

fn number(value: Option<f64>, decimals: usize) -> String {
    value.map_or_else(|| "-".into(), |v| format!("{v:.decimals$}"))
}

fn table(rows: &[ModelComparison], target: f64, pressure: &str, flow: &str) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "Field tests against the model (pressures {pressure}, flows {flow}; available flow at {target} {pressure})\n"
    );
    let right = |name| (name, Align::Right);
    let mut table = TextTable::new(&[
        ("test", Align::Left),
        ("gauge", Align::Left),
        right("S meas"),
        right("S mod"),
        right("R meas"),
        right("R mod"),
        right("dS"),
        right("dR"),
        right("drop"),
        right("drop m"),
        right("Q fld"),
        right("Q mod"),
        ("findings", Align::Left),
    ])
    .free_text_last();
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
            flags.first().cloned().unwrap_or_default(),
        ]);
        // Further findings of the same test go on under its first.
        for flag in flags.iter().skip(1) {
            let mut cells = vec![String::new(); 12];
            cells.push(flag.clone());
            table.row(cells);
        }
    }
    let _ = write!(out, "{}", table.text(""));
    let _ = writeln!(
        out,
        "\nS static, R residual, d = measured - modelled, Q fld = NFPA 291 extrapolation of the field\nreadings, Q mod = the model's flow at the target.\nCaution: {CAUTION}"
    );
    out
}
