//! Every `--json` command agrees on the keys they share: `caution` holds the library's one caution
//! text, `units` is the same object everywhere, and `max_imbalance` is one quantity in one unit.

use std::path::PathBuf;
use std::process::Command;

use roughcal::calibrate::CAUTION;
use serde_json::Value;

fn repo(path: &str) -> String {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join(path)
        .display()
        .to_string()
}

/// Runs a command that must succeed and print one JSON report.
fn report(args: &[&str]) -> Value {
    let out = Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .args(args)
        .output()
        .expect("binary runs");
    assert!(
        out.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap_or_else(|e| panic!("{args:?}: not JSON: {e}"))
}

/// Every path at which `key` appears, as `a/b/3/key`.
fn paths_of(value: &Value, key: &str, at: &str, found: &mut Vec<String>) {
    match value {
        Value::Object(map) => {
            for (k, v) in map {
                let here = format!("{at}/{k}");
                if k == key {
                    found.push(here.clone());
                }
                paths_of(v, key, &here, found);
            }
        }
        Value::Array(items) => {
            for (i, v) in items.iter().enumerate() {
                paths_of(v, key, &format!("{at}/{i}"), found);
            }
        }
        _ => {}
    }
}

#[test]
fn every_json_command_shares_caution_units_and_max_imbalance() {
    let demo = repo("demo-network/district.toml");
    let sheet = repo("field-sheets/demo.csv");
    let fireflow_sheet = repo("tests/data/fireflow-us.csv");
    let out = tempfile::tempdir().unwrap();
    // A looped, pipes-only network, which the loop solver accepts: the test network without its
    // pump and check valve (as in solver_honesty.rs).
    let base = include_str!("data/base.toml");
    let (Some(pump_at), Some(condition_at)) = (base.find("[[pump]]"), base.find("[[condition]]"))
    else {
        panic!("tests/data/base.toml has a pump and a condition");
    };
    let looped = format!("{}{}", &base[..pump_at], &base[condition_at..])
        .replace("check_valve = true\n", "")
        .replace("pumps_off = [\"PU-1\"]\n", "");
    let pipes_only_path = out.path().join("looped.toml");
    std::fs::write(&pipes_only_path, looped).unwrap();
    let pipes_only = pipes_only_path.display().to_string();
    let out_dir = out.path().join("fit");
    let reports = [
        ("check", report(&["check", &demo, "--json"])),
        ("solve", report(&["solve", &demo, "--json"])),
        (
            "solve pipes only",
            report(&["solve", &pipes_only, "--json"]),
        ),
        ("loops", report(&["loops", &pipes_only, "--json"])),
        ("tests", report(&["tests", &demo, &sheet, "--json"])),
        ("fireflow", report(&["fireflow", &fireflow_sheet, "--json"])),
        (
            "calibrate",
            report(&[
                "calibrate",
                &demo,
                &sheet,
                "--out",
                out_dir.to_str().unwrap(),
                "--json",
            ]),
        ),
    ];
    for (name, report) in &reports {
        assert_eq!(report["caution"], CAUTION, "{name}: the library's caution");
        // docs/network-file.md: `us` is ft, in, gpm, psi; `si` is m, mm, L/s, kPa.
        let expected = match report["units"]["system"].as_str() {
            Some("us") => serde_json::json!({
                "system": "us", "length": "ft", "diameter": "in", "flow": "gpm", "pressure": "psi"
            }),
            Some("si") => serde_json::json!({
                "system": "si", "length": "m", "diameter": "mm", "flow": "L/s", "pressure": "kPa"
            }),
            other => panic!("{name}: units.system {other:?}"),
        };
        assert_eq!(report["units"], expected, "{name}: one units object");
        for retired in ["pressure_unit", "flow_unit", "note"] {
            assert!(report.get(retired).is_none(), "{name}: `{retired}` left");
        }
        // `max_imbalance` is the largest junction continuity miss, a flow in `units.flow`; only the
        // top level carries it (the loop solver's per-iteration head miss has its own name).
        let mut found = Vec::new();
        paths_of(report, "max_imbalance", "", &mut found);
        assert!(
            found.is_empty() || found == ["/max_imbalance"],
            "{name}: max_imbalance at {found:?}"
        );
    }
    let by_name = |wanted: &str| &reports.iter().find(|(n, _)| *n == wanted).unwrap().1;
    let loops = by_name("loops");
    let iterations = loops["iterations"].as_array().unwrap();
    assert!(!iterations.is_empty());
    assert!(
        iterations
            .iter()
            .all(|i| i["max_loop_head_imbalance"].is_number())
    );
    // The same network balanced two ways: both misses are flows in `units.flow`, well below 0.01 (the
    // solvers' mass-balance tolerance is relative to the demand; common practice, no source: a
    // converged steady state balances every junction to far better than a gauge can read).
    for name in ["loops", "solve pipes only"] {
        let miss = by_name(name)["max_imbalance"].as_f64().unwrap();
        assert!((0.0..0.01).contains(&miss), "{name}: {miss}");
    }
}

#[test]
fn check_json_lists_every_problem_with_its_place_and_quiet_prints_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let bad = dir.path().join("bad.toml");
    std::fs::write(
        &bad,
        "units = \"us\"\n\n[[fixed_head]]\nid = \"R\"\nhead = 100.0\n\n[[junction]]\nid = \"J\"\n\
         elevation = \"high\"\n\n[[pipe]]\nid = \"P\"\nfrom = \"R\"\nto = \"K\"\nlength = 10.0\n\
         diameter = 6.0\nc = 120.0\n",
    )
    .unwrap();
    let bad = bad.to_str().unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .args(["check", bad, "--json"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
    let json: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(json["valid"], false);
    assert_eq!(json["caution"], CAUTION);
    let problems = json["problems"].as_array().unwrap();
    assert_eq!(problems.len(), 2, "{problems:?}");
    assert_eq!(problems[0]["line"], 9);
    assert_eq!(problems[0]["column"], 13);
    assert_eq!(problems[0]["id"], "J");
    assert_eq!(problems[0]["field"], "elevation");
    assert_eq!(problems[1]["line"], 14);
    assert_eq!(problems[1]["field"], "to");

    let good = repo("demo-network/district.toml");
    let json = report(&["check", &good, "--json"]);
    assert_eq!(json["valid"], true);
    // The demo district: 170 junctions, 255 pipes, five groups (README).
    assert_eq!(json["summary"]["junctions"], 170);
    assert_eq!(json["summary"]["pipes"], 255);
    assert_eq!(json["summary"]["groups"].as_array().unwrap().len(), 5);

    let quiet = Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .args(["check", &good, "--quiet"])
        .output()
        .unwrap();
    assert!(quiet.status.success());
    assert!(quiet.stdout.is_empty() && quiet.stderr.is_empty());
    let quiet_bad = Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .args(["check", bad, "-q"])
        .output()
        .unwrap();
    assert_eq!(quiet_bad.status.code(), Some(1));
    assert!(quiet_bad.stdout.is_empty());
    assert!(String::from_utf8_lossy(&quiet_bad.stderr).contains("bad.toml:9:13:"));
}
