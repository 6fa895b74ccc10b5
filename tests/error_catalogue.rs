//! docs/errors.md cannot drift: every phrase it lists is produced by one of the triggers below, and
//! every refusal the triggers produce is listed there.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::atomic::AtomicBool;

use roughcal::calibrate::plan::{PlanOptions, plan_tests};
use roughcal::calibrate::{CalibrationOptions, CalibrationTest, calibrate};
use roughcal::fieldtest::{FieldSheet, save_sheet};
use roughcal::network::UnitSystem;
use roughcal::network::file::parse_network;
use roughcal::storage;

const BASE: &str = include_str!("data/base.toml");
const HEADER: &str = "test,date,time,residual_node,flow_node,static_psi,residual_psi,flow_gpm,pitot_psi,outlet_in,coefficient,condition,note";

/// What one trigger produced: its label, its exit code (None for a library call) and its messages.
struct Outcome {
    label: String,
    refused: bool,
    text: String,
}

/// The identifying phrases of docs/errors.md: the first code span of every table row, except in the
/// section of guards that are not triggered.
fn catalogue() -> (Vec<String>, Vec<String>) {
    let doc = std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("docs/errors.md"))
        .unwrap();
    let (mut triggered, mut guards) = (Vec::new(), Vec::new());
    let mut in_guards = false;
    for line in doc.lines() {
        if line.starts_with('#') {
            in_guards = line.contains("(not triggered)");
        }
        let Some(rest) = line.strip_prefix("| `") else {
            continue;
        };
        // The phrase may itself hold a code span (`pumps_off`): the cell ends at "` |".
        let phrase = rest.split("` |").next().unwrap().to_string();
        if in_guards {
            guards.push(phrase);
        } else {
            triggered.push(phrase);
        }
    }
    (triggered, guards)
}

struct Scratch {
    dir: tempfile::TempDir,
}

impl Scratch {
    fn file(&self, name: &str, content: &[u8]) -> PathBuf {
        let path = self.dir.path().join(name);
        std::fs::write(&path, content).unwrap();
        path
    }

    fn run(&self, label: &str, args: &[&str]) -> Outcome {
        let out = Command::new(env!("CARGO_BIN_EXE_roughcal"))
            .args(args)
            .current_dir(self.dir.path())
            .output()
            .unwrap();
        let text = format!(
            "{}{}",
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        );
        assert!(!text.contains("panicked"), "{label}: {text}");
        Outcome {
            label: label.to_string(),
            refused: !out.status.success(),
            text,
        }
    }
}

fn network_variants() -> Vec<(&'static str, String)> {
    let r = |from: &str, to: &str| {
        assert!(BASE.contains(from), "{from}");
        BASE.replacen(from, to, 1)
    };
    let valve = |kind: &str, to: &str, setting: &str| {
        format!(
            "{BASE}\n[[valve]]\nid = \"V-1\"\nfrom = \"J-1\"\nto = \"{to}\"\ndiameter = 8.0\nkind = \"{kind}\"\nsetting = {setting}\n"
        )
    };
    vec![
        ("valve kind", valve("prx", "J-2", "50.0")),
        ("valve setting", valve("prv", "J-2", "-5.0")),
        ("valve end", valve("prv", "T-1", "50.0")),
        (
            "valve settings",
            valve("prv", "J-2", "50.0").replace(
                "pumps_off = [\"PU-1\"]",
                "pumps_off = [\"PU-1\"]\nvalve_settings = { \"V-9\" = 40.0 }",
            ),
        ),
        (
            "minor loss",
            r("length = 600.0", "length = 600.0\nminor_loss = -1.0"),
        ),
        ("syntax", r("id = \"J-2\"", "id = J-2\"")),
        ("unknown key", r("length = 600.0", "lenght = 600.0")),
        ("missing key", r("diameter = 8.0\n", "")),
        ("not finite", r("elevation = 700.0", "elevation = nan")),
        ("not positive", r("length = 600.0", "length = -5")),
        (
            "not boolean",
            r("check_valve = true", "check_valve = \"yes\""),
        ),
        ("not string", r("id = \"J-4\"", "id = 12")),
        ("empty id", r("id = \"J-4\"", "id = \"\"")),
        ("hidden character", r("id = \"J-4\"", "id = \"J-4\\u202e\"")),
        (
            "not array",
            format!(
                "group = \"ci-1950\"\n{}",
                r("[[group]]\nname = \"ci-1950\"\nmin = 40.0\nmax = 140.0", "")
            ),
        ),
        ("units", r("units = \"us\"", "units = \"metric\"")),
        (
            "flow unit",
            r("units = \"us\"", "units = \"us\"\nflow_unit = \"m3/h\""),
        ),
        ("duplicate", r("id = \"J-4\"", "id = \"J-3\"")),
        ("dangling", r("to = \"J-2\"", "to = \"J-9\"")),
        ("self", r("to = \"J-2\"", "to = \"J-1\"")),
        ("group", r("group = \"ci-1950\"", "group = \"ci-195\"")),
        ("bounds", r("min = 40.0", "min = 150.0")),
        ("plan", r("demand = 50.0", "demand = 50.0\nx = 3.0")),
        (
            "no fixed head",
            r("[[fixed_head]]\nid = \"T-1\"\nhead = 900.0", "")
                .replace("from = \"T-1\"", "from = \"J-4\""),
        ),
        (
            "isolated",
            format!("{BASE}\n[[junction]]\nid = \"J-9\"\nelevation = 1.0\n"),
        ),
        (
            "condition cuts",
            r("closed = [\"P-3\"]", "closed = [\"P-1\"]"),
        ),
        (
            "condition pipe",
            r("closed = [\"P-3\"]", "closed = [\"P-99\"]"),
        ),
        (
            "condition kind",
            r("closed = [\"P-3\"]", "closed = [\"PU-1\"]"),
        ),
        (
            "condition head",
            r("heads = { \"T-1\" = 880.0 }", "heads = { \"T-9\" = 880.0 }"),
        ),
        (
            "curve points",
            r(
                "curve = [[0.0, 120.0], [300.0, 100.0], [600.0, 50.0]]",
                "curve = [[0.0, 120.0], [300.0, 100.0]]",
            ),
        ),
        (
            "curve rises",
            r(
                "curve = [[0.0, 120.0], [300.0, 100.0], [600.0, 50.0]]",
                "curve = [[0.0, 120.0], [300.0, 130.0], [600.0, 50.0]]",
            ),
        ),
    ]
}

/// Sheet rows (under the us header) that each draw one kind of finding; run with `tests` against the
/// base network so the network rules apply too.
const FINDING_ROWS: &[&str] = &[
    "HT-1,,,J-1,J-2,70,55,500,,,,,",
    "HT-2,,,J-1,J-2,70,55,500,,,,,\"extra\",cell",
    ",,,J-1,J-2,70,55,500,,,,,",
    "HT-4,,,,J-2,70,55,500,,,,,",
    "HT-5,,,J-1,,70,55,500,,,,,",
    "HT-6,,,J-1,J-2,70,,500,,,,,",
    "HT-7,,,J-1,J-2,7o,55,500,,,,,",
    "HT-8,,,J-1,J-2,1e308,55,500,,,,,",
    "HT-9,,,J-1,J-2,-70,55,500,,,,,",
    "HT-10,,,J-1,J-2,70,55,0,,,,,",
    "HT-11,,,J-1,J-2,70,55,,14,2.5,9,,",
    "HT-12,,,J-1,J-2;J-3,70,55,500,,,,,",
    "HT-13,,,J-1,J-2,55,70,500,,,,,",
    "HT-14,,,J-1,J-1,70,55,500,,,,,",
    "HT-15,,,J-1,J-2;J-2,70,55,500;400,,,,,",
    "HT-16,,,J-1,J-2,70,55,,90,2.5,0.9,,",
    "HT-17,,,J-1,J-2,70,66,500,,,,,",
    "HT-18,,,J-99,J-2,70,55,500,,,,,",
    "HT-19,,,J-1,T-1,70,55,500,,,,,",
    "HT-20,,,J-1,J-2,70,55,500,,,,noon,",
    "HT-21,,,J-1,J-2,20,5,500,,,,,",
    "HT-1,,,J-2,J-3,70,50,500,,,,,",
    "HT-22,,,J-1,J-2,70,55,5000,,2.5,,,",
    "HT-23,,,J-1,J-2,70,55,500",
];

fn cli_outcomes(s: &Scratch) -> Vec<Outcome> {
    let mut out = Vec::new();
    for (label, text) in network_variants() {
        let path = s.file(
            &format!("{}.toml", label.replace(' ', "-")),
            text.as_bytes(),
        );
        let outcome = s.run(label, &["check", path.to_str().unwrap()]);
        assert!(outcome.refused, "{label} was accepted");
        out.push(outcome);
    }
    let net = s.file("base.toml", BASE.as_bytes());
    let net = net.to_str().unwrap();
    out.push(s.run("missing network", &["check", "nowhere.toml"]));
    let junk = s.file("junk.toml", b"units = \"us\"\nti\xfftle = 1\n");
    out.push(s.run("binary network", &["check", junk.to_str().unwrap()]));

    let mut findings = format!("{HEADER}\n");
    for row in FINDING_ROWS {
        findings.push_str(row);
        findings.push('\n');
    }
    let sheet = s.file("findings.csv", findings.as_bytes());
    out.push(s.run("findings", &["tests", net, sheet.to_str().unwrap()]));
    out.push(s.run(
        "findings (fireflow)",
        &["fireflow", sheet.to_str().unwrap()],
    ));
    let use_sheet = s.file(
        "use.csv",
        format!("{HEADER},use\nHT-24,,,J-1,J-2,70,55,500,,,,,,maybe\n").as_bytes(),
    );
    out.push(s.run("use cell", &["tests", net, use_sheet.to_str().unwrap()]));

    let sheets: Vec<(&str, Vec<u8>)> = vec![
        ("binary sheet", b"test,static_psi\n\xff\xfe\x00".to_vec()),
        ("empty sheet", Vec::new()),
        ("pipes", HEADER.replace(',', "|").into_bytes()),
        (
            "missing column",
            HEADER.replace("residual_node,", "").into_bytes(),
        ),
        (
            "duplicate column",
            format!("{HEADER},static_psi\n").into_bytes(),
        ),
        (
            "mixed units",
            HEADER.replace("static_psi", "static_kpa").into_bytes(),
        ),
    ];
    for (label, bytes) in sheets {
        let path = s.file(&format!("{}.csv", label.replace(' ', "-")), &bytes);
        let outcome = s.run(label, &["fireflow", path.to_str().unwrap()]);
        assert!(outcome.refused, "{label} was accepted");
        out.push(outcome);
    }
    out.push(s.run("missing sheet", &["fireflow", "nowhere.csv"]));

    let honesty = |name: &str| {
        PathBuf::from(env!("CARGO_MANIFEST_DIR"))
            .join("tests/data/honesty")
            .join(name)
            .to_string_lossy()
            .into_owned()
    };
    let lift = honesty("pump-cannot-lift.toml");
    out.push(s.run("not converged", &["solve", &lift, "--demand", "J-D=1e15"]));
    out.push(s.run("non-finite", &["solve", &lift, "--demand", "J-D=1e200"]));
    let tiny = s.file(
        "tiny.toml",
        std::fs::read_to_string(&lift)
            .unwrap()
            .replace("diameter = 8.0", "diameter = 1e-300")
            .as_bytes(),
    );
    out.push(s.run("factorization", &["solve", tiny.to_str().unwrap()]));
    out.push(s.run("unknown condition", &["solve", net, "--condition", "noon"]));
    out.push(s.run(
        "warnings: isolated, lift",
        &["solve", &honesty("isolated-behind-check-valve.toml")],
    ));
    out.push(s.run(
        "warnings: negative",
        &["solve", &honesty("negative-pressure.toml")],
    ));
    out.push(s.run(
        "isolated gauge",
        &[
            "tests",
            &honesty("isolated-behind-check-valve.toml"),
            &honesty("isolated-gauge.csv"),
        ],
    ));

    out.push(s.run("loops pump", &["loops", net]));
    let no_pump = s.file(
        "nopump.toml",
        BASE.replace("[[pump]]", "[[pump]]\noff = true").as_bytes(),
    );
    out.push(s.run("loops check valve", &["loops", no_pump.to_str().unwrap()]));
    let plain = s.file(
        "plain.toml",
        BASE.replace("[[pump]]", "[[pump]]\noff = true")
            .replace("check_valve = true", "")
            .as_bytes(),
    );
    out.push(s.run(
        "loops iterations",
        &["loops", plain.to_str().unwrap(), "--iterations", "1"],
    ));
    out.extend(apply_outcomes(s, net));
    out.push(s.run("demand form", &["solve", net, "--demand", "J-1"]));
    out.push(s.run("demand node", &["solve", net, "--demand", "J-9=100"]));
    out.push(s.run("demand number", &["solve", net, "--demand", "J-1=lots"]));
    out.push(s.run("demand nan", &["solve", net, "--demand", "J-1=NaN"]));
    out.push(s.run(
        "target",
        &["fireflow", sheet.to_str().unwrap(), "--target=-5"],
    ));
    let sheet_path = sheet.to_str().unwrap();
    out.push(s.run("plan count", &["plan", net, sheet_path, "--count", "0"]));
    out.push(s.run(
        "plan distance",
        &["plan", net, sheet_path, "--max-distance=-5"],
    ));
    out.push(s.run("plan drop", &["plan", net, sheet_path, "--min-drop", "0"]));
    out.push(s.run(
        "plan residual",
        &["plan", net, sheet_path, "--min-residual", "nan"],
    ));
    out.push(s.run(
        "plan flow hydrants",
        &["plan", net, sheet_path, "--flow-hydrants", "3"],
    ));
    out.push(s.run("subcommand", &["slove", net]));
    out.push(s.run("missing argument", &["solve"]));
    out
}

/// `apply` with coefficient sets that each carry one defect, then the refusals of the write.
fn apply_outcomes(s: &Scratch, net: &str) -> Vec<Outcome> {
    let valid = "[[group]]\nname = \"ci-1950\"\nc = 90\n";
    let r = |from: &str, to: &str| {
        assert!(valid.contains(from), "{from}");
        valid.replacen(from, to, 1)
    };
    let sets: Vec<(&str, &str, String)> = vec![
        ("set extension", "set.txt", valid.to_string()),
        ("set toml syntax", "syntax.toml", r("ci-1950\"", "ci-1950")),
        (
            "set csv syntax",
            "syntax.csv",
            "group,fitted\nci-1950,90,extra\n".into(),
        ),
        (
            "set unknown key",
            "key.toml",
            format!("title = \"x\"\n{valid}"),
        ),
        ("set number", "number.toml", r("c = 90", "c = \"90\"")),
        (
            "set boolean",
            "boolean.toml",
            format!("{valid}locked = \"yes\"\n"),
        ),
        ("set whole", "whole.toml", format!("{valid}tests = -1\n")),
        ("set string", "string.toml", r("\"ci-1950\"", "12")),
        ("set table", "table.toml", "group = [1]\n".into()),
        ("set list", "list.toml", "group = \"ci-1950\"\n".into()),
        ("set missing", "missing.toml", r("c = 90\n", "")),
        ("set not positive", "negative.toml", r("c = 90", "c = -5")),
        (
            "set std_error",
            "std-error.toml",
            format!("{valid}std_error = -1\n"),
        ),
        (
            "set bounds",
            "bounds.toml",
            format!("{valid}min = 90\nmax = 60\n"),
        ),
        ("set duplicate", "duplicate.toml", format!("{valid}{valid}")),
        (
            "set status",
            "status.toml",
            format!("{valid}status = \"great\"\n"),
        ),
        (
            "set not converged",
            "stopped.toml",
            format!("{valid}status = \"not converged\"\n"),
        ),
        (
            "set constant without units",
            "constant.toml",
            format!("hazen_williams_constant = 10.5\n{valid}"),
        ),
        (
            "set csv constant differs",
            "constants.csv",
            "group,fitted,units,hazen_williams_constant\nci-1950,90,si,10.67\nci-1950,91,si,10.5\n"
                .into(),
        ),
        ("set empty", "empty.csv", String::new()),
        (
            "set unknown group",
            "group.csv",
            "group,fitted\npvc,140\n".into(),
        ),
    ];
    let mut out = Vec::new();
    for (label, name, text) in sets {
        let path = s.file(name, text.as_bytes());
        let outcome = s.run(
            label,
            &[
                "apply",
                net,
                path.to_str().unwrap(),
                "--out",
                "applied.toml",
            ],
        );
        assert!(outcome.refused, "{label} was accepted: {}", outcome.text);
        out.push(outcome);
    }
    out.push(s.run(
        "set missing file",
        &["apply", net, "nowhere.toml", "--out", "applied.toml"],
    ));
    let set = s.file("set.toml", valid.as_bytes());
    let set = set.to_str().unwrap();
    let first = s.run("apply", &["apply", net, set, "--out", "applied.toml"]);
    assert!(!first.refused, "{}", first.text);
    out.push(s.run("apply again", &["apply", net, set, "--out", "applied.toml"]));
    let other_constant = s.file(
        "other-constant.toml",
        format!("units = \"si\"\nhazen_williams_constant = 10.5088\n{valid}").as_bytes(),
    );
    let warned = s.run(
        "apply another constant",
        &[
            "apply",
            net,
            other_constant.to_str().unwrap(),
            "--out",
            "other-applied.toml",
        ],
    );
    assert!(!warned.refused, "{}", warned.text);
    out.push(warned);
    // A CSV set carries its constant on every row; `apply` warns for it as for a TOML set.
    let other_csv = s.file(
        "other-constant.csv",
        b"group,fitted,units,hazen_williams_constant\nci-1950,90,si,10.5088\n",
    );
    let warned = s.run(
        "apply another constant from a csv set",
        &[
            "apply",
            net,
            other_csv.to_str().unwrap(),
            "--out",
            "other-applied-csv.toml",
        ],
    );
    assert!(!warned.refused, "{}", warned.text);
    assert!(
        warned
            .text
            .contains("the same losses would need every C multiplied by"),
        "{}",
        warned.text
    );
    out.push(warned);
    out.push(s.run(
        "apply into a missing folder",
        &["apply", net, set, "--out", "missing/applied.toml"],
    ));
    out
}

fn library_outcomes(s: &Scratch) -> Vec<Outcome> {
    let mut out = Vec::new();
    let mut refusal = |label: &str, text: String| {
        out.push(Outcome {
            label: label.into(),
            refused: true,
            text,
        })
    };
    let existing = s.file("coefficients.toml", b"kept");
    refusal(
        "write_new",
        storage::write_new(&existing, b"new", false)
            .unwrap_err()
            .to_string(),
    );
    let missing = s.dir.path().join("missing/sheet.csv");
    refusal(
        "save into a missing folder",
        save_sheet(&FieldSheet::empty(UnitSystem::Us), &missing)
            .unwrap_err()
            .to_string(),
    );

    let net = parse_network(BASE, "base.toml").unwrap().network;
    let options = CalibrationOptions::for_units(UnitSystem::Us);
    let fit = |tests: &[CalibrationTest], cancel: bool| {
        calibrate(&net, tests, &options, &mut |_| {}, &AtomicBool::new(cancel))
            .unwrap_err()
            .to_string()
    };
    let test = |junction: usize| CalibrationTest {
        id: "HT-1".into(),
        residual_junction: junction,
        condition: None,
        hydrant_flows_m3s: vec![(1, 0.03)],
        static_head_m: 50.0,
        residual_head_m: 40.0,
    };
    refusal("no tests", fit(&[], false));
    // A gauge downstream of the grouped pipes with a big flow informs the group, so the optimizer runs
    // and sees the cancel flag.
    let informing = CalibrationTest {
        residual_junction: 2,
        hydrant_flows_m3s: vec![(2, 0.08)],
        ..test(0)
    };
    refusal("cancelled", fit(&[informing], true));
    // Readings the model itself gives, so the fit stays inside the bounds with a standard error.
    let solver = roughcal::hydraulics::GradientSolver::new(&net).unwrap();
    let base = roughcal::hydraulics::OperatingState::base(&net);
    let c = net.c_factors();
    let statics = solver.solve(&net, &base, &c, None).unwrap();
    let mut flowing = base.clone();
    flowing.add_demand(2, 0.03);
    let flowing = solver.solve(&net, &flowing, &c, None).unwrap();
    let modelled = |id: &str, gauge: usize| CalibrationTest {
        id: id.into(),
        residual_junction: gauge,
        condition: None,
        hydrant_flows_m3s: vec![(2, 0.03)],
        static_head_m: statics.pressure_head_m(&net, gauge).unwrap(),
        residual_head_m: flowing.pressure_head_m(&net, gauge).unwrap(),
    };
    let fitted = calibrate(
        &net,
        &[modelled("HT-1", 2), modelled("HT-2", 1)],
        &options,
        &mut |_| {},
        &AtomicBool::new(false),
    )
    .unwrap();
    let plan = |result: &roughcal::calibrate::CalibrationResult, options: &PlanOptions| {
        plan_tests(
            &net,
            result,
            &CalibrationOptions::for_units(UnitSystem::Us),
            options,
        )
        .unwrap_err()
        .to_string()
    };
    let us = PlanOptions::for_units(UnitSystem::Us);
    let mut nothing = fitted.clone();
    for group in &mut nothing.groups {
        group.status = roughcal::calibrate::GroupStatus::Locked;
    }
    refusal("plan nothing fitted", plan(&nothing, &us));
    refusal(
        "plan no candidate",
        plan(
            &fitted,
            &PlanOptions {
                min_drop_m: 1e4,
                ..us.clone()
            },
        ),
    );
    refusal(
        "plan flow hydrants (library)",
        plan(
            &fitted,
            &PlanOptions {
                flow_hydrants: 3,
                ..us
            },
        ),
    );
    refusal("bad test", fit(&[test(999)], false));

    let iso = parse_network(
        include_str!("data/honesty/isolated-behind-check-valve.toml"),
        "iso.toml",
    )
    .unwrap()
    .network;
    let behind = iso.find_junction("J-BEHIND").unwrap();
    let isolated = CalibrationTest {
        residual_junction: behind,
        ..test(0)
    };
    refusal(
        "isolated gauge",
        calibrate(
            &iso,
            &[isolated],
            &options,
            &mut |_| {},
            &AtomicBool::new(false),
        )
        .unwrap_err()
        .to_string(),
    );
    out
}

#[test]
fn every_catalogued_error_happens_and_every_refusal_is_catalogued() {
    let (phrases, guards) = catalogue();
    assert!(phrases.len() > 60, "only {} phrases read", phrases.len());
    let scratch = Scratch {
        dir: tempfile::tempdir().unwrap(),
    };
    let mut outcomes = cli_outcomes(&scratch);
    outcomes.extend(library_outcomes(&scratch));
    outcomes.extend(import_outcomes(&scratch));

    let missing: Vec<&String> = phrases
        .iter()
        .filter(|p| !outcomes.iter().any(|o| o.text.contains(p.as_str())))
        .collect();
    assert!(
        missing.is_empty(),
        "docs/errors.md lists messages no trigger produced: {missing:#?}"
    );
    for outcome in outcomes.iter().filter(|o| o.refused) {
        assert!(
            phrases
                .iter()
                .chain(&guards)
                .any(|p| outcome.text.contains(p.as_str())),
            "`{}` refused with a message docs/errors.md does not list:\n{}",
            outcome.label,
            outcome.text
        );
    }
}

const IMPORT_CONFIG: &str = r#"units = "us"
snap = 0.5
[pipe_fields]
id = "pipe_no"
diameter = "dia"
length = "len"
c = "hw_c"
material = "mat"
year = "yr"
from = "from_node"
to = "to_node"
[node_fields]
id = "node_no"
elevation = "elev"
head = "hgl"
[[rule]]
group = "ci"
material = ["CI"]
year_from = 1900
year_to = 1949
c = 85
[[rule]]
group = "pvc"
material = ["PVC"]
c = 140
"#;

const IMPORT_NODES: &str = r#"{"type": "FeatureCollection", "features": [
{"type": "Feature", "geometry": {"type": "Point", "coordinates": [0, 0]}, "properties": {"node_no": "T", "hgl": 300}},
{"type": "Feature", "geometry": {"type": "Point", "coordinates": [100, 0]}, "properties": {"node_no": "A", "elev": 100}},
{"type": "Feature", "geometry": {"type": "Point", "coordinates": [200, 0]}, "properties": {"node_no": "B", "elev": 90}}
]}"#;

fn import_pipe(id: &str, line: &str, props: &str) -> String {
    format!(
        r#"{{"type": "Feature", "geometry": {{"type": "LineString", "coordinates": {line}}}, "properties": {{"pipe_no": "{id}", {props}}}}}"#
    )
}

fn import_pipes(extra: &[String]) -> String {
    let mut features = vec![
        import_pipe(
            "P-1",
            "[[0, 0], [100, 0]]",
            r#""dia": 8, "mat": "CI", "yr": 1925"#,
        ),
        import_pipe(
            "P-2",
            "[[100, 0], [200, 0]]",
            r#""dia": 8, "mat": "CI", "yr": 1925"#,
        ),
    ];
    features.extend(extra.iter().cloned());
    format!(
        "{{\"type\": \"FeatureCollection\", \"features\": [{}]}}",
        features.join(",\n")
    )
}

/// Every import refusal and warning, through the library (and the command for its own messages).
fn import_outcomes(s: &Scratch) -> Vec<Outcome> {
    use roughcal::network::import::{ImportInput, Source, SourceFormat, import_network};
    let mut out = Vec::new();
    let mut import = |label: &str,
                      config: &str,
                      pipes: &str,
                      pipes_format: SourceFormat,
                      nodes: &str,
                      nodes_format: SourceFormat| {
        let input = ImportInput {
            config_file: "IMPORT.toml",
            config_text: config,
            pipes: Source {
                file: "pipes.geojson",
                text: pipes,
                format: pipes_format,
            },
            nodes: Source {
                file: "nodes.geojson",
                text: nodes,
                format: nodes_format,
            },
        };
        let outcome = match import_network(&input).and_then(|imported| {
            imported.network_toml(&input, "2026-12-03")?;
            Ok(imported)
        }) {
            Ok(imported) => Outcome {
                label: label.into(),
                refused: false,
                text: imported
                    .warnings
                    .iter()
                    .map(|w| w.to_string())
                    .collect::<Vec<_>>()
                    .join("\n"),
            },
            Err(error) => Outcome {
                label: label.into(),
                refused: true,
                text: error.to_string(),
            },
        };
        out.push(outcome);
    };
    let geo = SourceFormat::GeoJson;
    let csv = SourceFormat::Csv;
    let cfg = |from: &str, to: &str| {
        assert!(IMPORT_CONFIG.contains(from), "{from}");
        IMPORT_CONFIG.replacen(from, to, 1)
    };
    let pipes = import_pipes(&[]);
    let with = |props: &str| import_pipes(&[import_pipe("P-9", "[[100, 0], [200, 0]]", props)]);
    let ci = r#""dia": 8, "mat": "CI", "yr": 1925"#;
    let configs = [
        ("unknown key", cfg("snap = 0.5", "snapp = 0.5")),
        ("negative snap", cfg("snap = 0.5", "snap = -1")),
        (
            "no rule",
            IMPORT_CONFIG.split("[[rule]]").next().unwrap().to_string(),
        ),
        ("bounds", cfg("c = 85", "c = 85\nmin = 130\nmax = 30")),
        ("years", cfg("year_from = 1900", "year_from = 1950")),
        ("no year field", cfg("year = \"yr\"\n", "")),
        (
            "rules disagree",
            format!("{IMPORT_CONFIG}[[rule]]\ngroup = \"ci\"\nc = 90\n"),
        ),
        (
            "condition head",
            format!(
                "{IMPORT_CONFIG}[[condition]]\nname = \"tue-am\"\nheads = {{ \"T-9\" = 290 }}\n"
            ),
        ),
        (
            "condition pipe",
            format!("{IMPORT_CONFIG}[[condition]]\nname = \"tue-am\"\nclosed = [\"P-99\"]\n"),
        ),
    ];
    for (label, config) in &configs {
        import(label, config, &pipes, geo, IMPORT_NODES, geo);
    }
    let point = r#"{"type": "Point", "coordinates": [0, 0]}"#;
    import(
        "not a collection",
        IMPORT_CONFIG,
        point,
        geo,
        IMPORT_NODES,
        geo,
    );
    import(
        "cut short",
        IMPORT_CONFIG,
        "{\"type\": \"FeatureCollection\", \"features\": [\n",
        geo,
        IMPORT_NODES,
        geo,
    );
    import(
        "no column",
        IMPORT_CONFIG,
        "pipe_no,from_node,to_node,diameter\nP-1,T,A,8\n",
        csv,
        IMPORT_NODES,
        geo,
    );
    import(
        "empty",
        IMPORT_CONFIG,
        &pipes,
        geo,
        r#"{"type": "FeatureCollection", "features": []}"#,
        geo,
    );
    let cases = [
        ("no id", import_pipes(&[import_pipe("", "[[100, 0], [200, 0]]", ci)])),
        ("duplicate", import_pipes(&[import_pipe("P-1", "[[100, 0], [200, 0]]", ci)])),
        ("no diameter", with(r#""mat": "CI", "yr": 1925"#)),
        ("not a number", with(r#""dia": "eight", "mat": "CI", "yr": 1925"#)),
        ("negative", with(r#""dia": -8, "mat": "CI", "yr": 1925"#)),
        ("mixed units", with(r#""dia": "200 mm", "mat": "CI", "yr": 1925"#)),
        (
            "point pipe",
            import_pipes(&[r#"{"type": "Feature", "geometry": {"type": "Point", "coordinates": [1, 2]}, "properties": {"pipe_no": "P-9", "dia": 8}}"#.to_string()]),
        ),
        (
            "no geometry",
            import_pipes(&[r#"{"type": "Feature", "geometry": null, "properties": {"pipe_no": "P-9", "dia": 8}}"#.to_string()]),
        ),
        ("one position", import_pipes(&[import_pipe("P-9", "[[100, 0]]", ci)])),
        ("far end", import_pipes(&[import_pipe("P-9", "[[100, 0], [200, 9]]", ci)])),
        ("loop", import_pipes(&[import_pipe("P-9", "[[100, 0], [150, 20], [100.2, 0]]", ci)])),
        ("zero length", with(r#""dia": 8, "len": 0, "mat": "CI", "yr": 1925"#)),
        ("no rule matches", with(r#""dia": 8, "mat": "PE", "yr": 1990"#)),
    ];
    for (label, pipes) in &cases {
        import(label, IMPORT_CONFIG, pipes, geo, IMPORT_NODES, geo);
    }
    let two = import_pipes(&[])
        .replace(r#",
{"type": "Feature", "geometry": {"type": "LineString", "coordinates": [[100, 0], [200, 0]]}, "properties": {"pipe_no": "P-2", "dia": 8, "mat": "CI", "yr": 1925}}"#, "");
    import("unreached", IMPORT_CONFIG, &two, geo, IMPORT_NODES, geo);
    import(
        "lonlat",
        &cfg("snap = 0.5", "snap = 0.5\ncoordinates = \"lonlat\""),
        &pipes.replace("200, 0", "20, 0"),
        geo,
        &IMPORT_NODES.replace("200, 0", "200, 95"),
        geo,
    );
    import(
        "unknown csv node",
        IMPORT_CONFIG,
        "pipe_no,from_node,to_node,dia,len,mat,yr\nP-1,T,A,8,100,CI,1925\nP-2,A,X,8,100,CI,1925\n",
        csv,
        IMPORT_NODES,
        geo,
    );
    import(
        "no source",
        IMPORT_CONFIG,
        &pipes,
        geo,
        &IMPORT_NODES.replace(r#""hgl": 300"#, r#""elev": 120"#),
        geo,
    );
    let new_junctions = cfg("snap = 0.5", "snap = 0.5\nnew_junctions = true");
    import(
        "island of new junctions",
        &new_junctions,
        &import_pipes(&[import_pipe("P-9", "[[500, 0], [600, 0]]", ci)]),
        geo,
        IMPORT_NODES,
        geo,
    );
    import(
        "warnings",
        &new_junctions,
        &import_pipes(&[import_pipe(
            "P-7",
            "[[200, 0], [200.5, 30]]",
            r#""dia": 150, "mat": "CI", "yr": 1925, "hw_c": 160, "len": 0.5"#,
        )]),
        geo,
        IMPORT_NODES,
        geo,
    );

    let gis = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-network/gis");
    let gis = gis.to_str().unwrap();
    let existing = s.file("imported.toml", b"kept");
    let args = |config: &str, pipes: &str, out: &str| -> Vec<String> {
        ["import", "--config", config, "--pipes", pipes, "--nodes"]
            .iter()
            .map(|a| a.to_string())
            .chain([format!("{gis}/nodes.geojson"), "--out".into(), out.into()])
            .collect()
    };
    let run = |label: &str, a: Vec<String>| {
        s.run(label, &a.iter().map(String::as_str).collect::<Vec<_>>())
    };
    let pipes_file = format!("{gis}/pipes.geojson");
    let config_file = format!("{gis}/IMPORT.toml");
    out.push(run(
        "no config",
        args("no-such-import.toml", &pipes_file, "never-written.toml"),
    ));
    out.push(run(
        "shapefile",
        args(&config_file, "mains.shp", "never-written.toml"),
    ));
    out.push(run(
        "existing out",
        args(&config_file, &pipes_file, existing.to_str().unwrap()),
    ));
    for outcome in &out {
        let expected_refusal = !matches!(outcome.label.as_str(), "warnings");
        assert_eq!(
            outcome.refused, expected_refusal,
            "{}: {}",
            outcome.label, outcome.text
        );
    }
    out
}

/// The severity each row of "Findings of single rows" gives in its example (`: error:` or
/// `: warning:`), by phrase.
fn catalogued_severities() -> Vec<(String, &'static str)> {
    let doc = std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("docs/errors.md"))
        .unwrap();
    let mut out = Vec::new();
    let mut in_rows = false;
    for line in doc.lines() {
        if line.starts_with('#') {
            in_rows = line.contains("Findings of single rows");
        }
        let (true, Some(rest)) = (in_rows, line.strip_prefix("| `")) else {
            continue;
        };
        let phrase = rest.split("` |").next().unwrap().to_string();
        let example = rest.split("` |").nth(1).unwrap_or("");
        let severity = if example.contains(": error: ") {
            "error"
        } else if example.contains(": warning: ") {
            "warning"
        } else {
            continue;
        };
        out.push((phrase, severity));
    }
    out
}

#[test]
fn every_row_finding_has_the_severity_the_catalogue_gives_it() {
    let severities = catalogued_severities();
    assert!(severities.len() > 20, "only {} rows read", severities.len());
    let scratch = Scratch {
        dir: tempfile::tempdir().unwrap(),
    };
    let net = scratch.file("base.toml", BASE.as_bytes());
    let mut findings = format!("{HEADER}\n");
    for row in FINDING_ROWS {
        findings.push_str(row);
        findings.push('\n');
    }
    let sheet = scratch.file("findings.csv", findings.as_bytes());
    // The `use` column is optional, so its finding comes from a sheet of its own.
    let use_sheet = scratch.file(
        "use.csv",
        format!("{HEADER},use\nHT-24,,,J-1,J-2,70,55,500,,,,,,maybe\n").as_bytes(),
    );
    let mut given: Vec<(String, String)> = Vec::new();
    for sheet in [sheet, use_sheet] {
        let out = Command::new(env!("CARGO_BIN_EXE_roughcal"))
            .args([
                "tests",
                net.to_str().unwrap(),
                sheet.to_str().unwrap(),
                "--json",
            ])
            .output()
            .unwrap();
        let json: serde_json::Value = serde_json::from_slice(&out.stdout).expect("stdout is JSON");
        given.extend(
            json["tests"]
                .as_array()
                .unwrap()
                .iter()
                .flat_map(|t| t["findings"].as_array().unwrap().clone())
                .map(|f| {
                    (
                        f["reason"].as_str().unwrap().to_string(),
                        f["severity"].as_str().unwrap().to_string(),
                    )
                }),
        );
    }
    for (phrase, severity) in severities {
        let matching: Vec<&(String, String)> = given
            .iter()
            .filter(|(reason, _)| reason.contains(&phrase))
            .collect();
        assert!(!matching.is_empty(), "no finding says `{phrase}`");
        for (reason, found) in matching {
            assert_eq!(
                found, severity,
                "docs/errors.md says `{phrase}` is a {severity}, the program gives {found}: {reason}"
            );
        }
    }
}
