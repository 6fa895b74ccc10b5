//! Any text as a coefficient set, read as TOML and as CSV: a set or an error naming the file and a
//! line, never a panic; an accepted set holds only positive finite C values.
#![no_main]

use libfuzzer_sys::fuzz_target;
use roughcal::report::coefficients::{
    CoefficientSet, parse_coefficients_csv, parse_coefficients_toml,
};

fn check(
    result: Result<CoefficientSet, roughcal::report::coefficients::CoefficientError>,
    file: &str,
    lines: usize,
) {
    match result {
        Ok(set) => {
            assert!(!set.entries.is_empty(), "an accepted set lists a group");
            for entry in &set.entries {
                assert!(entry.c.is_finite() && entry.c > 0.0, "{entry:?}");
                assert!(entry.line >= 1 && entry.line <= lines, "{entry:?}");
            }
        }
        Err(error) => {
            let line = error.line.expect("a rejected text names a line");
            assert!(line >= 1 && line <= lines, "line out of the file: {error}");
            let shown = error.to_string();
            assert!(shown.starts_with(&format!("{file}:{line}: ")), "{shown}");
        }
    }
}

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    let lines = text.matches('\n').count() + 1;
    check(
        parse_coefficients_toml(&text, "fuzz.toml"),
        "fuzz.toml",
        lines,
    );
    check(parse_coefficients_csv(&text, "fuzz.csv"), "fuzz.csv", lines);
});
