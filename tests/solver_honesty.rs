//! No silent wrong answer, end to end through the command line: isolated junctions are reported
//! instead of NaN, negative pressures are flagged in every output, a pump that cannot lift shuts off
//! with a warning, non-convergence is an error (exit 1), and every printed solution balances.

use std::path::PathBuf;
use std::process::Output;
use std::sync::atomic::AtomicBool;

use roughcal::calibrate::{CalibrationError, CalibrationOptions, CalibrationTest, calibrate};
use roughcal::network::UnitSystem;
use roughcal::network::file::load_network_file;
use serde_json::Value;

fn data(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/honesty")
        .join(name)
}

fn roughcal(args: &[&str]) -> Output {
    std::process::Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .args(args)
        .output()
        .unwrap()
}

fn text(bytes: &[u8]) -> String {
    String::from_utf8_lossy(bytes).into_owned()
}

fn solve_json(file: &str, extra: &[&str]) -> Value {
    let path = data(file);
    let mut args = vec!["solve", path.to_str().unwrap(), "--json"];
    args.extend_from_slice(extra);
    let out = roughcal(&args);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let stdout = text(&out.stdout);
    assert!(
        !stdout.contains("NaN") && !stdout.contains("inf"),
        "{stdout}"
    );
    serde_json::from_str(&stdout).unwrap()
}

fn solve_table(file: &str) -> String {
    let path = data(file);
    let out = roughcal(&["solve", path.to_str().unwrap()]);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let stdout = text(&out.stdout);
    assert!(
        !stdout.contains("NaN") && !stdout.contains(" inf"),
        "{stdout}"
    );
    stdout
}

fn node<'a>(json: &'a Value, id: &str) -> &'a Value {
    json["nodes"]
        .as_array()
        .unwrap()
        .iter()
        .find(|n| n["id"] == id)
        .unwrap()
}

fn warnings(json: &Value) -> Vec<String> {
    json["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|w| w.as_str().unwrap().to_string())
        .collect()
}

/// Continuity at every junction that is not isolated, recomputed from the printed link flows and the
/// network file (not from the solver's own figure): inflow - outflow - demand = 0.
fn assert_printed_solution_balances(file: &str, json: &Value) {
    let net = load_network_file(&data(file)).unwrap().network;
    let flow_of = |list: &str, id: &str| -> f64 {
        json[list]
            .as_array()
            .unwrap()
            .iter()
            .find(|l| l["id"] == id)
            .unwrap()["flow"]
            .as_f64()
            .unwrap()
    };
    let mut balance = vec![0.0; net.junctions.len()];
    let mut add = |end: roughcal::network::NodeRef, q: f64| {
        if let roughcal::network::NodeRef::Junction(j) = end {
            balance[j] += q;
        }
    };
    for pipe in &net.pipes {
        let q = flow_of("pipes", &pipe.id);
        add(pipe.from, -q);
        add(pipe.to, q);
    }
    for pump in &net.pumps {
        let q = flow_of("pumps", &pump.id);
        add(pump.from, -q);
        add(pump.to, q);
    }
    let imbalance = json["max_imbalance"]
        .as_f64()
        .expect("max_imbalance printed");
    // The solver's tolerance is about 1e-6 m^3/s per junction, i.e. 0.016 gpm or 0.001 L/s; printed
    // flows are full precision. Common practice, no source: a balance to 0.05 gpm is exact for a model.
    for (j, junction) in net.junctions.iter().enumerate() {
        let n = node(json, &junction.id);
        if n["isolated"] == true {
            continue;
        }
        let demand = n["demand"].as_f64().unwrap();
        let miss = (balance[j] - demand).abs();
        assert!(miss < 0.05, "junction {} misses by {miss}", junction.id);
        assert!(
            miss <= imbalance + 1e-9,
            "printed max_imbalance {imbalance} is below junction {}'s {miss}",
            junction.id
        );
    }
}

#[test]
fn isolated_junctions_are_reported_not_nan() {
    let file = "isolated-behind-check-valve.toml";
    let json = solve_json(file, &[]);
    let behind = node(&json, "J-BEHIND");
    assert_eq!(behind["isolated"], true);
    assert!(behind["pressure"].is_null() && behind["head"].is_null());
    assert!(
        warnings(&json)
            .iter()
            .any(|w| w.starts_with("isolated") && w.contains("J-BEHIND")),
        "{json}"
    );
    assert_printed_solution_balances(file, &json);
    let table = solve_table(file);
    let row = table.lines().find(|l| l.starts_with("J-BEHIND")).unwrap();
    assert!(row.contains("isolated"), "{row}");
    assert!(table.contains("warning: isolated") && table.contains("J-BEHIND"));
}

#[test]
fn negative_pressures_are_flagged_in_every_output() {
    let file = "negative-pressure.toml";
    let json = solve_json(file, &[]);
    let hill = node(&json, "J-HILL");
    // Grade about 119.8 m over ground at 125 m: about -51 kPa (9.80665 kPa per m of water).
    assert!(hill["pressure"].as_f64().unwrap() < -40.0, "{hill}");
    assert_eq!(hill["negative_pressure"], true);
    assert_eq!(node(&json, "J-LOW")["negative_pressure"], false);
    assert!(
        warnings(&json)
            .iter()
            .any(|w| w.starts_with("negative pressure") && w.contains("J-HILL"))
    );
    assert_printed_solution_balances(file, &json);
    let table = solve_table(file);
    let row = table.lines().find(|l| l.starts_with("J-HILL")).unwrap();
    assert!(row.ends_with("NEGATIVE"), "{row}");
    assert!(table.contains("warning: negative pressure (grade below ground): J-HILL"));
}

#[test]
fn a_pump_that_cannot_lift_shuts_off_with_a_warning() {
    // Suction grade 100 ft, discharge held at 600 ft by the tank; shutoff head 200 ft < 500 ft lift.
    let file = "pump-cannot-lift.toml";
    let json = solve_json(file, &[]);
    let pump = &json["pumps"][0];
    assert_eq!(pump["status"], "cannot lift");
    assert_eq!(pump["flow"].as_f64().unwrap(), 0.0);
    assert!(
        warnings(&json)
            .iter()
            .any(|w| w.contains("pump PU-1 cannot lift"))
    );
    assert_printed_solution_balances(file, &json);
    let table = solve_table(file);
    assert!(table.contains("cannot lift"));
    assert!(table.contains("warning: pump PU-1 cannot lift"));
}

#[test]
fn demand_flows_are_balanced_and_max_imbalance_is_printed() {
    let file = "pump-cannot-lift.toml";
    let json = solve_json(file, &["--demand", "J-BEHIND=250"]);
    assert_eq!(json["converged"], true);
    assert_eq!(node(&json, "J-BEHIND")["demand"].as_f64(), Some(260.0));
    assert_printed_solution_balances(file, &json);
    let table = solve_table(file);
    assert!(table.contains("largest junction imbalance"));
}

#[test]
fn non_convergence_is_an_error_with_exit_1() {
    let path = data("pump-cannot-lift.toml");
    for json in [false, true] {
        let mut args = vec!["solve", path.to_str().unwrap(), "--demand", "J-D=1e15"];
        if json {
            args.push("--json");
        }
        let out = roughcal(&args);
        assert_eq!(out.status.code(), Some(1));
        assert!(
            out.stdout.is_empty(),
            "nothing printed that did not converge"
        );
        let stderr = text(&out.stderr);
        assert!(stderr.contains("did not converge"), "{stderr}");
        assert!(!stderr.contains("panicked"));
    }
    // A demand that overflows the arithmetic is the same kind of refusal.
    let out = roughcal(&["solve", path.to_str().unwrap(), "--demand", "J-D=1e200"]);
    assert_eq!(out.status.code(), Some(1));
    assert!(out.stdout.is_empty());
    assert!(text(&out.stderr).contains("non-finite"));
}

#[test]
fn tests_command_flags_an_isolated_gauge() {
    let network = data("isolated-behind-check-valve.toml");
    let sheet = data("isolated-gauge.csv");
    let (n, s) = (network.to_str().unwrap(), sheet.to_str().unwrap());
    let out = roughcal(&["tests", n, s, "--json"]);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let stdout = text(&out.stdout);
    assert!(!stdout.contains("NaN"));
    let json: Value = serde_json::from_str(&stdout).unwrap();
    let iso = &json["tests"][0];
    assert_eq!(iso["test"], "HT-ISO");
    assert_eq!(iso["gauge_isolated_in_model"], true);
    assert!(iso["modelled_static"].is_null() && iso["modelled_residual"].is_null());
    assert_eq!(iso["usable"], false);
    assert_eq!(json["tests"][1]["gauge_isolated_in_model"], false);
    let out = roughcal(&["tests", n, s]);
    let table = text(&out.stdout);
    let row = table.lines().find(|l| l.starts_with("HT-ISO")).unwrap();
    assert!(row.contains("isolated in the model"), "{row}");
}

#[test]
fn calibration_refuses_to_fit_an_isolated_gauge() {
    let net = load_network_file(&data("isolated-behind-check-valve.toml"))
        .unwrap()
        .network;
    let behind = net.find_junction("J-BEHIND").unwrap();
    let flowing = net.find_junction("J-D").unwrap();
    let tests = [CalibrationTest {
        id: "HT-ISO".into(),
        residual_junction: behind,
        condition: None,
        hydrant_flows_m3s: vec![(flowing, 0.03)],
        static_head_m: 170.0,
        residual_head_m: 160.0,
    }];
    let error = calibrate(
        &net,
        &tests,
        &CalibrationOptions::for_units(UnitSystem::Us),
        &mut |_| {},
        &AtomicBool::new(false),
    )
    .unwrap_err();
    assert!(
        matches!(&error, CalibrationError::GaugeIsolated { test } if test == "HT-ISO"),
        "{error}"
    );
}

#[test]
fn loops_flags_negative_pressure_and_prints_a_checked_balance() {
    let path = data("negative-pressure.toml");
    let path = path.to_str().unwrap();
    let out = roughcal(&["loops", path]);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let table = text(&out.stdout);
    let row = table.lines().find(|l| l.starts_with("J-HILL")).unwrap();
    assert!(row.ends_with("NEGATIVE"), "{row}");
    assert!(table.contains("warning: negative pressure (grade below ground): J-HILL"));

    // A looped, pipes-only network: the balance printed is recomputed here from the printed flows.
    let base = include_str!("data/base.toml");
    let pump_at = base.find("[[pump]]").unwrap();
    let condition_at = base.find("[[condition]]").unwrap();
    let looped = format!("{}{}", &base[..pump_at], &base[condition_at..])
        .replace("check_valve = true\n", "")
        .replace("pumps_off = [\"PU-1\"]\n", "");
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("looped.toml");
    std::fs::write(&file, looped).unwrap();
    let out = roughcal(&["loops", file.to_str().unwrap(), "--json"]);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let json: Value = serde_json::from_str(&text(&out.stdout)).unwrap();
    assert_eq!(json["converged"], true);
    let net = load_network_file(&file).unwrap().network;
    let mut balance: Vec<f64> = net
        .junctions
        .iter()
        .map(|j| -net.units.flow_from_m3s(j.demand_m3s))
        .collect();
    for (pipe, printed) in net.pipes.iter().zip(json["pipes"].as_array().unwrap()) {
        assert_eq!(printed["id"], pipe.id.as_str());
        let q = printed["flow"].as_f64().unwrap();
        for (end, signed) in [(pipe.from, -q), (pipe.to, q)] {
            if let roughcal::network::NodeRef::Junction(j) = end {
                balance[j] += signed;
            }
        }
    }
    let worst = balance.iter().map(|b| b.abs()).fold(0.0, f64::max);
    let printed = json["max_imbalance"]
        .as_f64()
        .expect("max_imbalance printed");
    assert!(worst < 0.05, "junction balance misses by {worst} gpm");
    assert!(
        (worst - printed).abs() < 1e-6,
        "printed {printed}, recomputed {worst}"
    );
}

#[test]
fn loops_under_a_condition_agrees_with_the_gradient_solver_and_names_what_it_cannot_model() {
    let demo = concat!(env!("CARGO_MANIFEST_DIR"), "/demo-network/district.toml");
    // As written the booster runs: every element the loop method has no law for is named.
    let out = roughcal(&["loops", demo]);
    assert!(!out.status.success());
    let error = text(&out.stderr);
    assert!(error.contains("pump `BP-1` is running"), "{error}");
    assert!(error.contains("use `roughcal solve`"), "{error}");
    let out = roughcal(&["loops", demo, "--condition", "noon"]);
    assert!(
        text(&out.stderr).contains("tue-am"),
        "{}",
        text(&out.stderr)
    );

    // Wednesday afternoon the booster is off: two independent methods, one answer (to the loop
    // method's head tolerance, far below a gauge's resolution).
    let out = roughcal(&[
        "loops",
        demo,
        "--condition",
        "wed-pm",
        "--iterations",
        "5000",
        "--json",
    ]);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let loops: Value = serde_json::from_str(&text(&out.stdout)).unwrap();
    let out = roughcal(&["solve", demo, "--condition", "wed-pm", "--json"]);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let solved: Value = serde_json::from_str(&text(&out.stdout)).unwrap();
    let head_of = |json: &Value, key: &str| -> Vec<(String, f64)> {
        json[key]
            .as_array()
            .unwrap()
            .iter()
            .filter_map(|n| Some((n["id"].as_str()?.to_string(), n["head"].as_f64()?)))
            .collect()
    };
    let by_loops = head_of(&loops, "junctions");
    let by_gradient = head_of(&solved, "nodes");
    assert!(!by_loops.is_empty() && by_loops.len() <= by_gradient.len());
    for (id, head) in by_loops {
        let (_, other) = by_gradient.iter().find(|(g, _)| *g == id).unwrap();
        assert!((head - other).abs() < 0.05, "{id}: {head} vs {other} ft");
    }
}
