//! Calibration outputs built from real calibrations of a small network written as a network file in
//! code: the files parse back and agree with the result, the coefficient set round-trips through
//! `apply`, and the CLI refuses to overwrite.

mod common;

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::process::Command;
use std::sync::atomic::AtomicBool;

use roughcal::calibrate::{
    CAUTION, CalibrationOptions, CalibrationResult, CalibrationTest, GroupStatus, calibrate,
};

use common::{PLAN, synthetic_readings};
use roughcal::network::Network;
use roughcal::network::edit::apply_group_c;
use roughcal::network::file::parse_network;
use roughcal::report::{
    CALIBRATED_NETWORK, COEFFICIENTS_CSV, COEFFICIENTS_TOML, CalibrationOutputs, ExcludedTest,
    FIT_SVG, OUTPUT_FILES, OutputWriteError, REPORT_MD, RESULTS_GEOJSON, RunContext, json_summary,
    parse_coefficients_csv, parse_coefficients_toml, text_summary, write_outputs,
};

const SIDE: usize = 4;

/// A 4 x 4 grid (1200 ft, 6 in pipes) fed from a tank and a standpipe; the west half is `ci-old`, the
/// east half `di-new`, a dead-end spur `spur`, the two feeds a locked `source` group.
fn network_text(c_old: f64, c_new: f64, c_spur: f64) -> String {
    let mut t = String::new();
    t.push_str("# report test grid: comments and layout must survive calibration\n");
    t.push_str("title = \"report test grid\"\nunits = \"us\"\n\n");
    t.push_str("[[fixed_head]]\nid = \"TANK\"\nhead = 330.0\n\n");
    t.push_str("[[fixed_head]]\nid = \"STANDPIPE\"   # east feed\nhead = 325.0\n\n");
    for i in 0..SIDE * SIDE {
        let _ = writeln!(
            t,
            "[[junction]]\nid = \"J{i}\"\nelevation = {:.1}\ndemand = 20.0\n",
            100.0 + 5.0 * (i % 3) as f64
        );
    }
    for id in ["S1", "S2", "SPUR"] {
        let _ = writeln!(
            t,
            "[[junction]]\nid = \"{id}\"\nelevation = 110.0\ndemand = 5.0\n"
        );
    }
    let pipe = |t: &mut String, id: &str, from: &str, to: &str, d: f64, c: f64, g: &str| {
        let _ = writeln!(
            t,
            "[[pipe]]\nid = \"{id}\"\nfrom = \"{from}\"\nto = \"{to}\"\nlength = {}\n\
             diameter = {d}\nc = {c}  # as found\ngroup = \"{g}\"\n",
            length_ft(id)
        );
    };
    pipe(&mut t, "FEED-W", "TANK", "J0", 16.0, 130.0, "source");
    pipe(
        &mut t,
        "FEED-E",
        "STANDPIPE",
        &format!("J{}", SIDE - 1),
        16.0,
        130.0,
        "source",
    );
    let mut next = 1;
    for r in 0..SIDE {
        for c in 0..SIDE {
            let here = r * SIDE + c;
            let (g, cv) = if c < 2 {
                ("ci-old", c_old)
            } else {
                ("di-new", c_new)
            };
            if c + 1 < SIDE {
                pipe(
                    &mut t,
                    &format!("P{next}"),
                    &format!("J{here}"),
                    &format!("J{}", here + 1),
                    6.0,
                    cv,
                    g,
                );
                next += 1;
            }
            if r + 1 < SIDE {
                pipe(
                    &mut t,
                    &format!("P{next}"),
                    &format!("J{here}"),
                    &format!("J{}", here + SIDE),
                    6.0,
                    cv,
                    g,
                );
                next += 1;
            }
        }
    }
    // The spur: three pipes of unequal length, so a mean over them is not exact in floating point.
    let spur_start = format!("J{}", SIDE * SIDE - 1);
    pipe(&mut t, "SPUR-1", &spur_start, "S1", 6.0, c_spur, "spur");
    pipe(&mut t, "SPUR-2", "S1", "S2", 6.0, c_spur, "spur");
    pipe(&mut t, "SPUR-3", "S2", "SPUR", 6.0, c_spur, "spur");
    t.push_str("[[group]]\nname = \"ci-old\"   # unlined cast iron\nmin = 40.0\nmax = 140.0\n\n");
    t.push_str("[[group]]\nname = \"di-new\"\nmin = 60.0\nmax = 150.0\n\n");
    t.push_str("[[group]]\nname = \"spur\"\nmin = 40.0\nmax = 150.0\n\n");
    t.push_str("[[group]]\nname = \"source\"\nlocked = true\n");
    t
}

/// Pipe lengths (ft): 1200 in the grid, uneven on the spur.
fn length_ft(id: &str) -> f64 {
    match id {
        "SPUR-1" => 1000.0,
        "SPUR-2" => 730.0,
        "SPUR-3" => 415.5,
        _ => 1200.0,
    }
}

fn network(text: &str) -> Network {
    match parse_network(text, "grid.toml") {
        Ok(loaded) => loaded.network,
        Err(e) => panic!("test network does not load:\n{e}"),
    }
}

const NOISE: [f64; 12] = [
    0.8, -1.1, 0.3, 0.9, -0.6, -1.4, 1.2, 0.2, -0.3, 0.7, -0.9, 1.0,
];

struct Fixture {
    text: String,
    net: Network,
    tests: Vec<CalibrationTest>,
    options: CalibrationOptions,
    excluded: Vec<ExcludedTest>,
    result: CalibrationResult,
}

impl Fixture {
    fn new(max_iterations: u64) -> Self {
        let truth = network(&network_text(72.0, 118.0, 60.0));
        let tests = synthetic_readings(&truth, &PLAN, &NOISE, "FT-");
        let text = network_text(100.0, 100.0, 100.0);
        let net = network(&text);
        let mut options = CalibrationOptions::for_units(net.units);
        options.max_iterations = max_iterations;
        let result = calibrate(&net, &tests, &options, &mut |_| {}, &AtomicBool::new(false))
            .expect("calibrates");
        Self {
            text,
            net,
            tests,
            options,
            excluded: vec![ExcludedTest {
                test_id: "FT-9".into(),
                row: 9,
                line: 11,
                reason: "residual pressure above static".into(),
                left_out: false,
            }],
            result,
        }
    }

    fn run(&self) -> RunContext<'_> {
        RunContext {
            network: &self.net,
            network_file: "grid.toml",
            sheet_file: "tests.csv",
            options: &self.options,
            tests: &self.tests,
            excluded: &self.excluded,
            result: &self.result,
            warnings: &[],
            out_of_date: None,
        }
    }

    fn outputs(&self) -> CalibrationOutputs {
        CalibrationOutputs::build(&self.run(), &self.text).expect("outputs build")
    }
}

/// C of every pipe of each group, by group name.
fn c_by_group(net: &Network) -> BTreeMap<String, Vec<f64>> {
    let mut out: BTreeMap<String, Vec<f64>> = BTreeMap::new();
    for pipe in &net.pipes {
        if let Some(g) = pipe.group {
            out.entry(net.groups[g].name.clone())
                .or_default()
                .push(pipe.c_factor);
        }
    }
    out
}

/// Lines of `a` that differ from `b` (same line count assumed).
fn differing_lines<'t>(a: &'t str, b: &'t str) -> Vec<(&'t str, &'t str)> {
    assert_eq!(a.lines().count(), b.lines().count());
    a.lines().zip(b.lines()).filter(|(x, y)| x != y).collect()
}

#[test]
fn the_fixture_is_a_real_fit() {
    // Synthetic recovery (common practice, no source): readings made on a network with known C, the
    // fit from elsewhere must come back near it. Everything below is built from this result.
    let fx = Fixture::new(50);
    assert!(fx.result.converged, "{}", fx.result.termination);
    assert!((fx.result.fitted_c("ci-old").unwrap() - 72.0).abs() < 10.0);
    assert!((fx.result.fitted_c("di-new").unwrap() - 118.0).abs() < 10.0);
    assert!(fx.result.after.rmse < fx.result.before.rmse);
}

#[test]
fn coefficients_csv_parses_back_and_matches_the_result() {
    let fx = Fixture::new(50);
    let outputs = fx.outputs();
    let csv_text = outputs.get(COEFFICIENTS_CSV).unwrap();
    let mut reader = csv::Reader::from_reader(csv_text.as_bytes());
    let header: Vec<String> = reader.headers().unwrap().iter().map(String::from).collect();
    assert_eq!(
        header.join(","),
        "group,start,fitted,std_error,ci_low,ci_high,tests,status,units,hazen_williams_constant"
    );
    let rows: Vec<csv::StringRecord> = reader.records().map(Result::unwrap).collect();
    assert_eq!(rows.len(), fx.result.groups.len());
    for (row, group) in rows.iter().zip(&fx.result.groups) {
        assert_eq!(&row[0], group.name);
        assert_eq!(row[1].parse::<f64>().unwrap(), group.start_c);
        assert_eq!(row[2].parse::<f64>().unwrap(), group.fitted_c);
        match group.std_error {
            Some(se) => assert_eq!(row[3].parse::<f64>().unwrap(), se),
            None => assert_eq!(&row[3], ""),
        }
        match group.ci95 {
            Some((lo, hi)) => {
                assert_eq!(row[4].parse::<f64>().unwrap(), lo);
                assert_eq!(row[5].parse::<f64>().unwrap(), hi);
            }
            None => assert!(row[4].is_empty() && row[5].is_empty()),
        }
        assert_eq!(row[6].parse::<usize>().unwrap(), group.tests_informing);
        assert_eq!(&row[7], group.status.label());
        // Every row says which Hazen-Williams constant its C belongs to: the network's, here the
        // default of its unit system (10.44 us / 10.67 si).
        assert_eq!(&row[8], fx.result.hazen_williams.units.key());
        assert_eq!(row[9].parse::<f64>().unwrap(), fx.result.hazen_williams.k);
    }
    // The blank cells are there: the spur is not informed and the source group locked.
    let spur = rows.iter().find(|r| &r[0] == "spur").unwrap();
    assert_eq!((&spur[3], &spur[7]), ("", "not informed"));
    // Our own loader reads it as well.
    let set = parse_coefficients_csv(csv_text, COEFFICIENTS_CSV).unwrap();
    assert_eq!(set.hazen_williams, Some(fx.result.hazen_williams));
    for (entry, group) in set.entries.iter().zip(&fx.result.groups) {
        assert_eq!(
            (entry.name.as_str(), entry.c),
            (group.name.as_str(), group.fitted_c)
        );
    }
}

#[test]
fn coefficients_toml_round_trips_through_apply() {
    let fx = Fixture::new(50);
    let outputs = fx.outputs();
    let toml_text = outputs.get(COEFFICIENTS_TOML).unwrap();
    assert!(toml_text.contains(&CAUTION[..40]));
    let set = parse_coefficients_toml(toml_text, COEFFICIENTS_TOML).unwrap();
    assert_eq!(set.entries.len(), fx.result.groups.len());
    for (entry, group) in set.entries.iter().zip(&fx.result.groups) {
        assert_eq!(entry.name, group.name);
        assert_eq!(entry.c, group.fitted_c);
        assert_eq!(entry.min, Some(group.min_c));
        assert_eq!(entry.max, Some(group.max_c));
        assert_eq!(entry.locked, Some(group.status == GroupStatus::Locked));
        assert_eq!(entry.std_error, group.std_error);
        assert_eq!(entry.status.as_deref(), Some(group.status.label()));
    }
    set.check_against(&fx.net).unwrap();

    let applied = apply_group_c(&fx.text, &set.c_by_group()).unwrap();
    let applied_net = network(&applied);
    for (name, values) in c_by_group(&applied_net) {
        let fitted = fx.result.fitted_c(&name).unwrap();
        assert!(
            values.iter().all(|&c| c == fitted),
            "{name}: {values:?} vs {fitted}"
        );
    }
    // Only the `c` lines of the fitted groups' pipes changed, and each kept its comment.
    let changed = differing_lines(&fx.text, &applied);
    let fitted_pipes = fx
        .net
        .pipes
        .iter()
        .filter(|p| {
            let name = &fx.net.groups[p.group.unwrap()].name;
            name == "ci-old" || name == "di-new"
        })
        .count();
    assert_eq!(changed.len(), fitted_pipes);
    for (before, after) in changed {
        assert!(
            before.starts_with("c = 100") && after.starts_with("c = "),
            "{after}"
        );
        assert!(after.ends_with("# as found"), "{after}");
    }
    // And it is the very network `calibrate` wrote.
    assert_eq!(applied, outputs.get(CALIBRATED_NETWORK).unwrap());
}

#[test]
fn calibrated_network_has_the_fitted_c_and_nothing_else_changed() {
    let fx = Fixture::new(50);
    let outputs = fx.outputs();
    let calibrated = outputs.get(CALIBRATED_NETWORK).unwrap();
    let net = network(calibrated);
    assert_eq!(net.c_factors(), fx.result.pipe_c_after);
    // Pipes of groups the fit did not move keep exactly the C they had.
    for (k, pipe) in fx.net.pipes.iter().enumerate() {
        let group = &fx.net.groups[pipe.group.unwrap()].name;
        if group == "spur" || group == "source" {
            assert_eq!(net.pipes[k].c_factor, pipe.c_factor, "{}", pipe.id);
        }
    }
    let spur = fx.result.groups.iter().find(|g| g.name == "spur").unwrap();
    assert_eq!(spur.start_c, 100.0);
    let mut expected = fx.net.clone();
    for (pipe, &c) in expected.pipes.iter_mut().zip(&fx.result.pipe_c_after) {
        pipe.c_factor = c;
    }
    assert_eq!(net, expected);
    assert!(calibrated.starts_with("# report test grid: comments and layout must survive"));
}

#[test]
fn fit_svg_has_both_series_and_the_one_to_one_line() {
    let fx = Fixture::new(50);
    let outputs = fx.outputs();
    let svg = outputs.get(FIT_SVG).unwrap();
    assert!(svg.starts_with("<svg"), "{}", &svg[..60]);
    assert!(svg.trim_end().ends_with("</svg>"));
    assert_eq!(svg.matches("<svg").count(), 1);
    let readings = 2 * fx.result.tests.len();
    // Hollow circles before (plus one in the legend), filled triangles after (plus one).
    assert_eq!(svg.matches("<circle").count(), readings + 1);
    assert_eq!(svg.matches("<polygon").count(), readings + 1);
    for label in [
        "before calibration",
        "after calibration",
        "1:1 (model equals field)",
        "measured pressure (psi)",
        "modelled pressure (psi)",
    ] {
        assert!(svg.contains(label), "missing {label}");
    }
    assert!(svg.contains("<polyline"), "no 1:1 line");
}

#[test]
fn report_md_says_what_was_fitted_how_and_how_well() {
    let fx = Fixture::new(50);
    let outputs = fx.outputs();
    let report = outputs.get(REPORT_MD).unwrap();
    assert!(report.contains(CAUTION));
    assert!(report.find(CAUTION).unwrap() < report.find("## What was fitted").unwrap());
    for needle in [
        "Fit target: pressures",
        "gauge accuracy 1.0 psi",
        "prior: none",
        "converged after",
        "| FT-0 ",
        "| FT-9 |         11 | residual pressure above static |",
        "| ci-old ",
        "not informed",
        "a test at S1, S2, J15 would stress it",
        "| RMSE (psi)",
        "within 2.0 psi",
        "within 5.0 psi",
        "## Correlation of the fitted C",
        "## Optimizer iterations",
    ] {
        assert!(
            report.contains(needle),
            "report lacks `{needle}`:\n{report}"
        );
    }
    assert!(!report.contains("NOT CONVERGED"));
}

#[test]
fn a_run_that_did_not_converge_says_so_everywhere() {
    let fx = Fixture::new(1);
    assert!(
        !fx.result.converged,
        "one iteration should not settle this fit"
    );
    let text = text_summary(&fx.run());
    assert!(text.contains("NOT CONVERGED"));
    let report = fx.outputs().get(REPORT_MD).unwrap().to_string();
    assert!(report.contains("NOT CONVERGED"));
    assert_eq!(json_summary(&fx.run())["converged"], false);
}

#[test]
fn text_summary_is_aligned_and_ends_with_the_caution() {
    let fx = Fixture::new(50);
    let text = text_summary(&fx.run());
    let last_lines: String = text.lines().rev().take(3).collect::<Vec<_>>().join(" ");
    assert!(last_lines.contains("Caution:"), "{text}");
    let groups: Vec<&str> = text
        .lines()
        .skip_while(|l| !l.starts_with("Roughness groups"))
        .skip(1)
        .take(2 + fx.result.groups.len())
        .collect();
    // Header, rule and every row end their `fitted C` column at the same place.
    let end = groups[0].find("fitted C").unwrap() + "fitted C".len();
    for row in &groups[2..] {
        let cell = row[..end].rsplit(' ').next().unwrap();
        assert!(cell.parse::<f64>().is_ok(), "misaligned: {row}");
    }
}

#[test]
fn json_has_the_contract_keys() {
    let fx = Fixture::new(50);
    let json = json_summary(&fx.run());
    let groups = json["groups"].as_array().unwrap();
    assert_eq!(groups.len(), fx.result.groups.len());
    for (g, fit) in groups.iter().zip(&fx.result.groups) {
        assert_eq!(g["name"], fit.name.as_str());
        assert_eq!(g["start"].as_f64().unwrap(), fit.start_c);
        assert_eq!(g["fitted"].as_f64().unwrap(), fit.fitted_c);
        assert_eq!(g["std_error"].as_f64(), fit.std_error);
        assert_eq!(g["status"], fit.status.label());
    }
    for (key, stats) in [("before", &fx.result.before), ("after", &fx.result.after)] {
        assert_eq!(json[key]["n"].as_u64().unwrap() as usize, stats.n);
        assert_eq!(json[key]["mean_error"].as_f64().unwrap(), stats.mean_error);
        assert_eq!(json[key]["rmse"].as_f64().unwrap(), stats.rmse);
        assert_eq!(
            json[key]["max_abs_error"].as_f64().unwrap(),
            stats.max_abs_error
        );
    }
    let tests = json["tests"].as_array().unwrap();
    for (t, cmp) in tests.iter().zip(&fx.result.tests) {
        assert_eq!(t["test"], cmp.id.as_str());
        assert_eq!(
            t["measured_residual"].as_f64().unwrap(),
            cmp.measured_residual
        );
        assert_eq!(
            t["modelled_before"].as_f64().unwrap(),
            cmp.modelled_residual_before
        );
        assert_eq!(
            t["modelled_after"].as_f64().unwrap(),
            cmp.modelled_residual_after
        );
    }
    assert_eq!(json["caution"], CAUTION);
}

#[test]
fn outputs_are_not_overwritten_without_force() {
    let fx = Fixture::new(50);
    let outputs = fx.outputs();
    let dir = tempfile::tempdir().unwrap();
    let folder = dir.path().join("run-1");
    let written = write_outputs(&folder, &outputs, false).unwrap();
    // Every output but results.geojson: the fixture's network has no plan coordinates.
    assert_eq!(written.len(), OUTPUT_FILES.len() - 1);
    assert!(!folder.join(RESULTS_GEOJSON).exists());
    for (name, _) in &outputs.files {
        assert_eq!(
            std::fs::read_to_string(folder.join(name)).unwrap(),
            outputs.get(name).unwrap()
        );
    }
    std::fs::write(folder.join(REPORT_MD), "engineer's notes").unwrap();
    std::fs::remove_file(folder.join(FIT_SVG)).unwrap();
    match write_outputs(&folder, &outputs, false) {
        Err(OutputWriteError::Exists { files, .. }) => {
            assert_eq!(
                files,
                [
                    "coefficients.csv",
                    "coefficients.toml",
                    "calibrated.toml",
                    "report.md",
                    "pipes.csv"
                ]
            );
        }
        other => panic!("expected a refusal, got {other:?}"),
    }
    // Nothing was written by the refused run.
    assert_eq!(
        std::fs::read_to_string(folder.join(REPORT_MD)).unwrap(),
        "engineer's notes"
    );
    assert!(!folder.join(FIT_SVG).exists());
    write_outputs(&folder, &outputs, true).unwrap();
    assert_eq!(
        std::fs::read_to_string(folder.join(REPORT_MD)).unwrap(),
        outputs.get(REPORT_MD).unwrap()
    );
}

fn roughcal(args: &[&std::ffi::OsStr]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .args(args)
        .output()
        .expect("runs")
}

#[test]
fn apply_cli_writes_refuses_and_reports_bad_sets() {
    let fx = Fixture::new(50);
    let outputs = fx.outputs();
    let dir = tempfile::tempdir().unwrap();
    let network_path = dir.path().join("grid.toml");
    std::fs::write(&network_path, &fx.text).unwrap();
    let set_path = dir.path().join(COEFFICIENTS_TOML);
    std::fs::write(&set_path, outputs.get(COEFFICIENTS_TOML).unwrap()).unwrap();
    let out = dir.path().join("applied.toml");
    let args = [
        network_path.as_os_str(),
        set_path.as_os_str(),
        "--out".as_ref(),
        out.as_os_str(),
    ];
    let apply = |extra: &[&str]| {
        let mut all: Vec<&std::ffi::OsStr> = vec!["apply".as_ref()];
        all.extend(args);
        all.extend(extra.iter().map(std::ffi::OsStr::new));
        roughcal(&all)
    };
    let first = apply(&[]);
    assert!(
        first.status.success(),
        "{}",
        String::from_utf8_lossy(&first.stderr)
    );
    let printed = String::from_utf8_lossy(&first.stdout);
    assert!(
        printed.contains("ci-old") && printed.contains("100.00"),
        "{printed}"
    );
    assert_eq!(
        std::fs::read_to_string(&out).unwrap(),
        outputs.get(CALIBRATED_NETWORK).unwrap()
    );

    let again = apply(&[]);
    assert_eq!(again.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&again.stderr).contains("--force"));
    assert!(apply(&["--force"]).status.success());

    // A CSV set applies the same way.
    let csv_path = dir.path().join(COEFFICIENTS_CSV);
    std::fs::write(&csv_path, outputs.get(COEFFICIENTS_CSV).unwrap()).unwrap();
    let from_csv = dir.path().join("from-csv.toml");
    let csv_run = roughcal(&[
        "apply".as_ref(),
        network_path.as_os_str(),
        csv_path.as_os_str(),
        "--out".as_ref(),
        from_csv.as_os_str(),
    ]);
    assert!(
        csv_run.status.success(),
        "{}",
        String::from_utf8_lossy(&csv_run.stderr)
    );
    assert_eq!(
        std::fs::read_to_string(&from_csv).unwrap(),
        std::fs::read_to_string(&out).unwrap()
    );

    // A set naming a group the network lacks: exit 1, file:line: field in the message, nothing written.
    let bad = dir.path().join("bad.toml");
    std::fs::write(
        &bad,
        "[[group]]\nname = \"ci-old\"\nc = 80\n\n[[group]]\nname = \"pvc\"\nc = 140\n",
    )
    .unwrap();
    let bad_out = dir.path().join("bad-out.toml");
    let failed = roughcal(&[
        "apply".as_ref(),
        network_path.as_os_str(),
        bad.as_os_str(),
        "--out".as_ref(),
        bad_out.as_os_str(),
    ]);
    assert_eq!(failed.status.code(), Some(1));
    let message = String::from_utf8_lossy(&failed.stderr);
    assert!(
        message.contains("bad.toml:5: name: the network has no group `pvc`"),
        "{message}"
    );
    assert!(!bad_out.exists());
}

#[test]
fn calibrate_cli_writes_refuses_and_fails_when_not_converged() {
    // The bundled demo district and its invented field sheet: the command's behaviour, not its values.
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
    let network = root.join("demo-network/district.toml");
    let sheet = root.join("field-sheets/demo.csv");
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("run");
    let calibrate = |extra: &[&str]| {
        let mut all: Vec<&std::ffi::OsStr> =
            vec!["calibrate".as_ref(), network.as_os_str(), sheet.as_os_str()];
        all.extend(extra.iter().map(std::ffi::OsStr::new));
        roughcal(&all)
    };
    let out_arg = out.to_str().unwrap();
    let first = calibrate(&["--out", out_arg]);
    let stdout = String::from_utf8_lossy(&first.stdout);
    assert!(
        first.status.success(),
        "{}",
        String::from_utf8_lossy(&first.stderr)
    );
    assert!(stdout.contains("Caution:"), "{stdout}");
    for name in OUTPUT_FILES {
        assert!(out.join(name).exists(), "{name} not written");
    }
    // `apply` of the written set gives the written calibrated network, whose C are to 0.1.
    let applied = dir.path().join("applied.toml");
    let apply = roughcal(&[
        "apply".as_ref(),
        network.as_os_str(),
        out.join(COEFFICIENTS_TOML).as_os_str(),
        "--out".as_ref(),
        applied.as_os_str(),
    ]);
    assert!(apply.status.success());
    let from_apply = crate::network(&std::fs::read_to_string(&applied).unwrap());
    let mut delivered =
        crate::network(&std::fs::read_to_string(out.join(CALIBRATED_NETWORK)).unwrap());
    for (a, d) in from_apply.pipes.iter().zip(&mut delivered.pipes) {
        assert!((a.c_factor - d.c_factor).abs() <= 0.05 + 1e-9, "{}", a.id);
        assert_eq!(d.c_factor, (a.c_factor * 10.0).round() / 10.0, "{}", a.id);
        d.c_factor = a.c_factor;
    }
    assert_eq!(from_apply, delivered);

    let refused = calibrate(&["--out", out_arg]);
    assert_eq!(refused.status.code(), Some(1));
    let message = String::from_utf8_lossy(&refused.stderr);
    assert!(
        message.contains("coefficients.csv") && message.contains("--force"),
        "{message}"
    );
    assert!(calibrate(&["--out", out_arg, "--force"]).status.success());

    let json = calibrate(&["--json"]);
    assert!(json.status.success());
    let value: serde_json::Value = serde_json::from_slice(&json.stdout).expect("stdout is JSON");
    assert_eq!(value["converged"], true);
    assert!(!value["groups"].as_array().unwrap().is_empty());

    let stopped = calibrate(&["--max-iterations", "1"]);
    assert_eq!(stopped.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&stopped.stdout).contains("NOT CONVERGED"));

    let bad_flag = calibrate(&["--gauge-sd=0"]);
    assert_eq!(bad_flag.status.code(), Some(1));
}

#[test]
fn an_unconverged_calibrate_writes_no_coefficient_set_and_apply_refuses_one() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
    let network = root.join("demo-network/district.toml");
    let sheet = root.join("field-sheets/demo.csv");
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("run");
    let out_arg = out.to_str().unwrap();
    let calibrate = |extra: &[&str]| {
        let mut all: Vec<&std::ffi::OsStr> =
            vec!["calibrate".as_ref(), network.as_os_str(), sheet.as_os_str()];
        all.extend(extra.iter().map(std::ffi::OsStr::new));
        roughcal(&all)
    };
    // A converged run first, so that a forced unconverged run over it must clear the old set away.
    assert!(calibrate(&["--out", out_arg]).status.success());
    let stopped = calibrate(&["--out", out_arg, "--force", "--max-iterations", "1"]);
    assert_eq!(stopped.status.code(), Some(1));
    for name in [
        COEFFICIENTS_TOML,
        COEFFICIENTS_CSV,
        CALIBRATED_NETWORK,
        "pipes.csv",
    ] {
        assert!(
            !out.join(name).exists(),
            "{name} written by an unconverged fit"
        );
    }
    let report = std::fs::read_to_string(out.join(REPORT_MD)).unwrap();
    assert!(
        report.lines().next().unwrap().contains("NOT CONVERGED"),
        "{report}"
    );
    let svg = std::fs::read_to_string(out.join(FIT_SVG)).unwrap();
    assert!(svg.contains("NOT CONVERGED"));
    assert!(!svg.contains(">after calibration<"));

    // A set built from an unconverged fit says so in its status, and `apply` refuses it.
    let fx = Fixture::new(1);
    assert!(!fx.result.converged);
    let outputs = fx.outputs();
    let set = outputs.get(COEFFICIENTS_TOML).unwrap();
    assert!(set.contains("status = \"not converged\""), "{set}");
    let set_path = dir.path().join("stopped.toml");
    std::fs::write(&set_path, set).unwrap();
    let network_path = dir.path().join("grid.toml");
    std::fs::write(&network_path, &fx.text).unwrap();
    let applied = dir.path().join("applied.toml");
    let refused = roughcal(&[
        "apply".as_ref(),
        network_path.as_os_str(),
        set_path.as_os_str(),
        "--out".as_ref(),
        applied.as_os_str(),
    ]);
    assert_eq!(refused.status.code(), Some(1));
    let message = String::from_utf8_lossy(&refused.stderr);
    assert!(message.contains("is marked not converged"), "{message}");
    assert!(!applied.exists());
    // And the one writer withholds it whatever asks for it.
    let folder = dir.path().join("direct");
    let written = write_outputs(&folder, &outputs, false).unwrap();
    assert_eq!(written.len(), 2);
    assert!(!folder.join(COEFFICIENTS_TOML).exists());
}
