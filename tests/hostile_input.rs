//! Files somebody edited by hand or exported from a spreadsheet: the network loader, the sheet loader,
//! the coefficient-set loader and what runs on what they accept must never panic or hang, and every
//! rejection names the file and a line.
//!
//! The inputs: every prefix of a valid file, values replaced by wrong types, NaN, infinities, huge
//! numbers, empty and duplicate ids, ids with odd Unicode (bidi marks, combining characters, NUL,
//! emoji), and binary junk. Case counts are bounded so `cargo test` stays quick.

use proptest::prelude::*;
use roughcal::fieldtest::{FieldSheet, screen_sheet};
use roughcal::hydraulics::{GradientSolver, OperatingState};
use roughcal::network::file::{NetworkFileError, parse_network};
use roughcal::report::coefficients::{
    CoefficientError, CoefficientSet, parse_coefficients_csv, parse_coefficients_toml,
};

/// A small valid network of our own: a tank, a booster, a loop, a check valve, a group, a condition.
const NETWORK: &str = include_str!("data/base.toml");

const SHEET: &str = "test,date,time,residual_node,flow_node,static_psi,residual_psi,flow_gpm,pitot_psi,outlet_in,coefficient,condition,note
HT-1,2026-10-13,08:00,J-1,J-2,70.5,55.0,,14.0,2.5,0.9,,first
HT-2,2026-10-13,08:40,J-2,J-3;J-1,68.0,41.0,900;650,,,,peak,two hydrants
HT-3,2026-10-13,09:10,J-3,J-2,66,50,1000,,,,,
";

/// Values a spreadsheet or a hand edit puts where a number, a string or a list belongs.
const HOSTILE_VALUES: &[&str] = &[
    "nan",
    "+nan",
    "inf",
    "-inf",
    "1e308",
    "1e400",
    "-1e308",
    "99999999999999999999999",
    "0",
    "-0.0",
    "\"nan\"",
    "\"\"",
    "\"12,5\"",
    "true",
    "[]",
    "[1, 2]",
    "{}",
    "{ a = 1 }",
    "1979-05-27",
    "\"\\u0000\"",
    "\"\\u202e1-J\"",
    "",
];

/// Ids with odd Unicode, written as TOML basic strings (escapes where TOML needs them).
const ODD_IDS: &[&str] = &[
    "",
    " ",
    "J-1\\u200f",
    "\\u202eJ-1",
    "J\\u0301-1",
    "J-1\\u0000",
    "\u{1f6b0}-1",
    "\\u00a0J-1",
    "J-1\\t",
    "\u{5d0}\u{5d1}-1",
    "J-1\\ufeff",
];

/// The rejection names the file and a line: `net.toml:LINE:COL: ...` for every diagnostic.
fn assert_network_outcome(text: &str) {
    match parse_network(text, "net.toml") {
        Ok(loaded) => {
            // What the loader accepts, the solver must take without a panic; an answer or an error.
            let net = &loaded.network;
            if let Ok(solver) = GradientSolver::new(net) {
                for name in std::iter::once(None)
                    .chain(net.conditions.iter().map(|c| Some(c.name.as_str())))
                {
                    if let Ok(state) = OperatingState::for_condition_name(net, name)
                        && let Ok(solution) = solver.solve(net, &state, &net.c_factors(), None)
                    {
                        assert!(solution.max_imbalance_m3s.is_finite());
                        for j in 0..net.junctions.len() {
                            if let Some(p) = solution.pressure_head_m(net, j) {
                                assert!(p.is_finite(), "a reported pressure is finite");
                            }
                        }
                    }
                }
            }
        }
        Err(NetworkFileError::Invalid { diagnostics }) => {
            assert!(!diagnostics.is_empty());
            let lines = text.lines().count().max(1) + 1;
            for d in &diagnostics {
                let shown = d.to_string();
                assert!(
                    shown.starts_with(&format!("net.toml:{}:{}: ", d.line, d.column)),
                    "{shown}"
                );
                assert!(
                    d.line >= 1 && d.line <= lines,
                    "line out of the file: {shown}"
                );
                assert!(d.column >= 1, "{shown}");
            }
        }
        Err(other) => panic!("parse_network reads no file, yet: {other}"),
    }
}

/// A rejected sheet names the file and a line (`s.csv:LINE: ...`); an accepted one screens without a
/// panic, every finding has a line and a column, and no usable test carries a non-finite number.
fn assert_sheet_outcome(text: &str) {
    match FieldSheet::parse(text, "s.csv") {
        Ok(sheet) => {
            let reading = screen_sheet(&sheet, None);
            for finding in &reading.findings {
                assert!(finding.line >= 1, "{finding:?}");
                assert!(!finding.column.is_empty(), "{finding:?}");
            }
            for test in reading.usable_tests() {
                assert!(
                    test.static_pressure().is_finite()
                        && test.residual_pressure().is_finite()
                        && test.total_flow().is_finite(),
                    "a usable test with a non-finite reading: {test:?}"
                );
                if let Some(flow) = test.available_flow(20.0).value() {
                    assert!(flow.is_finite(), "available flow {flow} for {test:?}");
                }
            }
            let written = sheet.to_csv_string();
            let again = FieldSheet::parse(&written, "s.csv").expect("a written sheet parses");
            assert_eq!(again.to_csv_string(), written);
        }
        Err(error) => {
            let shown = error.to_string();
            let line = error
                .line
                .expect("a sheet rejected for its content names a line");
            assert!(shown.starts_with(&format!("s.csv:{line}: ")), "{shown}");
        }
    }
}

/// Byte offsets of `key = ` values in a TOML text, for substitution.
fn value_spans(text: &str) -> Vec<(usize, usize)> {
    let mut spans = Vec::new();
    let mut offset = 0;
    for line in text.split_inclusive('\n') {
        if let Some(eq) = line.find(" = ") {
            let start = offset + eq + 3;
            let end = offset + line.trim_end_matches('\n').len();
            spans.push((start, end));
        }
        offset += line.len();
    }
    spans
}

/// `base` with `cut` bytes from `at` replaced by `junk`, read as lossy UTF-8.
fn damaged(base: &str, at: usize, cut: usize, junk: &[u8]) -> String {
    let mut bytes = base.as_bytes().to_vec();
    let end = (at + cut).min(bytes.len());
    bytes.splice(at..end, junk.iter().copied());
    String::from_utf8_lossy(&bytes).into_owned()
}

/// `lines` as a CSV text, with cell `column` of line `row` (0 is the header) replaced by `value`.
fn with_cell(lines: &[&str], row: usize, column: usize, value: &str) -> String {
    let mut text = String::new();
    for (r, line) in lines.iter().enumerate() {
        if r == row {
            let mut cells: Vec<&str> = line.split(',').collect();
            cells[column] = value;
            text.push_str(&cells.join(","));
        } else {
            text.push_str(line);
        }
        text.push('\n');
    }
    text
}

/// `header`, then every row with each cell quoted.
fn quoted_rows(header: &str, rows: &[Vec<String>]) -> String {
    let mut text = format!("{header}\n");
    for cells in rows {
        let quoted: Vec<String> = cells
            .iter()
            .map(|c| format!("\"{}\"", c.replace('"', "\"\"")))
            .collect();
        text.push_str(&quoted.join(","));
        text.push('\n');
    }
    text
}

#[test]
fn the_bases_are_valid() {
    let loaded = parse_network(NETWORK, "net.toml").unwrap();
    assert_eq!(loaded.network.junctions.len(), 4);
    let sheet = FieldSheet::parse(SHEET, "s.csv").unwrap();
    let reading = screen_sheet(&sheet, Some(&loaded.network));
    assert_eq!(reading.usable_tests().count(), 3, "{:?}", reading.findings);
}

#[test]
fn every_prefix_of_a_network_file() {
    for end in (0..=NETWORK.len()).filter(|&i| NETWORK.is_char_boundary(i)) {
        assert_network_outcome(&NETWORK[..end]);
    }
}

#[test]
fn every_prefix_of_a_sheet() {
    for end in (0..=SHEET.len()).filter(|&i| SHEET.is_char_boundary(i)) {
        assert_sheet_outcome(&SHEET[..end]);
    }
}

#[test]
fn every_hostile_value_in_every_network_key() {
    for (start, end) in value_spans(NETWORK) {
        for value in HOSTILE_VALUES {
            let text = format!("{}{value}{}", &NETWORK[..start], &NETWORK[end..]);
            assert_network_outcome(&text);
        }
    }
}

#[test]
fn non_finite_and_huge_numbers_are_rejected_at_their_line() {
    for value in ["nan", "inf", "-inf", "-5"] {
        let text = NETWORK.replace("length = 600.0", &format!("length = {value}"));
        let error = parse_network(&text, "net.toml").expect_err(value);
        let line = NETWORK.lines().position(|l| l == "length = 600.0").unwrap() + 1;
        let shown = error.to_string();
        assert!(
            shown.contains(&format!("net.toml:{line}:")),
            "{value}: {shown}"
        );
        assert!(shown.contains("length"), "{value}: {shown}");
    }
}

#[test]
fn a_number_too_large_for_a_float_is_a_syntax_error_at_its_line() {
    let text = NETWORK.replace("length = 600.0", "length = 1e400");
    let shown = parse_network(&text, "net.toml").unwrap_err().to_string();
    assert!(shown.starts_with("net.toml:54:10: "), "{shown}");
    assert!(shown.contains("overflow"), "{shown}");
}

#[test]
fn odd_ids_everywhere_in_a_network() {
    for id in ODD_IDS {
        for target in ["\"J-2\"", "\"P-2\"", "\"ci-1950\"", "\"peak\""] {
            assert_network_outcome(&NETWORK.replace(target, &format!("\"{id}\"")));
            // Only the first use renamed: dangling references.
            assert_network_outcome(&NETWORK.replacen(target, &format!("\"{id}\""), 1));
        }
    }
}

#[test]
fn duplicate_keys_and_entries() {
    // A key twice in one table is a TOML error at the second one.
    let twice = NETWORK.replacen("head = 900.0", "head = 900.0\nhead = 901.0", 1);
    let shown = parse_network(&twice, "net.toml").unwrap_err().to_string();
    assert!(shown.starts_with("net.toml:7:"), "{shown}");
    // The same junction id twice is a diagnostic at the second.
    let dup = NETWORK.replace("id = \"J-4\"", "id = \"J-3\"");
    let shown = parse_network(&dup, "net.toml").unwrap_err().to_string();
    assert!(
        shown.contains("duplicate") && shown.contains("J-3"),
        "{shown}"
    );
    assert_network_outcome(&NETWORK.replace("[[pump]]", "[[pump]]\n[[pump]]"));
}

#[test]
fn every_hostile_value_in_every_sheet_cell() {
    let lines: Vec<&str> = SHEET.lines().collect();
    for (row, line) in lines.iter().enumerate().skip(1) {
        let cells: Vec<&str> = line.split(',').collect();
        for column in 0..cells.len() {
            for value in [
                "nan",
                "NaN",
                "inf",
                "-inf",
                "1e308",
                "1e400",
                "-1",
                "0",
                "1,5",
                "\"1,5\"",
                "abc",
                "",
                " ",
                ";",
                "\u{202e}J-1",
                "J\u{301}-1",
                "\u{1f6b0}",
                "1e-400",
                "0x10",
                "+5",
                ";;;",
                "1;",
            ] {
                assert_sheet_outcome(&with_cell(&lines, row, column, value));
            }
        }
    }
}

#[test]
fn spreadsheet_exports_with_semicolons_are_read_and_other_separators_named() {
    // A `;` export is read with `;` between cells (the separator is taken from the header line).
    let text = SHEET.replace(',', ";");
    let sheet = FieldSheet::parse(&text, "s.csv").unwrap();
    assert_eq!(sheet.delimiter(), b';');
    assert!(sheet.headers().len() > 1);
    // A separator roughcal does not read is refused with the separator named.
    let text = SHEET.replace(',', "|");
    let error = FieldSheet::parse(&text, "s.csv").unwrap_err();
    let shown = error.to_string();
    assert!(shown.starts_with("s.csv:1: "), "{shown}");
    assert!(shown.contains("cells seem separated by `|`"), "{shown}");
}

#[test]
fn a_nul_byte_is_rejected_at_its_line() {
    let text = SHEET.replace("first", "fi\0rst");
    let shown = FieldSheet::parse(&text, "s.csv").unwrap_err().to_string();
    assert!(shown.starts_with("s.csv:2: "), "{shown}");
}

fn network_mutation() -> impl Strategy<Value = String> {
    let spans = value_spans(NETWORK);
    (
        0..spans.len(),
        prop::sample::select(HOSTILE_VALUES),
        0..spans.len(),
        prop::sample::select(ODD_IDS),
    )
        .prop_map(move |(a, value, b, id)| {
            let (a, b) = (spans[a], spans[b]);
            // Two substitutions, the later one first so the earlier offsets hold.
            let (first, second) = if a.0 <= b.0 {
                ((a, value.to_string()), (b, format!("\"{id}\"")))
            } else {
                ((b, format!("\"{id}\"")), (a, value.to_string()))
            };
            let mut text = NETWORK.to_string();
            if first.0 != second.0 {
                text.replace_range(second.0.0..second.0.1, &second.1);
            }
            text.replace_range(first.0.0..first.0.1, &first.1);
            text
        })
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    #[test]
    fn network_with_two_hostile_values(text in network_mutation()) {
        assert_network_outcome(&text);
    }

    #[test]
    fn network_with_a_damaged_stretch(
        at in 0usize..NETWORK.len(),
        cut in 0usize..80,
        junk in prop::collection::vec(any::<u8>(), 0..24),
    ) {
        assert_network_outcome(&damaged(NETWORK, at, cut, &junk));
    }

    #[test]
    fn binary_junk_as_a_network(bytes in prop::collection::vec(any::<u8>(), 0..2000)) {
        assert_network_outcome(&String::from_utf8_lossy(&bytes));
    }

    #[test]
    fn sheet_with_a_damaged_stretch(
        at in 0usize..SHEET.len(),
        cut in 0usize..40,
        junk in "[\\PC\u{0}\u{202e}\u{301};,\"\r\n]{0,12}",
    ) {
        assert_sheet_outcome(&damaged(SHEET, at, cut, junk.as_bytes()));
    }

    #[test]
    fn binary_junk_as_a_sheet(bytes in prop::collection::vec(any::<u8>(), 0..2000)) {
        assert_sheet_outcome(&String::from_utf8_lossy(&bytes));
    }

    #[test]
    fn sheet_rows_of_any_cells(
        rows in prop::collection::vec(
            prop::collection::vec("[-+0-9.eE;naif J]{0,8}|\\PC{0,6}", 0..16),
            0..12,
        ),
    ) {
        assert_sheet_outcome(&quoted_rows(SHEET.lines().next().unwrap(), &rows));
    }
}

/// Regression: 1e308 psi was a finite reading whose metres of water column are infinite, and it passed
/// screening as a usable test.
#[test]
fn a_reading_too_large_to_convert_is_a_finding_not_an_infinite_head() {
    let text = SHEET.replace("70.5", "1e308");
    let sheet = FieldSheet::parse(&text, "s.csv").unwrap();
    let reading = screen_sheet(&sheet, None);
    let finding = reading
        .findings
        .iter()
        .find(|f| f.line == 2 && f.column == "static_psi")
        .expect("a finding on the static of line 2");
    assert!(finding.reason.contains("too large"), "{finding:?}");
    assert!(reading.usable_tests().all(|t| t.test_id != "HT-1"));
}

/// An id with a NUL, a tab or a bidi override looks like another id on screen (or scrambles the line it
/// is printed in): refused at its line, without echoing the character.
#[test]
fn ids_with_hidden_characters_are_refused() {
    for (written, code) in [
        ("J-4\\u0000", "U+0000"),
        ("\\u202eJ-4", "U+202E"),
        ("J-4\\u200f", "U+200F"),
        ("J-4\\t", "U+0009"),
    ] {
        let text = NETWORK.replace("id = \"J-4\"", &format!("id = \"{written}\""));
        let shown = parse_network(&text, "net.toml").unwrap_err().to_string();
        let line = NETWORK.lines().position(|l| l == "id = \"J-4\"").unwrap() + 1;
        assert!(shown.contains(&format!("net.toml:{line}:")), "{shown}");
        assert!(
            shown.contains("text-direction characters") && shown.contains(code),
            "{shown}"
        );
        assert!(
            !shown.contains('\u{202e}') && !shown.contains('\0'),
            "{shown}"
        );
        // The uses of `J-4` stay dangling (the declared id is another string): two more diagnostics.
        let diagnostics = parse_network(&text, "net.toml").unwrap_err();
        assert_eq!(diagnostics.diagnostics().len(), 3, "{shown}");
    }
    // Letters of any script, combining accents and emoji are ordinary ids.
    for id in ["J\u{301}-4", "\u{5d0}\u{5d1}-4", "\u{1f6b0}-4"] {
        let text = NETWORK.replace("\"J-4\"", &format!("\"{id}\""));
        assert!(parse_network(&text, "net.toml").is_ok(), "{id}");
    }
}

/// A coefficient set as `calibrate` writes it: three groups, every key used once.
const COEFFICIENTS_TOML: &str = "# roughcal coefficient set for net.toml
[[group]]
name = \"ci-1950\"
c = 72.41370511
min = 40.0
max = 130.0
locked = false
start = 105.2
std_error = 2.31
ci_low = 67.9
ci_high = 76.9
tests = 5
status = \"fitted\"

[[group]]
name = \"di-1990\"
c = 130
min = 60
max = 150
locked = true
tests = 0
status = \"locked\"

[[group]]
name = \"pvc\"
c = 150.0
status = \"at bound\"
";

const COEFFICIENTS_CSV: &str = "group,start,fitted,std_error,ci_low,ci_high,tests,status
ci-1950,105.2,72.41370511,2.31,67.9,76.9,5,fitted
di-1990,130,130,,,,0,locked
pvc,140,150,,,,3,at bound
";

/// Cells a spreadsheet or a hand edit puts in a coefficient CSV.
const HOSTILE_CELLS: &[&str] = &[
    "nan",
    "NaN",
    "inf",
    "-inf",
    "1e308",
    "1e400",
    "-1",
    "-0.0",
    "0",
    "1,5",
    "\"1,5\"",
    "abc",
    "",
    " ",
    "true",
    "\"\"",
    "\u{202e}ci-1950",
    "ci\u{301}-1950",
    "\u{1f6b0}",
    "ci\0",
    "1e-400",
    "0x10",
    "+5",
    "\"a\"\"b\"",
];

/// A rejected coefficient set names the file and a line inside the file (`set.toml:LINE: ...`); an
/// accepted one holds at least one group, each with a positive finite C, a non-empty set of distinct
/// names and a line inside the file.
fn assert_coefficients_outcome(result: Result<CoefficientSet, CoefficientError>, text: &str) {
    let lines = text.matches('\n').count() + 1;
    match result {
        Ok(set) => {
            assert!(!set.entries.is_empty());
            for (i, entry) in set.entries.iter().enumerate() {
                assert!(entry.c.is_finite() && entry.c > 0.0, "{entry:?}");
                assert!(entry.line >= 1 && entry.line <= lines, "{entry:?}");
                assert!(
                    set.entries[..i].iter().all(|e| e.name != entry.name),
                    "{entry:?} twice"
                );
            }
        }
        Err(error) => {
            let shown = error.to_string();
            let line = error
                .line
                .unwrap_or_else(|| panic!("a rejected set names a line: {shown}"));
            assert!(line >= 1 && line <= lines, "line out of the file: {shown}");
            assert!(
                shown.starts_with(&format!("{}:{line}: ", error.file)),
                "{shown}"
            );
        }
    }
}

fn assert_coefficients_toml(text: &str) {
    let result = parse_coefficients_toml(text, "set.toml");
    if let Err(e) = &result {
        assert_eq!(e.file, "set.toml");
    }
    assert_coefficients_outcome(result, text);
}

fn assert_coefficients_csv(text: &str) {
    let result = parse_coefficients_csv(text, "set.csv");
    if let Err(e) = &result {
        assert_eq!(e.file, "set.csv");
    }
    assert_coefficients_outcome(result, text);
}

#[test]
fn the_coefficient_bases_are_valid() {
    let set = parse_coefficients_toml(COEFFICIENTS_TOML, "set.toml").unwrap();
    assert_eq!(set.entries.len(), 3);
    let set = parse_coefficients_csv(COEFFICIENTS_CSV, "set.csv").unwrap();
    assert_eq!(set.entries.len(), 3);
}

#[test]
fn every_prefix_of_a_coefficient_set() {
    for end in (0..=COEFFICIENTS_TOML.len()).filter(|&i| COEFFICIENTS_TOML.is_char_boundary(i)) {
        assert_coefficients_toml(&COEFFICIENTS_TOML[..end]);
    }
    for end in (0..=COEFFICIENTS_CSV.len()).filter(|&i| COEFFICIENTS_CSV.is_char_boundary(i)) {
        assert_coefficients_csv(&COEFFICIENTS_CSV[..end]);
    }
}

#[test]
fn every_hostile_value_in_every_coefficient_key() {
    let spans = value_spans(COEFFICIENTS_TOML);
    assert_eq!(spans.len(), 21);
    for (start, end) in spans {
        for value in HOSTILE_VALUES.iter().chain(ODD_IDS) {
            for written in [value.to_string(), format!("\"{value}\"")] {
                let text = format!(
                    "{}{written}{}",
                    &COEFFICIENTS_TOML[..start],
                    &COEFFICIENTS_TOML[end..]
                );
                assert_coefficients_toml(&text);
            }
        }
    }
}

#[test]
fn every_hostile_cell_in_every_coefficient_column() {
    let lines: Vec<&str> = COEFFICIENTS_CSV.lines().collect();
    for (row, line) in lines.iter().enumerate() {
        let cells: Vec<&str> = line.split(',').collect();
        for column in 0..cells.len() {
            for value in HOSTILE_CELLS {
                assert_coefficients_csv(&with_cell(&lines, row, column, value));
            }
        }
    }
}

/// Line of the first occurrence of `wanted` in `text`, 1-based.
fn line_number(text: &str, wanted: &str) -> usize {
    let offset = text.find(wanted).unwrap();
    text[..offset].matches('\n').count() + 1
}

/// The base TOML set with the first `replaced` changed to `replacement` is refused with
/// `set.toml:LINE: expected...`, LINE being the line of `at` in the base.
fn assert_toml_refused_at(replaced: &str, replacement: &str, at: &str, expected: &str) {
    let text = COEFFICIENTS_TOML.replacen(replaced, replacement, 1);
    let shown = parse_coefficients_toml(&text, "set.toml")
        .unwrap_err()
        .to_string();
    let line = line_number(COEFFICIENTS_TOML, at);
    assert!(
        shown.starts_with(&format!("set.toml:{line}: {expected}")),
        "{replacement}: {shown}"
    );
}

#[test]
fn non_positive_and_non_finite_coefficients_are_refused_at_their_line() {
    for value in ["nan", "inf", "-inf", "-5", "0", "-0.0"] {
        assert_toml_refused_at(
            "c = 130\n",
            &format!("c = {value}\n"),
            "c = 130\n",
            "c: must be a positive finite number",
        );
    }
    let row = line_number(COEFFICIENTS_CSV, "pvc,140,150,,,,3,at bound");
    for value in ["nan", "NaN", "inf", "-inf", "1e400", "-1", "0"] {
        let text = COEFFICIENTS_CSV.replace("pvc,140,150,", &format!("pvc,140,{value},"));
        let shown = parse_coefficients_csv(&text, "set.csv")
            .unwrap_err()
            .to_string();
        assert!(
            shown.starts_with(&format!(
                "set.csv:{row}: fitted: must be a positive finite number"
            )),
            "{value}: {shown}"
        );
    }
    // A negative standard error is refused too.
    assert_toml_refused_at(
        "std_error = 2.31",
        "std_error = -2.31",
        "std_error = 2.31",
        "std_error: must be a finite number of zero or more",
    );
}

#[test]
fn a_coefficient_too_large_for_a_float_is_a_syntax_error_at_its_line() {
    assert_toml_refused_at("c = 150.0", "c = 1e400", "c = 150.0", "not valid TOML");
}

#[test]
fn wrong_types_unknown_keys_and_duplicates_in_a_coefficient_set() {
    // (replaced, replacement, the line the error is at, what it says there)
    let cases = [
        (
            "c = 130\n",
            "c = \"130\"\n",
            "c = 130",
            "c: expected a number",
        ),
        (
            "locked = true",
            "locked = 1",
            "locked = true",
            "locked: expected true or false",
        ),
        (
            "tests = 0",
            "tests = -1",
            "tests = 0",
            "tests: expected a whole number >= 0",
        ),
        (
            "name = \"pvc\"",
            "name = [\"pvc\"]",
            "name = \"pvc\"",
            "name: expected a string",
        ),
        (
            "status = \"locked\"",
            "status = \"Locked\"",
            "status = \"locked\"",
            "status: unknown status `Locked`",
        ),
        (
            "tests = 5\n",
            "colour = \"red\"\n",
            "tests = 5",
            "colour: unknown key",
        ),
        // A group listed twice is reported at the second entry's `name` line, pointing at the first's.
        (
            "name = \"pvc\"",
            "name = \"ci-1950\"",
            "name = \"pvc\"",
            "name: group `ci-1950` appears twice (first on line 3)",
        ),
    ];
    for (from, to, at, expected) in cases {
        assert_toml_refused_at(from, to, at, expected);
    }
    let text = COEFFICIENTS_CSV.replace("pvc,", "ci-1950,");
    let shown = parse_coefficients_csv(&text, "set.csv")
        .unwrap_err()
        .to_string();
    assert_eq!(
        shown,
        "set.csv:4: group: group `ci-1950` appears twice (first on line 2)"
    );
    let text = COEFFICIENTS_CSV.replace("status\n", "status,colour\n");
    let shown = parse_coefficients_csv(&text, "set.csv")
        .unwrap_err()
        .to_string();
    assert!(
        shown.starts_with("set.csv:1: colour: unknown key"),
        "{shown}"
    );
    // An empty file and a header with no rows name the first line.
    assert_eq!(
        parse_coefficients_csv("", "set.csv")
            .unwrap_err()
            .to_string(),
        "set.csv:1: the file lists no group"
    );
    assert_eq!(
        parse_coefficients_toml("", "set.toml")
            .unwrap_err()
            .to_string(),
        "set.toml:1: the file lists no group"
    );
}

#[test]
fn odd_group_names_in_a_coefficient_set() {
    for id in ODD_IDS {
        assert_coefficients_toml(&COEFFICIENTS_TOML.replace("\"pvc\"", &format!("\"{id}\"")));
        // The same odd name twice: a duplicate at the second.
        let twice = COEFFICIENTS_TOML
            .replace("\"pvc\"", &format!("\"{id}\""))
            .replace("\"di-1990\"", &format!("\"{id}\""));
        let shown = parse_coefficients_toml(&twice, "set.toml")
            .unwrap_err()
            .to_string();
        // Shown at the second entry's `name` line, the line that repeats the first.
        let third_header = COEFFICIENTS_TOML
            .lines()
            .enumerate()
            .filter(|(_, l)| *l == "[[group]]")
            .nth(2)
            .unwrap()
            .0;
        let name_line = COEFFICIENTS_TOML
            .lines()
            .enumerate()
            .skip(third_header)
            .find(|(_, l)| l.starts_with("name"))
            .unwrap();
        let line = name_line.0 + 1;
        assert!(
            shown.starts_with(&format!("set.toml:{line}: name: group ")) && shown.contains("twice"),
            "{id}: {shown}"
        );
    }
    for cell in HOSTILE_CELLS {
        assert_coefficients_csv(&COEFFICIENTS_CSV.replace("pvc,", &format!("{cell},")));
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    #[test]
    fn coefficient_toml_with_a_damaged_stretch(
        at in 0usize..COEFFICIENTS_TOML.len(),
        cut in 0usize..60,
        junk in prop::collection::vec(any::<u8>(), 0..24),
    ) {
        assert_coefficients_toml(&damaged(COEFFICIENTS_TOML, at, cut, &junk));
    }

    #[test]
    fn coefficient_csv_with_a_damaged_stretch(
        at in 0usize..COEFFICIENTS_CSV.len(),
        cut in 0usize..40,
        junk in "[\\PC\u{0}\u{202e}\u{301};,\"\r\n]{0,12}",
    ) {
        assert_coefficients_csv(&damaged(COEFFICIENTS_CSV, at, cut, junk.as_bytes()));
    }

    #[test]
    fn binary_junk_as_a_coefficient_set(bytes in prop::collection::vec(any::<u8>(), 0..2000)) {
        let text = String::from_utf8_lossy(&bytes);
        assert_coefficients_toml(&text);
        assert_coefficients_csv(&text);
    }

    #[test]
    fn coefficient_rows_of_any_cells(
        rows in prop::collection::vec(
            prop::collection::vec("[-+0-9.eE naif]{0,8}|\\PC{0,6}", 0..10),
            0..12,
        ),
    ) {
        assert_coefficients_csv(&quoted_rows(COEFFICIENTS_CSV.lines().next().unwrap(), &rows));
    }
}

/// Regression (found by the property test): a carriage return inside the header left a blank header
/// cell, and a short row's finding named that blank column.
#[test]
fn short_row_under_a_blank_header_cell_names_the_field() {
    let text = "test,date,time,residual_node,flow_node,static_psi,residual_psi,flow_gpm,condition,a,\r\nT1,,,J1,J2,60,40,500,,a\n";
    assert_sheet_outcome(text);
}

/// A valid network of our own with one valve of every kind, minor losses on pipes and a valve, its
/// own Hazen-Williams constant and a condition that closes a valve and changes two settings.
const VALVES: &str = include_str!("data/all-valves.toml");

#[test]
fn the_valve_base_is_valid_and_solves_under_every_condition() {
    let loaded = parse_network(VALVES, "net.toml").unwrap();
    let net = &loaded.network;
    assert_eq!(net.valves.len(), 4);
    assert_eq!(net.hazen_williams_constant, Some(10.5088));
    // 18 m3/h written, 5 L/s read (3600 s an hour, 1000 L a cubic metre).
    assert_eq!(net.flows(), roughcal::network::FlowUnit::M3h);
    assert!((net.junctions[0].demand_m3s - 0.005).abs() < 1e-12);
    let solver = GradientSolver::new(net).unwrap();
    for name in [None, Some("night")] {
        let state = OperatingState::for_condition_name(net, name).unwrap();
        let solution = solver.solve(net, &state, &net.c_factors(), None).unwrap();
        assert!(solution.max_imbalance_m3s.abs() < 1e-6, "{name:?}");
    }
}

#[test]
fn every_prefix_of_a_valve_network() {
    for end in (0..=VALVES.len()).filter(|&i| VALVES.is_char_boundary(i)) {
        assert_network_outcome(&VALVES[..end]);
    }
}

#[test]
fn every_hostile_value_in_every_valve_network_key() {
    for (start, end) in value_spans(VALVES) {
        for value in HOSTILE_VALUES {
            let text = format!("{}{value}{}", &VALVES[..start], &VALVES[end..]);
            assert_network_outcome(&text);
        }
    }
}

#[test]
fn odd_ids_in_valves_and_valve_settings() {
    for id in ODD_IDS {
        for target in ["\"PRV-1\"", "\"FCV-1\"", "\"TCV-1\"", "\"J-5\""] {
            assert_network_outcome(&VALVES.replace(target, &format!("\"{id}\"")));
            assert_network_outcome(&VALVES.replacen(target, &format!("\"{id}\""), 1));
        }
    }
}

/// The new keys' rejections each name the file, the line and column of the value, and the field.
#[test]
fn bad_values_of_the_valve_keys_are_refused_at_their_line() {
    // (text replaced, replacement, the key's line as it reads in the base, expected in the message)
    let cases = [
        (
            "kind = \"prv\"",
            "kind = \"gate\"",
            "kind = \"prv\"",
            "PRV-1 / kind",
        ),
        (
            "setting = 300.0",
            "setting = -5",
            "setting = 300.0",
            "PRV-1 / setting",
        ),
        (
            "setting = 7.2",
            "setting = nan",
            "setting = 7.2",
            "FCV-1 / setting",
        ),
        (
            "setting = 12.0",
            "setting = inf",
            "setting = 12.0",
            "TCV-1 / setting",
        ),
        (
            "minor_loss = 1.5",
            "minor_loss = -1",
            "minor_loss = 1.5",
            "P-1 / minor_loss",
        ),
        (
            "minor_loss = 0.5",
            "minor_loss = \"a\"",
            "minor_loss = 0.5",
            "TCV-1 / minor_loss",
        ),
        (
            "hazen_williams_constant = 10.5088",
            "hazen_williams_constant = 0",
            "hazen_williams_constant = 10.5088",
            "hazen_williams_constant",
        ),
        (
            "hazen_williams_constant = 10.5088",
            "hazen_williams_constant = -inf",
            "hazen_williams_constant = 10.5088",
            "hazen_williams_constant",
        ),
        (
            "flow_unit = \"m3h\"",
            "flow_unit = \"cumecs\"",
            "flow_unit = \"m3h\"",
            "flow_unit",
        ),
        (
            "flow_unit = \"m3h\"",
            "flow_unit = [\"m3h\"]",
            "flow_unit = \"m3h\"",
            "flow_unit",
        ),
        (
            "\"PRV-1\" = 250.0",
            "\"PRV-9\" = 250.0",
            "valve_settings = ",
            "night / valve_settings",
        ),
        (
            "\"PRV-1\" = 250.0",
            "\"P-2\" = 250.0",
            "valve_settings = ",
            "night / valve_settings",
        ),
        (
            "\"FCV-1\" = 5.4",
            "\"FCV-1\" = -5.4",
            "valve_settings = ",
            "night / valve_settings",
        ),
        (
            "\"FCV-1\" = 5.4",
            "\"FCV-1\" = \"x\"",
            "valve_settings = ",
            "night / valve_settings",
        ),
        (
            "closed = [\"TCV-1\"]",
            "closed = [\"TCV-9\"]",
            "closed = [",
            "night / closed",
        ),
    ];
    for (replaced, replacement, line_starts, field) in cases {
        assert!(VALVES.contains(replaced), "{replaced}");
        let text = VALVES.replacen(replaced, replacement, 1);
        let shown = match parse_network(&text, "net.toml") {
            Err(error) => error.to_string(),
            Ok(_) => panic!("{replacement}: accepted"),
        };
        let line = VALVES
            .lines()
            .position(|l| l.starts_with(line_starts))
            .unwrap()
            + 1;
        assert!(
            shown.starts_with(&format!("net.toml:{line}:")),
            "{replacement}: {shown}"
        );
        assert!(
            shown.contains(&format!("({field})")),
            "{replacement}: {shown}"
        );
    }
}

#[test]
fn a_valve_without_its_required_keys_names_each_one() {
    for key in [
        "from = \"J-1\"\nto = \"J-2\"",
        "diameter = 200.0",
        "kind = \"prv\"",
        "setting = 300.0",
    ] {
        // The key as it stands in the block of PRV-1.
        let block = VALVES.find("id = \"PRV-1\"").unwrap();
        let at = block + VALVES[block..].find(key).unwrap();
        let text = format!("{}{}", &VALVES[..at], &VALVES[at + key.len() + 1..]);
        let shown = match parse_network(&text, "net.toml") {
            Err(error) => error.to_string(),
            Ok(_) => panic!("without {key}: accepted"),
        };
        let first = key.split(' ').next().unwrap();
        assert!(shown.contains(first), "without {key}: {shown}");
        assert!(shown.contains("PRV-1"), "without {key}: {shown}");
    }
}
