//! The field sheet end to end: round trip, edits, bad sheets, reading, every screening rule and the
//! `fireflow` command.

use std::process::Command;

use proptest::prelude::*;
use roughcal::fieldtest::{
    FieldSheet, Finding, Rule, Severity, SheetColumn, SheetErrorKind, check_modelled_static,
    load_sheet, pitot_flow_gpm, read_tests, save_sheet, screen_sheet,
};
use roughcal::network::{Condition, FixedHead, Junction, Network, UnitSystem};

const HEADER: &str = "test,date,time,residual_node,flow_node,static_psi,residual_psi,flow_gpm,pitot_psi,outlet_in,coefficient,condition,note";

fn sheet(rows: &str) -> FieldSheet {
    FieldSheet::parse(&format!("{HEADER}\n{rows}"), "sheet.csv").expect("sheet loads")
}

fn network() -> Network {
    let junction = |id: &str| Junction {
        id: id.to_string(),
        elevation_m: 0.0,
        demand_m3s: 0.0,
        position: None,
    };
    Network {
        title: "screening".into(),
        units: UnitSystem::Us,
        junctions: ["H1", "H2", "H3", "H10", "H11"]
            .into_iter()
            .map(junction)
            .collect(),
        fixed_heads: vec![FixedHead {
            id: "R1".into(),
            head_m: 50.0,
            position: None,
        }],
        pipes: vec![],
        pumps: vec![],
        groups: vec![],
        valves: Vec::new(),
        hazen_williams_constant: None,
        flow_unit: None,
        conditions: vec![Condition {
            name: "peak".into(),
            demand_factor: 1.5,
            heads: vec![],
            closed_pipes: vec![],
            pumps_off: vec![],
            valve_settings: Vec::new(),
            closed_valves: Vec::new(),
        }],
        lonlat_origin: None,
    }
}

/// Findings of one rule after reading and screening against the test network.
fn findings_of(rows: &str, rule: Rule) -> Vec<Finding> {
    screen_sheet(&sheet(rows), Some(&network()))
        .findings
        .into_iter()
        .filter(|f| f.rule == rule)
        .collect()
}

fn one_finding(rows: &str, rule: Rule) -> Finding {
    let found = findings_of(rows, rule);
    assert_eq!(found.len(), 1, "{rule:?} in {rows}: {found:?}");
    found.into_iter().next().unwrap()
}

// ---- round trip and edits ----

#[test]
fn round_trip_is_identical() {
    let text = "test,crew,date,time,residual_node,flow_node,static_psi,residual_psi,flow_gpm,pitot_psi,outlet_in,coefficient,condition,note,weather\n\
        T1,\"Ng, K.\",2024-05-02,,H1,H2;H3,72,55,980;1010,,,,,\"said \"\"ok\"\", left\",dry\n\
        T2,,,,H3,H1,70,52,,41,2.5,0.8,peak,Ölçüm — 水圧 ✓,\n\
        T3,,,,,,,,,,,,,,\n\
        T4, spaced ,,,H2,H1,  60 ,44,900,,,,,\"two\nlines\",wet\n";
    let parsed = FieldSheet::parse(text, "crew.csv").unwrap();
    assert_eq!(parsed.to_csv_string(), text);
    assert_eq!(parsed.headers()[1], "crew");
    assert_eq!(parsed.cell(1, SheetColumn::Note), Some("Ölçüm — 水圧 ✓"));
    assert_eq!(parsed.cell(0, SheetColumn::Note), Some("said \"ok\", left"));
    assert_eq!(parsed.cell_named(3, "crew"), Some(" spaced "));
    // The quoted line break puts the next row two lines on.
    assert_eq!(parsed.line(3), Some(5));
}

#[test]
fn round_trip_keeps_crlf_and_byte_order_mark() {
    let text = format!("\u{feff}{HEADER}\r\nT1,,,H1,H2,60,45,1000,,,,,\r\n");
    let parsed = FieldSheet::parse(&text, "excel.csv").unwrap();
    assert_eq!(parsed.column_index(SheetColumn::Test), Some(0));
    assert_eq!(parsed.to_csv_string(), text);
}

#[test]
fn ragged_rows_round_trip_and_are_findings() {
    let text = format!("{HEADER}\nT1,,,H1,H2,60,45,1000\nT2,,,H1,H2,60,45,1000,,,,,note,extra\n");
    let parsed = FieldSheet::parse(&text, "ragged.csv").unwrap();
    assert_eq!(parsed.to_csv_string(), text);
    let reading = read_tests(&parsed);
    let short = reading
        .findings
        .iter()
        .find(|f| f.rule == Rule::TooFewCells)
        .unwrap();
    assert_eq!((short.line, short.severity), (2, Severity::Warning));
    assert_eq!(short.column, "pitot_psi");
    assert!(
        short.reason.contains("8 cells but the header has 13"),
        "{}",
        short.reason
    );
    let long = reading
        .findings
        .iter()
        .find(|f| f.rule == Rule::TooManyCells)
        .unwrap();
    assert_eq!((long.line, long.severity), (3, Severity::Error));
    assert_eq!(long.column, "field 14");
    // The short row is still a test; the long one is left out.
    assert_eq!(reading.tests.len(), 1);
    assert_eq!(reading.tests[0].test_id, "T1");
}

#[test]
fn edits_and_their_undo_restore_the_file() {
    let text =
        format!("{HEADER},crew\nT1,,,H1,H2,60,45,1000,,,,,,AB\nT2,,,H1,H3,62,47,990,,,,,,CD\n");
    let mut s = FieldSheet::parse(&text, "edit.csv").unwrap();
    let old = s.set_cell(0, SheetColumn::Residual, "44.5").unwrap();
    assert_eq!(old, "45");
    assert_eq!(s.cell(0, SheetColumn::Residual), Some("44.5"));
    s.insert_row(1).unwrap();
    s.set_cell(1, SheetColumn::Note, "new, with comma").unwrap();
    assert_eq!(s.row_count(), 3);
    assert_eq!(s.line(2), Some(4));
    let crew = s.column_index_named("crew").unwrap();
    let old_crew = s.set_cell_at(2, crew, "EF").unwrap();
    assert_eq!(old_crew, "CD");
    // Undo, in reverse order.
    s.set_cell_at(2, crew, &old_crew).unwrap();
    let removed = s.delete_row(1).unwrap();
    assert_eq!(removed[12], "new, with comma");
    s.set_cell(0, SheetColumn::Residual, &old).unwrap();
    assert_eq!(s.to_csv_string(), text);
    // Put back a deleted row.
    let row = s.delete_row(0).unwrap();
    s.insert_row_cells(0, row).unwrap();
    assert_eq!(s.to_csv_string(), text);
    assert!(s.insert_row(5).is_err());
    assert!(s.delete_row(2).is_err());
    assert!(s.set_cell_named(0, "nope", "x").is_err());
}

#[test]
fn setting_a_missing_column_adds_it() {
    let mut s = FieldSheet::parse(
        "test,residual_node,flow_node,static_kpa,residual_kpa,flow_lps\nS1,J1,J2,500,300,60\n",
        "si.csv",
    )
    .unwrap();
    s.set_cell(0, SheetColumn::Condition, "night").unwrap();
    assert_eq!(s.headers().last().map(String::as_str), Some("condition"));
    s.set_cell(0, SheetColumn::Pitot, "80").unwrap();
    assert_eq!(s.headers().last().map(String::as_str), Some("pitot_kpa"));
    assert_eq!(
        s.to_csv_string(),
        "test,residual_node,flow_node,static_kpa,residual_kpa,flow_lps,condition,pitot_kpa\nS1,J1,J2,500,300,60,night,80\n"
    );
}

#[test]
fn save_and_load_through_files() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("crew.csv");
    let mut s = FieldSheet::empty(UnitSystem::Us);
    s.insert_row(0).unwrap();
    for (column, value) in [
        (SheetColumn::Test, "T1"),
        (SheetColumn::ResidualNode, "H1"),
        (SheetColumn::FlowNode, "H2"),
        (SheetColumn::Static, "60"),
        (SheetColumn::Residual, "45"),
        (SheetColumn::Flow, "1000"),
    ] {
        s.set_cell(0, column, value).unwrap();
    }
    save_sheet(&s, &path).unwrap();
    let back = load_sheet(&path).unwrap();
    assert_eq!(back.to_csv_string(), s.to_csv_string());
    assert_eq!(read_tests(&back).tests.len(), 1);
    // Only the sheet is left in the folder.
    assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
}

#[test]
fn template_is_the_us_header() {
    let template = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/field-sheets/template.csv"
    ))
    .unwrap();
    assert_eq!(template, format!("{HEADER}\n"));
    assert_eq!(FieldSheet::empty(UnitSystem::Us).to_csv_string(), template);
}

// ---- sheets that cannot be read ----

fn load_error(text: &str) -> String {
    FieldSheet::parse(text, "bad.csv").unwrap_err().to_string()
}

#[test]
fn bad_sheets_say_file_line_column_reason() {
    assert_eq!(
        load_error(""),
        format!("bad.csv:1: the file is empty: expected a header line such as `{HEADER}`")
    );
    assert_eq!(
        load_error("test,residual_node,flow_node,residual_psi,flow_gpm\nT1,H1,H2,40,900\n"),
        "bad.csv:1: static_psi: required column missing (expected `static_psi` or `static_kpa`)"
    );
    assert_eq!(
        load_error("test,residual_node,flow_node,static_psi,residual_psi\n"),
        "bad.csv:1: flow_gpm: required column missing (expected `flow_gpm`, or both `pitot_psi` and `outlet_in`)"
    );
    assert_eq!(
        load_error("test,residual_node,flow_node,static_psi,residual_psi,flow_gpm,Test\n"),
        "bad.csv:1: Test: the column appears twice (fields 1 and 7)"
    );
    assert_eq!(
        load_error("test,residual_node,flow_node,static_psi,residual_kpa,flow_gpm\n"),
        "bad.csv:1: residual_kpa: mixed units: this column is si but `static_psi` is us; a sheet is all us or all si"
    );
    assert_eq!(
        load_error(&format!("{HEADER}\nT1,\0\n")),
        "bad.csv:2: not a text file: it contains a NUL byte"
    );
}

#[test]
fn files_that_are_not_text_or_missing() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("junk.csv");
    std::fs::write(
        &path,
        [b't', b'e', b's', b't', b'\n', 0xff, 0xfe, 0x00, 0x81],
    )
    .unwrap();
    let error = load_sheet(&path).unwrap_err();
    assert_eq!(error.line, Some(2));
    assert!(matches!(error.kind, SheetErrorKind::NotText(_)));
    assert!(
        error
            .to_string()
            .starts_with(&format!("{}:2: not a text file", path.display()))
    );
    let missing = load_sheet(&dir.path().join("none.csv")).unwrap_err();
    assert!(matches!(missing.kind, SheetErrorKind::Io(_)));
}

proptest! {
    #[test]
    fn any_bytes_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..400)) {
        let text = String::from_utf8_lossy(&bytes);
        if let Ok(s) = FieldSheet::parse(&text, "junk.csv") {
            let _ = screen_sheet(&s, Some(&network()));
        }
    }

    #[test]
    fn any_rows_under_a_good_header_never_panic(rows in "[-0-9a-zA-Zé水;,.\" \n]{0,300}") {
        let s = sheet(&rows);
        let reading = screen_sheet(&s, Some(&network()));
        // A row reads to a test, findings, or is blank; never both silently.
        for test in &reading.tests {
            prop_assert!(test.row < s.row_count());
        }
        let again = FieldSheet::parse(&s.to_csv_string(), "again.csv").unwrap();
        prop_assert_eq!(again.to_csv_string(), s.to_csv_string());
    }
}

#[test]
fn a_million_rows_load_and_read() {
    let mut text = String::with_capacity(40_000_000);
    text.push_str(HEADER);
    text.push('\n');
    for i in 0..1_000_000 {
        text.push_str(&format!("T{i},,,H1,H2,60,45,1000,,,,,\n"));
    }
    let s = FieldSheet::parse(&text, "big.csv").unwrap();
    assert_eq!(s.row_count(), 1_000_000);
    assert_eq!(s.line(999_999), Some(1_000_001));
    let reading = read_tests(&s);
    assert_eq!(reading.tests.len(), 1_000_000);
    assert!(reading.findings.is_empty());
}

// ---- reading ----

#[test]
fn several_hydrants_with_computed_flows() {
    let s = sheet("T1,,,H1,H2;H3;H10,70,50,1000;;,;36;25,2.5,0.9;0.9;0.8,,\n");
    let reading = read_tests(&s);
    assert!(reading.findings.is_empty(), "{:?}", reading.findings);
    let test = &reading.tests[0];
    assert_eq!(test.flowing.len(), 3);
    assert!(!test.flowing[0].computed && test.flowing[1].computed);
    // NFPA 291 pitot formula, hand arithmetic: 29.83 * 0.9 * 2.5^2 * sqrt(36) = 1006.76 gpm and
    // 29.83 * 0.8 * 2.5^2 * sqrt(25) = 745.75 gpm.
    let us = UnitSystem::Us;
    assert!((test.flowing[1].flow(us) - 1006.7625).abs() < 1e-6);
    assert!((test.flowing[2].flow(us) - 745.75).abs() < 1e-6);
    assert!((test.total_flow() - (1000.0 + 1006.7625 + 745.75)).abs() < 1e-6);
    assert!((test.static_pressure() - 70.0).abs() < 1e-9);
    assert!(!test.flowing[0].coefficient_defaulted);
}

#[test]
fn blank_coefficient_is_smooth_outlet() {
    let s = sheet("T1,,,H1,H2,70,50,,36,2.5,,,\n");
    let test = &read_tests(&s).tests[0];
    assert!(test.flowing[0].coefficient_defaulted);
    assert_eq!(test.flowing[0].coefficient, 0.90);
    assert!((test.total_flow() - pitot_flow_gpm(0.90, 2.5, 36.0)).abs() < 1e-9);
}

#[test]
fn si_sheet_reads_in_si() {
    let s = FieldSheet::parse(
        "test,residual_node,flow_node,static_kpa,residual_kpa,flow_lps,pitot_kpa,outlet_mm\nS1,J1,J2,500,300,,250,64\n",
        "si.csv",
    )
    .unwrap();
    let test = &read_tests(&s).tests[0];
    // Orifice law with the trade constant: 1.11093e-3 * 0.9 * 64^2 * sqrt(250) = 64.76 L/s.
    assert!((test.total_flow() - 1.110_93e-3 * 0.9 * 4096.0 * 250f64.sqrt()).abs() < 1e-9);
    // 500 kPa is 50.99 m of water (ISO 80000-3 standard gravity).
    assert!((test.static_head_m - 500.0 / 9.80665).abs() < 1e-9);
}

#[test]
fn blank_rows_are_not_tests() {
    let reading = read_tests(&sheet(",,,,,,,,,,,,\nT1,,,H1,H2,60,45,1000,,,,,\n"));
    assert!(reading.findings.is_empty());
    assert_eq!(reading.tests[0].line, 3);
}

// ---- screening: every rule, triggered, with its reason ----

#[test]
fn rule_empty_test_id() {
    let f = one_finding(",,,H1,H2,60,45,1000,,,,,\n", Rule::EmptyTestId);
    assert_eq!(
        (f.severity, f.column.as_str(), f.line),
        (Severity::Error, "test", 2)
    );
    assert_eq!(f.reason, "the test id is blank; give every test an id");
}

#[test]
fn rule_empty_residual_node() {
    let f = one_finding("T1,,,,H2,60,45,1000,,,,,\n", Rule::EmptyResidualNode);
    assert_eq!(f.column, "residual_node");
    assert!(f.reason.contains("residual node is blank"), "{}", f.reason);
}

#[test]
fn rule_empty_flow_node() {
    let f = one_finding("T1,,,H1,,60,45,1000,,,,,\n", Rule::EmptyFlowNode);
    assert!(
        f.reason.contains("no flowing hydrant is named"),
        "{}",
        f.reason
    );
    let f = one_finding("T1,,,H1,H2;;H3,60,45,1000;1;1,,,,,\n", Rule::EmptyFlowNode);
    assert_eq!(f.reason, "entry 2 of flow_node is blank");
}

#[test]
fn rule_missing_pressure() {
    let f = one_finding("T1,,,H1,H2,,45,1000,,,,,\n", Rule::MissingPressure);
    assert_eq!(
        (f.column.as_str(), f.reason.as_str()),
        ("static_psi", "the static pressure is blank")
    );
}

#[test]
fn rule_not_a_number() {
    let f = one_finding("T1,,,H1,H2,60,4S,1000,,,,,\n", Rule::NotNumber);
    assert_eq!(f.column, "residual_psi");
    assert_eq!(f.reason, "residual pressure \"4S\" is not a number");
    // "inf" and "NaN" parse as floats but are not readings.
    let f = one_finding("T1,,,H1,H2,60,45,inf,,,,,\n", Rule::NotNumber);
    assert_eq!(f.column, "flow_gpm");
    // A bad flow is not also reported as missing.
    assert!(findings_of("T1,,,H1,H2,60,45,abc,,,,,\n", Rule::NoFlow).is_empty());
}

#[test]
fn rule_negative() {
    let f = one_finding("T1,,,H1,H2,60,45,-1000,,,,,\n", Rule::Negative);
    assert_eq!(
        (f.severity, f.column.as_str()),
        (Severity::Error, "flow_gpm")
    );
    assert!(f.reason.contains("flow -1000 is negative"), "{}", f.reason);
}

#[test]
fn rule_zero() {
    let f = one_finding("T1,,,H1,H2,60,45,,30,0,,,\n", Rule::Zero);
    assert_eq!(f.column, "outlet_in");
    assert!(
        f.reason.contains("outlet diameter of hydrant H2 is zero"),
        "{}",
        f.reason
    );
}

#[test]
fn rule_coefficient_above_one() {
    let f = one_finding("T1,,,H1,H2,60,45,,30,2.5,9,,\n", Rule::CoefficientAboveOne);
    assert!(
        f.reason.contains("coefficient 9 of hydrant H2 is above 1"),
        "{}",
        f.reason
    );
}

#[test]
fn rule_list_lengths() {
    let f = one_finding("T1,,,H1,H2;H3,60,45,1000;900;800,,,,,\n", Rule::ListLengths);
    assert_eq!(f.column, "flow_gpm");
    assert_eq!(
        f.reason,
        "flow_node lists 2 hydrants but flow_gpm lists 3 values; give one per hydrant, separated by ;"
    );
    let f = one_finding(
        "T1,,,H1,H2;H3;H10,60,45,,30;30;30,2.5;2.5,,,\n",
        Rule::ListLengths,
    );
    assert_eq!(f.column, "outlet_in");
    assert!(f.reason.contains("(or one value for all)"), "{}", f.reason);
    // One outlet for all is fine.
    assert!(findings_of("T1,,,H1,H2;H3,60,45,,30;30,2.5,,,\n", Rule::ListLengths).is_empty());
}

#[test]
fn rule_no_flow() {
    let f = one_finding("T1,,,H1,H2,60,45,,30,,,,\n", Rule::NoFlow);
    assert_eq!(
        f.reason,
        "no flow for hydrant H2: give flow_gpm, or pitot_psi and outlet_in"
    );
}

#[test]
fn rule_repeated_flowing_hydrant() {
    let f = one_finding(
        "T1,,,H1,H2;H2,60,40,500;500,,,,,\n",
        Rule::RepeatedFlowingHydrant,
    );
    assert!(
        f.reason.contains("hydrant H2 is listed twice"),
        "{}",
        f.reason
    );
}

#[test]
fn rule_residual_not_below_static() {
    let f = one_finding("T1,,,H1,H2,40,45,700,,,,,\n", Rule::ResidualNotBelowStatic);
    assert_eq!(
        (f.severity, f.column.as_str()),
        (Severity::Error, "residual_psi")
    );
    assert!(
        f.reason
            .starts_with("residual 45 psi is not below static 40 psi"),
        "{}",
        f.reason
    );
    let reading = screen_sheet(&sheet("T1,,,H1,H2,40,45,700,,,,,\n"), None);
    assert_eq!(reading.usable_tests().count(), 0);
}

#[test]
fn rule_flowing_is_residual() {
    let f = one_finding("T1,,,H1,H1,60,45,1000,,,,,\n", Rule::FlowingIsResidual);
    assert_eq!(f.column, "flow_node");
    assert!(
        f.reason
            .contains("flowing hydrant H1 is also the residual hydrant"),
        "{}",
        f.reason
    );
}

#[test]
fn rule_unknown_node_suggests_closest() {
    let f = one_finding("T1,,,H1,H12,60,45,1000,,,,,\n", Rule::UnknownNode);
    assert_eq!(f.column, "flow_node");
    // Edit distance 1 to H1, H10, H11 (and 1 to H2: substitution); nearest three, ties by id.
    assert_eq!(
        f.reason,
        "node H12 is not in the network (closest: H1, H10, H11)"
    );
    let f = one_finding("T1,,,h3,H2,60,45,1000,,,,,\n", Rule::UnknownNode);
    assert!(f.reason.contains("(closest: H3,"), "{}", f.reason);
}

#[test]
fn rule_not_a_junction() {
    let f = one_finding("T1,,,R1,H2,60,45,1000,,,,,\n", Rule::NotAJunction);
    assert!(
        f.reason.contains("R1 is a reservoir or tank"),
        "{}",
        f.reason
    );
}

#[test]
fn rule_unknown_condition() {
    let f = one_finding("T1,,,H1,H2,60,45,1000,,,,night,\n", Rule::UnknownCondition);
    assert_eq!(f.column, "condition");
    assert_eq!(
        f.reason,
        "condition night is not a [[condition]] of the network (the network has peak)"
    );
    assert!(findings_of("T1,,,H1,H2,60,45,1000,,,,peak,\n", Rule::UnknownCondition).is_empty());
}

#[test]
fn sheet_only_screening_skips_network_rules() {
    let reading = screen_sheet(&sheet("T1,,,Z9,H2,60,45,1000,,,,night,\n"), None);
    assert!(reading.findings.is_empty(), "{:?}", reading.findings);
}

#[test]
fn rule_small_drop() {
    // Common practice, no source: a drop of at least 10 psi.
    let f = one_finding("T1,,,H1,H2,65,56,800,,,,,\n", Rule::SmallDrop);
    assert_eq!(f.severity, Severity::Warning);
    assert!(
        f.reason.starts_with("pressure drop 9 psi is under 10 psi"),
        "{}",
        f.reason
    );
    assert!(findings_of("T1,,,H1,H2,65,55,800,,,,,\n", Rule::SmallDrop).is_empty());
    // 70 kPa on an si sheet.
    let si = FieldSheet::parse(
        "test,residual_node,flow_node,static_kpa,residual_kpa,flow_lps\nS1,H1,H2,450,390,50\n",
        "si.csv",
    )
    .unwrap();
    let f: Vec<_> = screen_sheet(&si, None).findings;
    assert_eq!(f.len(), 1);
    assert!(
        f[0].reason
            .starts_with("pressure drop 60 kPa is under 70 kPa"),
        "{}",
        f[0].reason
    );
    // The test is kept.
    assert_eq!(screen_sheet(&si, None).usable_tests().count(), 1);
}

#[test]
fn rule_static_mismatch() {
    let test = read_tests(&sheet("T1,,,H1,H2,60,45,1000,,,,,\n"))
        .tests
        .remove(0);
    let us = UnitSystem::Us;
    // Common practice, no source: more than 10 psi between model and gauge.
    let f = check_modelled_static(&test, us.pressure_to_head_m(72.0)).unwrap();
    assert_eq!(
        (f.severity, f.column.as_str(), f.rule),
        (Severity::Warning, "static_psi", Rule::StaticMismatch)
    );
    assert!(
        f.reason
            .starts_with("modelled static 72 psi misses the measured 60 psi by 12 psi"),
        "{}",
        f.reason
    );
    assert!(check_modelled_static(&test, us.pressure_to_head_m(69.0)).is_none());
    assert!(check_modelled_static(&test, us.pressure_to_head_m(49.0)).is_some());
}

#[test]
fn rule_implausible_flow() {
    // 2000 gpm through a 2.5 in outlet needs (2000 / (29.83 * 0.9 * 6.25))^2 = 142.07 psi, above 60 psi.
    let f = one_finding("T1,,,H1,H2,60,45,2000,,2.5,,,\n", Rule::ImplausibleFlow);
    assert_eq!(
        (f.severity, f.column.as_str()),
        (Severity::Warning, "flow_gpm")
    );
    assert!(
        f.reason
            .contains("needs a pitot pressure of 142.07 psi, above the static 60 psi"),
        "{}",
        f.reason
    );
    // A pitot reading above the static: an error of its own (the flow computed from it is wrong),
    // as docs/errors.md lists it.
    let f = one_finding("T1,,,H1,H2,60,45,1500,65,,,,\n", Rule::PitotAboveStatic);
    assert_eq!(
        (f.severity, f.column.as_str()),
        (Severity::Error, "pitot_psi")
    );
    assert!(
        f.reason
            .starts_with("pitot reading 65 psi at hydrant H2 is above the static 60 psi"),
        "{}",
        f.reason
    );
    // 1000 gpm through 2.5 in needs 35.5 psi: plausible at 60 psi static.
    assert!(findings_of("T1,,,H1,H2,60,45,1000,,2.5,,,\n", Rule::ImplausibleFlow).is_empty());
}

#[test]
fn rule_duplicate_test_id() {
    let found = findings_of(
        "T1,,,H1,H2,60,45,1000,,,,,\nT1,,,H1,H3,61,45,1000,,,,,\n",
        Rule::DuplicateTestId,
    );
    assert_eq!(found.len(), 1);
    assert_eq!(found[0].line, 3);
    assert_eq!(
        found[0].reason,
        "test id T1 is also used on line 2; give every test its own id"
    );
}

#[test]
fn one_bad_row_hides_nothing() {
    let reading = screen_sheet(
        &sheet(
            "T1,,,H1,H2,sixty,45,1000,,,,,\nT2,,,H1,H2,60,45,1000,,,,,\nT3,,,H1,,60,45,1000,,,,,\n",
        ),
        Some(&network()),
    );
    assert_eq!(reading.tests.len(), 1);
    assert_eq!(
        reading.usable_tests().next().map(|t| t.test_id.as_str()),
        Some("T2")
    );
    let lines: Vec<usize> = reading.findings.iter().map(|f| f.line).collect();
    assert_eq!(lines, vec![2, 4]);
}

// ---- the fireflow command ----

fn roughcal(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .args(args)
        .output()
        .expect("binary runs")
}

fn data(name: &str) -> String {
    format!("{}/tests/data/{name}", env!("CARGO_MANIFEST_DIR"))
}

#[test]
fn fireflow_json() {
    let out = roughcal(&["fireflow", &data("fireflow-us.csv"), "--json"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let json: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(json["target"], 20.0);
    assert_eq!(json["units"]["system"], "us");
    let tests = json["tests"].as_array().unwrap();
    assert_eq!(tests.len(), 4);
    let number = |v: &serde_json::Value| v.as_f64().unwrap();
    // NFPA 291: 1000 gpm, 60 static, 45 residual, to 20: 1000 * (40/15)^0.54 = 1698.3 gpm (by logs:
    // ln(40/15) = 0.98083, * 0.54 = 0.52965, e^0.52965 = 1.6983).
    assert_eq!(tests[0]["test"], "T1");
    assert_eq!(number(&tests[0]["total_flow"]), 1000.0);
    assert!((number(&tests[0]["available_flow"]) - 1698.3).abs() < 0.1);
    assert_eq!(tests[0]["findings"].as_array().unwrap().len(), 0);
    // Two outlets from pitot readings: 29.83*0.9*6.25*(6 + 5) = 1845.73 gpm; to 20 psi from 72/50:
    // (52/22)^0.54 = e^(0.54 * 0.86020) = e^0.46451 = 1.5912, so 2937.0 gpm.
    assert!((number(&tests[1]["total_flow"]) - 1845.73).abs() < 0.01);
    assert!((number(&tests[1]["available_flow"]) - 2937.0).abs() < 0.5);
    // A small drop is a warning, kept.
    let f = &tests[2]["findings"][0];
    assert_eq!(
        (f["severity"].as_str(), f["column"].as_str()),
        (Some("warning"), Some("residual_psi"))
    );
    assert!(f["reason"].as_str().unwrap().contains("under 10 psi"));
    // Residual above static: an error, no available flow.
    assert!(tests[3]["available_flow"].is_null());
    assert_eq!(tests[3]["findings"][0]["severity"], "error");
    assert_eq!(number(&tests[3]["static"]), 40.0);
}

#[test]
fn fireflow_table_and_target() {
    let out = roughcal(&["fireflow", &data("fireflow-us.csv"), "--target", "30"]);
    assert!(out.status.success());
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains("licensed engineer"), "{text}");
    assert!(text.contains("fire authority govern"), "{text}");
    // NFPA 291 to 30 psi: 1000 * (30/15)^0.54 = 1000 * 2^0.54 = 1454 gpm.
    let t1 = text.lines().find(|l| l.starts_with("T1 ")).unwrap();
    assert!(t1.split_whitespace().any(|w| w == "1454"), "{t1}");
    assert!(
        text.contains("line 5 T4: error: residual_psi: residual 45 psi is not below static 40 psi"),
        "{text}"
    );
}

#[test]
fn fireflow_si_default_target_and_none_available() {
    let out = roughcal(&["fireflow", &data("fireflow-si.csv"), "--json"]);
    let json: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(json["target"], 140.0);
    // NFPA 291: 60 L/s * ((500-140)/(500-300))^0.54 = 60 * 1.8^0.54; by logs ln 1.8 = 0.58779,
    // * 0.54 = 0.31741, e^0.31741 = 1.37356, so 82.41 L/s.
    let q = json["tests"][0]["available_flow"].as_f64().unwrap();
    assert!((q - 82.41).abs() < 0.01, "{q}");
    let out = roughcal(&[
        "fireflow",
        &data("fireflow-si.csv"),
        "--json",
        "--target",
        "600",
    ]);
    let json: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(json["tests"][0]["available_flow"], 0.0);
    assert!(
        json["tests"][0]["available_note"]
            .as_str()
            .unwrap()
            .contains("not below the static")
    );
}

#[test]
fn fireflow_load_error_exits_1() {
    let path = data("mixed-units.csv");
    let out = roughcal(&["fireflow", &path]);
    assert_eq!(out.status.code(), Some(1));
    assert_eq!(
        String::from_utf8(out.stderr).unwrap().trim_end(),
        format!(
            "roughcal: {path}:1: residual_kpa: mixed units: this column is si but `static_psi` is us; a sheet is all us or all si"
        )
    );
}

#[test]
fn save_into_a_missing_folder_is_an_error_value() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("no-such-folder").join("sheet.csv");
    let error = save_sheet(&FieldSheet::empty(UnitSystem::Us), &path).unwrap_err();
    assert!(matches!(error.kind, SheetErrorKind::Write(_)));
    assert!(
        error.to_string().starts_with(&format!(
            "{}: cannot write a temporary file",
            path.display()
        )),
        "{error}"
    );
}
