//! Any text as a field sheet: parse, screen and write back, never a panic; a parsed sheet round-trips.
#![no_main]

use libfuzzer_sys::fuzz_target;
use roughcal::fieldtest::{FieldSheet, screen_sheet};

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    match FieldSheet::parse(&text, "fuzz.csv") {
        Ok(sheet) => {
            let reading = screen_sheet(&sheet, None);
            for test in reading.usable_tests() {
                let _ = test.available_flow(20.0);
            }
            let written = sheet.to_csv_string();
            let again = FieldSheet::parse(&written, "fuzz.csv").expect("a written sheet parses");
            assert_eq!(
                again.to_csv_string(),
                written,
                "a written sheet round-trips"
            );
        }
        Err(error) => {
            let _ = error.to_string();
        }
    }
});
