//! The bundled demo: its files are what the generator makes, and calibrating it finds the C-factors the
//! sheet was synthesised from.

use std::sync::atomic::AtomicBool;

use roughcal::calibrate::{CalibrationOptions, GroupStatus, calibrate};
use roughcal::demo::DEMO_GROUPS;
use roughcal::fieldtest::{FieldSheet, calibration_tests, screen_sheet};
use roughcal::network::file::parse_network;

fn root_file(path: &str) -> String {
    std::fs::read_to_string(format!("{}/{path}", env!("CARGO_MANIFEST_DIR")))
        .expect("committed demo file")
}

#[test]
fn committed_demo_files_are_what_the_generator_makes() {
    // A stale copy would make the demo calibration find something other than the documented truth.
    assert_eq!(
        root_file("demo-network/district.toml"),
        roughcal::demo::district_network_toml()
    );
    assert_eq!(
        root_file("demo-network/true-c.toml"),
        roughcal::demo::true_c_toml()
    );
    assert_eq!(
        root_file("field-sheets/demo.csv"),
        roughcal::demo::demo_sheet_csv().unwrap()
    );
}

#[test]
fn demo_calibration_recovers_the_true_c_within_its_intervals() {
    // Synthetic recovery (common practice, no source): the sheet was made from DEMO_GROUPS' true C with
    // gauge noise, so every group the tests inform must bracket its true value.
    let net = parse_network(&root_file("demo-network/district.toml"), "district.toml")
        .unwrap()
        .network;
    let sheet = FieldSheet::parse(&root_file("field-sheets/demo.csv"), "demo.csv").unwrap();
    let reading = screen_sheet(&sheet, Some(&net));
    let (tests, excluded) = calibration_tests(&net, &reading);
    assert_eq!(excluded.len(), 1, "AF-18 carries a mistyped node id");
    assert_eq!(excluded[0].test_id, "AF-18");
    let options = CalibrationOptions::for_units(net.units);
    let result = calibrate(&net, &tests, &options, &mut |_| {}, &AtomicBool::new(false)).unwrap();
    assert!(result.converged, "{}", result.termination);
    assert!(result.after.rmse < result.before.rmse / 2.0);
    for (name, start, truth, ..) in DEMO_GROUPS {
        let group = result.groups.iter().find(|g| g.name == name).unwrap();
        match group.status {
            GroupStatus::Fitted => {
                let (lo, hi) = group.ci95.unwrap();
                assert!(
                    lo <= truth && truth <= hi,
                    "{name}: {truth} outside {lo:.1}..{hi:.1}"
                );
            }
            GroupStatus::Locked => assert_eq!(group.fitted_c, start),
            other => panic!("{name}: unexpected status {other:?}"),
        }
    }
}
