//! The command line claims no more than is true and loses no row: every row of a sheet is listed,
//! warnings travel with their tests into the calibration, messages are printed once with the
//! `roughcal:` prefix, and numbers come back as they were typed.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

const HEADER: &str = "test,date,time,residual_node,flow_node,static_psi,residual_psi,flow_gpm,pitot_psi,outlet_in,coefficient,condition,note\n";

fn small_network() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-network/small.toml")
}

fn roughcal(args: &[&str]) -> Output {
    let out = Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .args(args)
        .output()
        .unwrap();
    assert!(
        !String::from_utf8_lossy(&out.stderr).contains("panicked"),
        "{out:?}"
    );
    out
}

fn json(out: &Output) -> serde_json::Value {
    serde_json::from_slice(&out.stdout).unwrap_or_else(|e| {
        panic!(
            "stdout is not JSON ({e}): {}{}",
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        )
    })
}

fn sheet(dir: &Path, rows: &str) -> PathBuf {
    let path = dir.join("sheet.csv");
    std::fs::write(&path, format!("{HEADER}{rows}")).unwrap();
    path
}

#[test]
fn tests_lists_every_row_of_the_sheet_with_its_findings() {
    let dir = tempfile::tempdir().unwrap();
    let rows = [
        "OK1,,,J-102,J-103,56,41,700,,,,,",
        "NUM,,,J-102,J-103,5x6,41,700,,,,,",
        "LEN,,,J-102,J-103;J-105,56,41,700,,,,,",
        "WIDE,,,J-102,J-103,56,41,700,,,,,note,extra",
        ",,,J-102,J-103,56,41,700,,,,,",
        "COEF,,,J-102,J-103,56,41,,24,2.5,9,,",
        "OK2,,,J-104,J-106,62,44,,30,2.5,0.9,,",
    ];
    let path = sheet(dir.path(), &(rows.join("\n") + "\n"));
    let net = small_network();
    let out = roughcal(&[
        "tests",
        net.to_str().unwrap(),
        path.to_str().unwrap(),
        "--json",
    ]);
    assert!(out.status.success(), "{out:?}");
    let value = json(&out);
    let tests = value["tests"].as_array().unwrap();
    let ids: Vec<&str> = tests.iter().map(|t| t["test"].as_str().unwrap()).collect();
    // One entry per row, in sheet order, broken rows included.
    assert_eq!(ids, ["OK1", "NUM", "LEN", "WIDE", "", "COEF", "OK2"]);
    let lines: Vec<u64> = tests.iter().map(|t| t["line"].as_u64().unwrap()).collect();
    assert_eq!(lines, [2, 3, 4, 5, 6, 7, 8]);
    for (test, rule) in tests.iter().zip([
        None,
        Some("not-a-number"),
        Some("list-lengths"),
        Some("too-many-cells"),
        Some("empty-test-id"),
        Some("coefficient-above-one"),
        None,
    ]) {
        let rules: Vec<&str> = test["findings"]
            .as_array()
            .unwrap()
            .iter()
            .map(|f| f["rule"].as_str().unwrap())
            .collect();
        match rule {
            Some(rule) => {
                assert!(rules.contains(&rule), "{test}");
                assert_eq!(test["usable"], false, "{test}");
            }
            None => assert_eq!(test["usable"], true, "{test}"),
        }
    }
    // The text table has a line for each of them too.
    let text = roughcal(&["tests", net.to_str().unwrap(), path.to_str().unwrap()]);
    let text = String::from_utf8_lossy(&text.stdout);
    for needle in [
        "OK1",
        "NUM",
        "LEN",
        "WIDE",
        "(line 6)",
        "COEF",
        "OK2",
        "is not a number",
    ] {
        assert!(text.contains(needle), "`{needle}` missing:\n{text}");
    }
}

#[test]
fn a_repeated_test_id_is_found_whatever_else_is_wrong_with_the_first_row() {
    let dir = tempfile::tempdir().unwrap();
    let path = sheet(
        dir.path(),
        "R1,,,J-102,J-103,5x6,41,700,,,,,\nR1,,,J-104,J-106,62,44,700,,,,,\n",
    );
    let out = roughcal(&["fireflow", path.to_str().unwrap(), "--json"]);
    let value = json(&out);
    let second = &value["tests"][1];
    let rules: Vec<&str> = second["findings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f["rule"].as_str().unwrap())
        .collect();
    assert!(rules.contains(&"duplicate-test-id"), "{value}");
}

#[test]
fn calibrate_carries_every_screening_warning_with_its_test() {
    let dir = tempfile::tempdir().unwrap();
    // S1: the model holds about 60 psi at J-102, the gauge read 90 (a static miss: a warning, kept).
    let path = sheet(
        dir.path(),
        "D1,2024-05-07,09:05,J-102,J-103,56,41,,24,2.5,0.9,,\n\
         D2,2024-05-07,09:40,J-104,J-106,62,44,,30,2.5,0.9,,\n\
         D3,2024-05-07,10:20,J-105,J-107,71,52,640,,,,,\n\
         S1,2024-05-07,10:50,J-102,J-105,90,75,600,,,,,\n",
    );
    let net = small_network();
    let (net, path) = (net.to_str().unwrap(), path.to_str().unwrap());
    let out = roughcal(&["calibrate", net, path, "--json"]);
    let value = json(&out);
    let s1 = value["tests"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["test"] == "S1")
        .expect("S1 is used: a warning keeps a test");
    let warning = &s1["warnings"][0];
    assert_eq!(warning["rule"], "static-mismatch", "{s1}");
    assert_eq!(warning["column"], "static_psi");
    assert!(
        warning["reason"]
            .as_str()
            .unwrap()
            .contains("modelled static")
    );
    let d1 = value["tests"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["test"] == "D1");
    assert_eq!(d1.unwrap()["warnings"], serde_json::json!([]));

    let text = roughcal(&["calibrate", net, path]);
    let text = String::from_utf8_lossy(&text.stdout);
    assert!(
        text.contains("warning (kept in the fit) S1: static_psi: modelled static"),
        "{text}"
    );

    let folder = dir.path().join("out");
    roughcal(&["calibrate", net, path, "--out", folder.to_str().unwrap()]);
    let report = std::fs::read_to_string(folder.join("report.md")).unwrap();
    assert!(
        report.contains("- S1: static_psi: modelled static"),
        "{report}"
    );
}

#[test]
fn messages_are_printed_once_with_the_prefix() {
    let dir = tempfile::tempdir().unwrap();
    let missing_net = dir.path().join("nowhere.toml");
    let missing_sheet = dir.path().join("nowhere.csv");
    let out = roughcal(&[
        "open",
        missing_net.to_str().unwrap(),
        missing_sheet.to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(1));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(stderr.lines().count(), 1, "{stderr}");
    assert!(stderr.starts_with("roughcal: "), "{stderr}");
    assert_eq!(stderr.matches("No such file").count(), 1, "{stderr}");

    // A sheet that cannot be read, and a network with defects: every line carries the prefix.
    let empty = dir.path().join("empty.csv");
    std::fs::write(&empty, "").unwrap();
    let broken = dir.path().join("broken.toml");
    std::fs::write(
        &broken,
        "units = \"us\"\n[[junction]]\nid = \"J-1\"\nelevation = nan\n",
    )
    .unwrap();
    let net = small_network();
    for args in [
        vec!["tests", net.to_str().unwrap(), empty.to_str().unwrap()],
        vec!["fireflow", empty.to_str().unwrap()],
        vec!["calibrate", net.to_str().unwrap(), empty.to_str().unwrap()],
        vec!["check", broken.to_str().unwrap()],
        vec!["solve", broken.to_str().unwrap()],
    ] {
        let out = roughcal(&args);
        assert_eq!(out.status.code(), Some(1), "{args:?}");
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert!(!stderr.is_empty());
        for line in stderr.lines() {
            assert!(line.starts_with("roughcal: "), "{args:?}: {stderr}");
        }
    }
}

#[test]
fn arguments_reach_the_documented_messages() {
    let dir = tempfile::tempdir().unwrap();
    let path = sheet(dir.path(), "D1,,,J-102,J-103,56,41,700,,,,,\n");
    let out = roughcal(&["fireflow", path.to_str().unwrap(), "--target", "-5"]);
    assert_eq!(out.status.code(), Some(1));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        stderr.contains("roughcal: --target must be a pressure of zero or more, not -5"),
        "{stderr}"
    );

    let district = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-network/district.toml");
    let out = roughcal(&["solve", district.to_str().unwrap(), "--condition", "noon"]);
    assert_eq!(out.status.code(), Some(1));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("unknown condition `noon`"), "{stderr}");
    let text = std::fs::read_to_string(&district).unwrap();
    let names: Vec<&str> = text
        .split("[[condition]]")
        .skip(1)
        .filter_map(|c| c.lines().find(|l| l.starts_with("name")))
        .filter_map(|l| l.split('"').nth(1))
        .collect();
    assert!(!names.is_empty());
    for name in names {
        assert!(stderr.contains(name), "`{name}` not listed: {stderr}");
    }
}

#[test]
fn numbers_from_the_sheet_come_back_as_typed() {
    let dir = tempfile::tempdir().unwrap();
    // 26 psi and 0.1 gpm do not survive a round trip through SI exactly in floating point.
    let path = sheet(dir.path(), "T1,,,J-102,J-103,26,13.3,1000.1,,,,,\n");
    let net = small_network();
    let out = roughcal(&[
        "tests",
        net.to_str().unwrap(),
        path.to_str().unwrap(),
        "--json",
    ]);
    let value = json(&out);
    let t = &value["tests"][0];
    assert_eq!(t["measured_static"].as_f64(), Some(26.0), "{t}");
    assert_eq!(t["measured_residual"].as_f64(), Some(13.3), "{t}");
    assert_eq!(t["total_flow"].as_f64(), Some(1000.1), "{t}");
    let out = roughcal(&["fireflow", path.to_str().unwrap(), "--json"]);
    let value = json(&out);
    let t = &value["tests"][0];
    assert_eq!(t["static"].as_f64(), Some(26.0), "{t}");
    assert_eq!(t["residual"].as_f64(), Some(13.3), "{t}");
    assert_eq!(t["total_flow"].as_f64(), Some(1000.1), "{t}");
}
