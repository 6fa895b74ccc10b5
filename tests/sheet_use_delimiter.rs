//! The sheet's optional `use` column (a test left out of the fit by choice, kept apart from tests
//! screened out by an error) and sheets separated by `;` or tabs, through the command line.

use std::path::Path;
use std::process::Command;

use roughcal::fieldtest::sheet::{FieldSheet, detect_delimiter};
use roughcal::fieldtest::{Rule, read_tests};

fn roughcal(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .args(args)
        .output()
        .expect("binary runs")
}

fn repo(path: &str) -> String {
    format!("{}/{path}", env!("CARGO_MANIFEST_DIR"))
}

fn json(out: &std::process::Output) -> serde_json::Value {
    serde_json::from_slice(&out.stdout).unwrap_or_else(|e| {
        panic!(
            "not JSON ({e}): {}\n{}",
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        )
    })
}

/// The demo sheet with a `use` column appended: `no` on the tests named, blank elsewhere.
fn demo_sheet_with_use(dir: &Path, left_out: &[&str]) -> String {
    let text = std::fs::read_to_string(repo("field-sheets/demo.csv")).unwrap();
    let mut lines = text.lines();
    let mut out = format!("{},use\n", lines.next().unwrap());
    for line in lines {
        let id = line.split(',').next().unwrap();
        let cell = if left_out.contains(&id) { "no" } else { "" };
        out.push_str(&format!("{line},{cell}\n"));
    }
    let path = dir.join("day.csv");
    std::fs::write(&path, out).unwrap();
    path.display().to_string()
}

#[test]
fn a_use_no_test_is_left_out_of_the_fit_and_listed_apart() {
    let dir = tempfile::tempdir().unwrap();
    let sheet = demo_sheet_with_use(dir.path(), &["AF-05"]);
    let network = repo("demo-network/district.toml");
    let out = roughcal(&["calibrate", &network, &sheet, "--json"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let summary = json(&out);
    let excluded = summary["excluded"].as_array().unwrap();
    let af05 = excluded.iter().find(|e| e["test"] == "AF-05").unwrap();
    assert!(
        af05["reason"].as_str().unwrap().contains("left out"),
        "{af05}"
    );
    assert_eq!(af05["left_out"], true);
    // The demo's screened-out test stays screened out, not "left out".
    let af18 = excluded.iter().find(|e| e["test"] == "AF-18").unwrap();
    assert_eq!(af18["left_out"], false);
    assert!(!af18["reason"].as_str().unwrap().contains("left out"));
    let fitted: Vec<&str> = summary["tests"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["test"].as_str().unwrap())
        .collect();
    assert_eq!(fitted.len(), 16, "{fitted:?}");
    assert!(!fitted.contains(&"AF-05"));

    // The text summary says it apart from the screened-out one.
    let out = roughcal(&["calibrate", &network, &sheet]);
    let text = String::from_utf8(out.stdout).unwrap();
    let af05_line = text
        .lines()
        .find(|l| l.contains("AF-05") && !l.contains('|') && l.contains(':'))
        .unwrap_or_else(|| panic!("{text}"));
    assert!(
        af05_line.trim_start().starts_with("left out"),
        "{af05_line}"
    );

    // `tests` still shows the row, marked as not used.
    let out = roughcal(&["tests", &network, &sheet, "--json"]);
    let tests = json(&out);
    let row = tests["tests"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["test"] == "AF-05")
        .unwrap()
        .clone();
    assert_eq!(row["usable"], false, "{row}");
    assert!(row["measured_static"].as_f64().is_some());
}

#[test]
fn use_yes_blank_and_case_keep_a_test_anything_else_is_an_error() {
    let text = "test,residual_node,flow_node,static_psi,residual_psi,flow_gpm,use\n\
                T1,H1,H2,60,45,1000,yes\n\
                T2,H1,H2,60,45,1000,\n\
                T3,H1,H2,60,45,1000, No \n\
                T4,H1,H2,60,45,1000,maybe\n";
    let sheet = FieldSheet::parse(text, "use.csv").unwrap();
    let reading = read_tests(&sheet);
    assert_eq!(reading.left_out, vec![2]);
    let bad: Vec<_> = reading
        .findings
        .iter()
        .filter(|f| f.rule == Rule::UseNotYesNo)
        .collect();
    assert_eq!(bad.len(), 1);
    assert_eq!(bad[0].line, 5);
    assert_eq!(bad[0].column, "use");
    assert!(bad[0].reason.contains("\"maybe\""), "{}", bad[0].reason);
    let usable: Vec<&str> = reading.usable_tests().map(|t| t.test_id.as_str()).collect();
    assert_eq!(usable, ["T1", "T2"]);
    // The column round-trips untouched.
    assert_eq!(sheet.to_csv_string(), text);
}

const COMMA: &str = "test,residual_node,flow_node,static_psi,residual_psi,flow_gpm,note\n\
                     T1,H1,H2,60.5,45.5,1000,\"a, b\"\n\
                     T2,H3,H4;H5,72,50,600;600,\n";
const SEMICOLON: &str = "test;residual_node;flow_node;static_psi;residual_psi;flow_gpm;note\n\
                         T1;H1;H2;60,5;45,5;1000;a, b\n\
                         T2;H3;\"H4;H5\";72;50;\"600;600\";\n";
const TAB: &str = "test\tresidual_node\tflow_node\tstatic_psi\tresidual_psi\tflow_gpm\tnote\n\
                   T1\tH1\tH2\t60,5\t45.5\t1000\ta, b\n\
                   T2\tH3\tH4;H5\t72\t50\t600;600\t\n";

#[test]
fn the_separator_is_read_from_the_header_line() {
    assert_eq!(detect_delimiter(COMMA), b',');
    assert_eq!(detect_delimiter(SEMICOLON), b';');
    assert_eq!(detect_delimiter(TAB), b'\t');
    // A comma header whose quoted name holds a semicolon is still a comma sheet.
    assert_eq!(detect_delimiter("\"a;b\",test\n"), b',');
}

#[test]
fn semicolon_and_tab_sheets_read_as_the_comma_sheet_and_save_as_loaded() {
    let dir = tempfile::tempdir().unwrap();
    let mut answers = Vec::new();
    for (name, text) in [("comma", COMMA), ("semicolon", SEMICOLON), ("tab", TAB)] {
        let sheet = FieldSheet::parse(text, name).unwrap();
        // Saved with the separator it came with.
        assert_eq!(sheet.to_csv_string(), text, "{name}");
        let reading = read_tests(&sheet);
        assert!(
            reading.findings.is_empty(),
            "{name}: {:?}",
            reading.findings
        );
        assert_eq!(reading.tests[1].flowing.len(), 2, "{name}");
        let path = dir.path().join(format!("{name}.csv"));
        std::fs::write(&path, text).unwrap();
        let out = roughcal(&["fireflow", &path.display().to_string(), "--json"]);
        assert!(out.status.success(), "{name}");
        let summary = json(&out);
        let flows: Vec<f64> = summary["tests"]
            .as_array()
            .unwrap()
            .iter()
            .map(|t| t["available_flow"].as_f64().unwrap())
            .collect();
        answers.push(flows);
    }
    // NFPA 291: 1000 gpm * ((60.5 - 20) / (60.5 - 45.5))^0.54 = 1000 * 2.7^0.54; ln 2.7 = 0.99325,
    // * 0.54 = 0.53636, e^0.53636 = 1.7097, so 1709.7 gpm (by hand).
    assert!((answers[0][0] - 1709.7).abs() < 0.5, "{:?}", answers[0]);
    assert_eq!(answers[0], answers[1]);
    assert_eq!(answers[0], answers[2]);
}

#[test]
fn fireflow_table_shows_readings_to_one_decimal() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("half.csv");
    std::fs::write(&path, COMMA).unwrap();
    let out = roughcal(&["fireflow", &path.display().to_string()]);
    let text = String::from_utf8(out.stdout).unwrap();
    let t1 = text.lines().find(|l| l.starts_with("T1 ")).unwrap();
    let words: Vec<&str> = t1.split_whitespace().collect();
    assert!(words.contains(&"60.5"), "{t1}");
    assert!(words.contains(&"45.5"), "{t1}");
    let t2 = text.lines().find(|l| l.starts_with("T2 ")).unwrap();
    assert!(t2.split_whitespace().any(|w| w == "72.0"), "{t2}");
}
