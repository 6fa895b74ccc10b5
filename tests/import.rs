//! `roughcal import`: GIS exports (GeoJSON, CSV) to networks that solve like the same network written
//! directly, every refusal with its feature and id, the warnings, the CLI contract, and the round trip
//! import -> calibrate -> pipes.csv.

use std::process::Command;
use std::sync::atomic::AtomicBool;

use roughcal::calibrate::{CalibrationOptions, calibrate};
use roughcal::fieldtest::{FieldSheet, calibration_tests, screen_sheet};
use roughcal::hydraulics::{GradientSolver, HazenWilliams, OperatingState};
use roughcal::network::file::parse_network;
use roughcal::network::import::export::{ExportPlan, GisExport, gis_export};
use roughcal::network::import::{
    Coordinates, ImportError, ImportInput, Imported, ProblemKind, Source, SourceFormat,
    WarningKind, import_network,
};
use roughcal::network::lonlat::LonLat;
use roughcal::network::synthetic::Synthetic;
use roughcal::network::{Network, NodeRef, UnitSystem};
use roughcal::report::{
    CALIBRATED_NETWORK, CalibrationOutputs, PIPES_CSV, RESULTS_GEOJSON, RunContext,
};

fn plan(coordinates: Coordinates, groups: usize) -> ExportPlan {
    ExportPlan {
        coordinates,
        origin: LonLat {
            lon_deg: -123.1,
            lat_deg: 49.25,
        },
        snap: 1.5,
        bend_every: 5,
        offset_every: 3,
        materials: (0..groups)
            .map(|g| (format!("mat-{g}"), 1950 + g as i64 * 10))
            .collect(),
        header: "test export".into(),
    }
}

fn run_import(
    config: &str,
    pipes: &str,
    pipes_format: SourceFormat,
    nodes: &str,
    nodes_format: SourceFormat,
) -> Result<Imported, ImportError> {
    import_network(&input(config, pipes, pipes_format, nodes, nodes_format))
}

fn input<'a>(
    config: &'a str,
    pipes: &'a str,
    pipes_format: SourceFormat,
    nodes: &'a str,
    nodes_format: SourceFormat,
) -> ImportInput<'a> {
    ImportInput {
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
    }
}

fn import_export(export: &GisExport) -> Imported {
    run_import(
        &export.import_toml,
        &export.pipes_geojson,
        SourceFormat::GeoJson,
        &export.nodes_geojson,
        SourceFormat::GeoJson,
    )
    .unwrap_or_else(|e| panic!("{e}"))
}

/// Heads of every junction and fixed head by id, from a base-state solve at the network's own C.
fn solved_heads(net: &Network) -> Vec<(String, f64)> {
    let solver = GradientSolver::new(net).unwrap();
    let state = OperatingState::base(net);
    let solution = solver.solve(net, &state, &net.c_factors(), None).unwrap();
    (0..net.junctions.len())
        .map(|j| {
            (
                net.junctions[j].id.clone(),
                solution.node_head_m(&state, NodeRef::Junction(j)),
            )
        })
        .collect()
}

/// Equal within what the network writer keeps: 1e-9 relative or 1e-6 absolute.
fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-9 * a.abs().max(b.abs()) + 1e-6
}

fn assert_solves_alike(imported: &Network, expected: &Network) {
    assert_eq!(imported.pipes.len(), expected.pipes.len());
    for (a, b) in imported.pipes.iter().zip(&expected.pipes) {
        assert_eq!(a.id, b.id);
        assert_eq!(
            imported.node_id(a.from),
            expected.node_id(b.from),
            "{}",
            a.id
        );
        assert_eq!(imported.node_id(a.to), expected.node_id(b.to), "{}", a.id);
        // The network writer keeps six decimals of the file unit; serde_json's default float reading
        // may differ from the written value in the last bit.
        assert!(
            close(a.length_m, b.length_m),
            "{} {} {}",
            a.id,
            a.length_m,
            b.length_m
        );
        assert!(close(a.diameter_m, b.diameter_m));
        assert!(close(a.c_factor, b.c_factor));
        assert_eq!(
            imported.groups[a.group.unwrap()].name,
            expected.groups[b.group.unwrap()].name
        );
    }
    let (ha, hb) = (solved_heads(imported), solved_heads(expected));
    assert_eq!(ha.len(), hb.len());
    for ((ia, a), (ib, b)) in ha.iter().zip(&hb) {
        assert_eq!(ia, ib);
        assert!((a - b).abs() < 1e-6, "{ia}: {a} vs {b}");
    }
}

#[test]
fn a_projected_export_solves_like_the_network_written_directly() {
    let net = Synthetic::new(7).looped_city(150);
    let export = gis_export(&net, &plan(Coordinates::Projected, net.groups.len())).unwrap();
    // Ends off their nodes and bent lines with no length attribute are really in the export.
    assert!(export.pipes_geojson.contains("\"len\":null"));
    let imported = import_export(&export);
    assert_solves_alike(&imported.network, &export.expected);
    // And through the written file, as `roughcal check` and `solve` read it.
    let text = imported
        .network_toml(
            &input(
                &export.import_toml,
                &export.pipes_geojson,
                SourceFormat::GeoJson,
                &export.nodes_geojson,
                SourceFormat::GeoJson,
            ),
            "2026-12-03",
        )
        .unwrap();
    assert!(text.starts_with("# Imported by `roughcal import` on 2026-12-03"));
    let loaded = parse_network(&text, "imported.toml").unwrap().network;
    assert_solves_alike(&loaded, &export.expected);
    for (a, b) in loaded.junctions.iter().zip(&net.junctions) {
        let (pa, pb) = (a.position.unwrap(), b.position.unwrap());
        assert!((pa.0 - pb.0).abs() < 1e-6 && (pa.1 - pb.1).abs() < 1e-6);
    }
}

#[test]
fn a_lonlat_export_solves_like_the_network_written_directly() {
    for units in [UnitSystem::Us, UnitSystem::Si] {
        let net = Synthetic {
            units,
            ..Synthetic::new(11)
        }
        .looped_city(120);
        let export = gis_export(&net, &plan(Coordinates::Lonlat, net.groups.len())).unwrap();
        let imported = import_export(&export);
        assert!(imported.network.lonlat_origin.is_some());
        assert_solves_alike(&imported.network, &export.expected);
        // Straight pipes keep their length attribute (bent ones, measured along the ellipsoid, are
        // checked against the export's own geodesic lengths above).
        for (k, (a, b)) in imported.network.pipes.iter().zip(&net.pipes).enumerate() {
            if k % 5 != 2 {
                assert!(close(a.length_m, b.length_m));
            }
        }
    }
}

const CONFIG: &str = r#"
units = "us"
title = "refusals"
coordinates = "projected"
snap = 0.5
[pipe_fields]
id = "pipe_no"
diameter = "dia"
length = "len"
c = "hw_c"
material = "mat"
year = "yr"
closed = "status"
closed_values = ["closed", "CL"]
from = "from_node"
to = "to_node"
[node_fields]
id = "node_no"
elevation = "elev"
demand = "dem"
head = "hgl"
[[rule]]
group = "ci-unlined-1925"
material = ["CI", "cast iron"]
year_from = 1900
year_to = 1949
c = 85
min = 30
max = 130
[[rule]]
group = "pvc"
material = ["PVC"]
c = 140
"#;

/// Three nodes in a row (T at x=0 with a head, A at 100, B at 200), pipes given as features.
const NODES: &str = r#"{"type": "FeatureCollection", "features": [
{"type": "Feature", "geometry": {"type": "Point", "coordinates": [0, 0]}, "properties": {"node_no": "T", "hgl": 300}},
{"type": "Feature", "geometry": {"type": "Point", "coordinates": [100, 0]}, "properties": {"node_no": "A", "elev": 100, "dem": 50}},
{"type": "Feature", "geometry": {"type": "Point", "coordinates": [200, 0]}, "properties": {"node_no": "B", "elev": 90}}
]}"#;

fn pipe(id: &str, line: &str, props: &str) -> String {
    format!(
        r#"{{"type": "Feature", "geometry": {{"type": "LineString", "coordinates": {line}}}, "properties": {{"pipe_no": "{id}", {props}}}}}"#
    )
}

fn collection(features: &[String]) -> String {
    format!(
        "{{\"type\": \"FeatureCollection\", \"features\": [{}]}}",
        features.join(",\n")
    )
}

fn good_pipes() -> Vec<String> {
    vec![
        pipe(
            "P-1",
            "[[0.2, 0.1], [100.3, 0]]",
            r#""dia": 8, "mat": "CI", "yr": 1925"#,
        ),
        pipe(
            "P-2",
            "[[100, 0], [150, 30], [200, 0.4]]",
            r#""dia": "6 in", "mat": " cast IRON ", "yr": 1930, "hw_c": 92"#,
        ),
    ]
}

fn refusal(pipes: &str, nodes: &str) -> Vec<String> {
    match run_import(
        CONFIG,
        pipes,
        SourceFormat::GeoJson,
        nodes,
        SourceFormat::GeoJson,
    ) {
        Ok(_) => panic!("accepted"),
        Err(ImportError::Refused { problems }) => problems.iter().map(|p| p.to_string()).collect(),
        Err(other) => vec![other.to_string()],
    }
}

#[test]
fn a_small_export_imports_with_snapped_ends_rule_groups_and_line_lengths() {
    let imported = run_import(
        CONFIG,
        &collection(&good_pipes()),
        SourceFormat::GeoJson,
        NODES,
        SourceFormat::GeoJson,
    )
    .unwrap_or_else(|e| panic!("{e}"));
    let net = &imported.network;
    assert_eq!(net.fixed_heads.len(), 1);
    assert_eq!(net.junctions.len(), 2);
    assert_eq!(net.groups.len(), 1, "only the used rule's group");
    let p1 = &net.pipes[0];
    assert_eq!(net.node_id(p1.from), "T");
    assert_eq!(net.node_id(p1.to), "A");
    assert_eq!(p1.c_factor, 85.0, "no hw_c: the rule's c");
    // Length of the line as drawn: (0.2, 0.1) to (100.3, 0).
    let drawn_ft = (100.1f64).hypot(0.1);
    assert!((UnitSystem::Us.length_from_m(p1.length_m) - drawn_ft).abs() < 1e-9);
    let p2 = &net.pipes[1];
    assert_eq!(p2.c_factor, 92.0);
    // Two segments of a 50-30-(58.3) triangle: 2 * sqrt(50^2 + 30^2) nearly (the end is 0.4 off).
    let bent_ft = 50f64.hypot(30.0) + 50f64.hypot(29.6);
    assert!((UnitSystem::Us.length_from_m(p2.length_m) - bent_ft).abs() < 1e-9);
    assert!((UnitSystem::Us.diameter_from_m(p2.diameter_m) - 6.0).abs() < 1e-12);
    assert!((UnitSystem::Us.flow_from_m3s(net.junctions[0].demand_m3s) - 50.0).abs() < 1e-9);
    assert!(
        imported
            .warnings
            .iter()
            .any(|w| matches!(&w.kind, WarningKind::RuleUnused { group } if group == "pvc"))
    );
}

#[test]
fn every_refusal_names_the_feature_index_and_its_id() {
    let base = good_pipes();
    let with = |extra: String| {
        let mut pipes = base.clone();
        pipes.push(extra);
        collection(&pipes)
    };
    let cases: Vec<(String, String, &str)> = vec![
        (
            with(pipe(
                "P-far",
                "[[100, 0], [200, 9]]",
                r#""dia": 8, "mat": "CI", "yr": 1925"#,
            )),
            NODES.into(),
            "pipes.geojson: feature 2 (pipe_no `P-far`): no node within 0.5 ft of the line's end (nearest is `B`, 9.00 ft away)",
        ),
        (
            with(pipe(
                "P-pe",
                "[[100, 0], [200, 0]]",
                r#""dia": 8, "mat": "PE", "yr": 1990"#,
            )),
            NODES.into(),
            "pipes.geojson: feature 2 (pipe_no `P-pe`): no [[rule]] matches this pipe (material `PE`, year 1990)",
        ),
        (
            with(pipe(
                "P-nodia",
                "[[100, 0], [200, 0]]",
                r#""mat": "CI", "yr": 1925"#,
            )),
            NODES.into(),
            "pipes.geojson: feature 2 (pipe_no `P-nodia`): no `dia` value: the diameter is required",
        ),
        (
            with(pipe(
                "P-eight",
                "[[100, 0], [200, 0]]",
                r#""dia": "eight", "mat": "CI", "yr": 1925"#,
            )),
            NODES.into(),
            "pipes.geojson: feature 2 (pipe_no `P-eight`): `dia` must be a number (the diameter), found \"eight\"",
        ),
        (
            with(pipe(
                "P-1",
                "[[100, 0], [200, 0]]",
                r#""dia": 8, "mat": "CI", "yr": 1925"#,
            )),
            NODES.into(),
            "pipes.geojson: feature 2 (pipe_no `P-1`): duplicate pipe id: already used by feature 0",
        ),
        (
            with(pipe(
                "P-zero",
                "[[100, 0], [200, 0]]",
                r#""dia": 8, "len": 0, "mat": "CI", "yr": 1925"#,
            )),
            NODES.into(),
            "pipes.geojson: feature 2 (pipe_no `P-zero`): zero-length pipe: `len` is 0",
        ),
        (
            collection(&base[..1]),
            NODES.into(),
            "nodes.geojson: feature 2 (node_no `B`): node `B` is reached by no pipe",
        ),
        (
            with(pipe(
                "P-dot",
                "[[100, 0]]",
                r#""dia": 8, "mat": "CI", "yr": 1925"#,
            )),
            NODES.into(),
            "pipes.geojson: feature 2 (pipe_no `P-dot`): the line has 1 position: a pipe needs at least two",
        ),
        (
            collection(&base),
            r#"{"type": "Feature", "geometry": null, "properties": {}}"#.into(),
            "nodes.geojson: the file is not a GeoJSON FeatureCollection (found a single Feature)",
        ),
        (
            with(pipe(
                "P-mm",
                "[[100, 0], [200, 0]]",
                r#""dia": "200 mm", "mat": "CI", "yr": 1925"#,
            )),
            NODES.into(),
            "pipes.geojson: feature 2 (pipe_no `P-mm`): mixed units: `dia` is \"200 mm\", in mm, but units = \"us\" expects in",
        ),
        (
            with(pipe(
                "P-loop",
                "[[100, 0], [150, 20], [100.2, 0]]",
                r#""dia": 8, "mat": "CI", "yr": 1925"#,
            )),
            NODES.into(),
            "pipes.geojson: feature 2 (pipe_no `P-loop`): both ends join node `A`",
        ),
        (
            with(
                r#"{"type": "Feature", "geometry": {"type": "Point", "coordinates": [1, 2]}, "properties": {"pipe_no": "P-pt", "dia": 8}}"#
                    .into(),
            ),
            NODES.into(),
            "pipes.geojson: feature 2 (pipe_no `P-pt`): the geometry is a Point: a pipe must be a LineString or MultiLineString",
        ),
    ];
    for (pipes, nodes, expected) in cases {
        let problems = refusal(&pipes, &nodes);
        assert!(
            problems.iter().any(|p| p.starts_with(expected)),
            "expected {expected:?} in {problems:#?}"
        );
    }
}

#[test]
fn all_problems_are_listed_at_once() {
    let mut pipes = good_pipes();
    pipes.push(pipe(
        "P-a",
        "[[100, 0], [200, 0]]",
        r#""mat": "CI", "yr": 1925"#,
    ));
    pipes.push(pipe(
        "P-b",
        "[[100, 0], [200, 0]]",
        r#""dia": 8, "mat": "PE""#,
    ));
    let problems = refusal(&collection(&pipes), NODES);
    assert_eq!(problems.len(), 2, "{problems:#?}");
}

#[test]
fn warnings_for_short_pipes_odd_c_diameters_in_the_other_unit_and_new_junctions() {
    let config = CONFIG.replace("snap = 0.5", "snap = 0.5\nnew_junctions = true");
    let pipes = collection(&[
        pipe(
            "P-1",
            "[[0, 0], [100, 0]]",
            r#""dia": 150, "mat": "CI", "yr": 1925"#,
        ),
        pipe(
            "P-2",
            "[[100, 0], [100.5, 0]]",
            r#""dia": 8, "mat": "CI", "yr": 1925, "hw_c": 160, "len": 0.5"#,
        ),
        pipe(
            "P-3",
            "[[100.5, 0], [150, 50]]",
            r#""dia": 8, "mat": "CI", "yr": 1925"#,
        ),
        pipe(
            "P-4",
            "[[150.2, 50], [200, 0]]",
            r#""dia": 8, "mat": "CI", "yr": 1925"#,
        ),
    ]);
    // P-2 ends 0.5 ft beyond A, within snap of A, so it joins A at both ends? No: its end is
    // exactly 0.5 from A and joins A, making a loop; move it to a new junction at 100.5 instead.
    let pipes = pipes.replace("[[100, 0], [100.5, 0]]", "[[99.9, 0], [100.5, 30]]");
    let pipes = pipes.replace("[[100.5, 0], [150, 50]]", "[[100.5, 30], [150, 50]]");
    let imported = run_import(
        &config,
        &pipes,
        SourceFormat::GeoJson,
        NODES,
        SourceFormat::GeoJson,
    )
    .unwrap_or_else(|e| panic!("{e}"));
    let kinds: Vec<&WarningKind> = imported.warnings.iter().map(|w| &w.kind).collect();
    assert!(kinds.iter().any(|k| matches!(
        k,
        WarningKind::DiameterOtherUnit {
            looks: "millimetres",
            ..
        }
    )));
    assert!(
        kinds
            .iter()
            .any(|k| matches!(k, WarningKind::ShortPipe { .. }))
    );
    assert!(
        kinds
            .iter()
            .any(|k| matches!(k, WarningKind::CoefficientOutside { c } if c == "160"))
    );
    let new: Vec<_> = imported
        .warnings
        .iter()
        .filter(|w| matches!(w.kind, WarningKind::NewJunction { .. }))
        .collect();
    // (100.5, 30) joins P-2 and P-3; (150, 50) and (150.2, 50) are within snap of each other.
    assert_eq!(new.len(), 2, "{:#?}", imported.warnings);
    let net = &imported.network;
    let junction = &net.junctions[net.find_junction("new-1").unwrap()];
    // The far ends of new-1's pipes are A (elevation 100) twice: mean 100.
    assert!((UnitSystem::Us.length_from_m(junction.elevation_m) - 100.0).abs() < 1e-9);
    let second = &net.junctions[net.find_junction("new-2").unwrap()];
    // new-2 joins P-3 (far end new-1, not a node) and P-4 (far end B, 90).
    assert!((UnitSystem::Us.length_from_m(second.elevation_m) - 90.0).abs() < 1e-9);
}

#[test]
fn csv_tables_import_like_geojson() {
    let pipes = "pipe_no,from_node,to_node,dia,len,mat,yr,status,hw_c\n\
                 P-1,T,A,8,100,CI,1925,open,\n\
                 P-2,A,B,6,120.5,cast iron,1930,CL,92\n";
    let nodes = "node_no,elev,dem,hgl,x,y\nT,,,300,0,0\nA,100,50,,100,0\nB,90,,,,\n";
    let imported = run_import(CONFIG, pipes, SourceFormat::Csv, nodes, SourceFormat::Csv)
        .unwrap_or_else(|e| panic!("{e}"));
    let net = &imported.network;
    assert_eq!(net.pipes.len(), 2);
    assert_eq!(net.node_id(net.pipes[1].from), "A");
    assert!(net.pipes[1].closed, "status CL is in closed_values");
    assert!((UnitSystem::Us.length_from_m(net.pipes[1].length_m) - 120.5).abs() < 1e-9);
    assert_eq!(net.junctions[0].position, Some((100.0, 0.0)));
    assert_eq!(net.junctions[1].position, None);
    // A missing node and a missing length, each with its CSV line and id.
    let pipes =
        "pipe_no,from_node,to_node,dia,len,mat,yr\nP-1,T,A,8,100,CI,1925\nP-2,A,X,6,,CI,1930\n";
    let Err(ImportError::Refused { problems }) =
        run_import(CONFIG, pipes, SourceFormat::Csv, nodes, SourceFormat::Csv)
    else {
        panic!("accepted");
    };
    let text: Vec<String> = problems.iter().map(|p| p.to_string()).collect();
    assert!(text.iter().any(|t| t.starts_with(
        "pipes.geojson: line 3 (pipe_no `P-2`): `to_node` names node `X`, which is not in nodes.geojson"
    )), "{text:#?}");
    assert!(
        problems
            .iter()
            .any(|p| matches!(p.kind, ProblemKind::MissingValue { .. }))
    );
    assert!(
        text.iter()
            .any(|t| t.contains("node `B` is reached by no pipe"))
    );
}

#[test]
fn import_then_calibrate_gives_a_pipes_csv_equal_to_calibrated_toml_per_pipe() {
    let export = roughcal::demo::gis_district().unwrap();
    let imported = import_export(&export);
    let root = env!("CARGO_MANIFEST_DIR");
    let sheet_text = std::fs::read_to_string(format!("{root}/field-sheets/demo.csv")).unwrap();
    let network_text = imported
        .network_toml(
            &input(
                &export.import_toml,
                &export.pipes_geojson,
                SourceFormat::GeoJson,
                &export.nodes_geojson,
                SourceFormat::GeoJson,
            ),
            "2026-12-03",
        )
        .unwrap();
    let net = parse_network(&network_text, "district.toml")
        .unwrap()
        .network;
    let sheet = FieldSheet::parse(&sheet_text, "demo.csv").unwrap();
    let reading = screen_sheet(&sheet, Some(&net));
    let (tests, excluded) = calibration_tests(&net, &reading);
    assert!(
        tests.len() >= 10,
        "the demo sheet's tests apply: {excluded:?}"
    );
    let options = CalibrationOptions::for_units(net.units);
    let result = calibrate(&net, &tests, &options, &mut |_| {}, &AtomicBool::new(false)).unwrap();
    let run = RunContext {
        network: &net,
        network_file: "district.toml",
        sheet_file: "demo.csv",
        options: &options,
        tests: &tests,
        excluded: &excluded,
        result: &result,
        warnings: &[],
        out_of_date: None,
    };
    let outputs = CalibrationOutputs::build(&run, &network_text).unwrap();
    let calibrated = parse_network(outputs.get(CALIBRATED_NETWORK).unwrap(), "calibrated.toml")
        .unwrap()
        .network;
    let csv_text = outputs.get(PIPES_CSV).unwrap();
    let mut reader = csv::Reader::from_reader(csv_text.as_bytes());
    assert_eq!(
        reader.headers().unwrap(),
        vec![
            "pipe",
            "group",
            "c_before",
            "c_after",
            "units",
            "hazen_williams_constant"
        ]
    );
    let rows: Vec<csv::StringRecord> = reader.records().map(|r| r.unwrap()).collect();
    assert_eq!(rows.len(), net.pipes.len());
    let mut moved = 0;
    for ((row, pipe), before) in rows.iter().zip(&calibrated.pipes).zip(&net.pipes) {
        assert_eq!(&row[0], pipe.id);
        assert_eq!(&row[1], calibrated.groups[pipe.group.unwrap()].name);
        assert_eq!(row[2].parse::<f64>().unwrap(), before.c_factor);
        assert_eq!(row[3].parse::<f64>().unwrap(), pipe.c_factor, "{}", pipe.id);
        // The C values belong to the network's constant (the default of its unit system here).
        assert_eq!(&row[4], net.units.key());
        assert_eq!(
            row[5].parse::<f64>().unwrap(),
            HazenWilliams::default_constant(net.units)
        );
        if pipe.c_factor != before.c_factor {
            moved += 1;
        }
    }
    assert!(moved > 100, "the fit moved the fitted groups' pipes");
    // results.geojson: every pipe a line, every used test a point, in the file's own plan coordinates.
    let geojson: geojson::FeatureCollection =
        outputs.get(RESULTS_GEOJSON).unwrap().parse().unwrap();
    assert_eq!(geojson.features.len(), net.pipes.len() + result.tests.len());
    let first = &geojson.features[0];
    assert_eq!(first.property("pipe").unwrap(), net.pipes[0].id.as_str());
    let last = geojson.features.last().unwrap();
    for key in ["test", "error_before", "error_after", "flow"] {
        assert!(last.contains_property(key), "{key}");
    }
}

#[test]
fn results_geojson_gives_lonlat_back_for_a_lonlat_import() {
    let net = Synthetic::new(5).looped_city(60);
    let export = gis_export(&net, &plan(Coordinates::Lonlat, net.groups.len())).unwrap();
    let imported = import_export(&export).network;
    let result = roughcal::calibrate::CalibrationResult {
        pipe_c_after: imported.c_factors(),
        ..empty_result()
    };
    let options = CalibrationOptions::for_units(imported.units);
    let run = RunContext {
        network: &imported,
        network_file: "n.toml",
        sheet_file: "s.csv",
        options: &options,
        tests: &[],
        excluded: &[],
        result: &result,
        warnings: &[],
        out_of_date: None,
    };
    let text = roughcal::report::results_geojson(&run).unwrap();
    let out: geojson::FeatureCollection = text.parse().unwrap();
    let nodes: geojson::FeatureCollection = export.nodes_geojson.parse().unwrap();
    // The first pipe's start is its from node, at the lon/lat the export gave it (to 1e-9 degree).
    let pipe = &imported.pipes[0];
    let from_id = imported.node_id(pipe.from);
    let node = nodes
        .features
        .iter()
        .find(|f| f.property("node_no").and_then(|v| v.as_str()) == Some(from_id))
        .unwrap();
    let Some(geojson::GeometryValue::Point { coordinates }) =
        node.geometry.as_ref().map(|g| &g.value)
    else {
        panic!()
    };
    let Some(geojson::GeometryValue::LineString { coordinates: line }) =
        out.features[0].geometry.as_ref().map(|g| &g.value)
    else {
        panic!()
    };
    for (a, b) in line[0].as_slice().iter().zip(coordinates.as_slice()) {
        assert!((a - b).abs() < 1e-9, "{a} {b}");
    }
}

fn empty_result() -> roughcal::calibrate::CalibrationResult {
    use roughcal::calibrate::{CalibrationResult, FitStatistics, FitTarget};
    CalibrationResult {
        groups: vec![],
        correlation_groups: vec![],
        correlation: vec![],
        covariance: vec![],
        fire_flow: vec![],
        fire_flow_before: vec![],
        strongly_correlated: vec![],
        before: FitStatistics::of(&[], 1.0, 2.0),
        after: FitStatistics::of(&[], 1.0, 2.0),
        tests: vec![],
        iterations: vec![],
        converged: true,
        termination: String::new(),
        pipe_c_after: vec![],
        fit: FitTarget::Pressures,
        reduced_chi_square: None,
        hazen_williams: roughcal::hydraulics::headloss::HwConstant {
            units: roughcal::network::UnitSystem::Us,
            k: 10.44,
        },
    }
}

// ---- the command ----

fn roughcal(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .args(args)
        .env("SOURCE_DATE_EPOCH", "1796256000")
        .output()
        .unwrap()
}

#[test]
fn the_command_writes_refuses_and_reports_as_its_contract_says() {
    let dir = tempfile::tempdir().unwrap();
    let root = env!("CARGO_MANIFEST_DIR");
    let gis = format!("{root}/demo-network/gis");
    let out = dir.path().join("district.toml");
    let out_s = out.to_str().unwrap();
    let args = |extra: &[&str]| -> Vec<String> {
        let mut a: Vec<String> = [
            "import",
            "--config",
            &format!("{gis}/IMPORT.toml"),
            "--pipes",
            &format!("{gis}/pipes.geojson"),
            "--nodes",
            &format!("{gis}/nodes.geojson"),
            "--out",
            out_s,
        ]
        .iter()
        .map(|s| s.to_string())
        .collect();
        a.extend(extra.iter().map(|s| s.to_string()));
        a
    };
    let run = |a: Vec<String>| roughcal(&a.iter().map(String::as_str).collect::<Vec<_>>());

    let first = run(args(&["--json"]));
    assert_eq!(
        first.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&first.stderr)
    );
    let summary: serde_json::Value = serde_json::from_slice(&first.stdout).unwrap();
    assert_eq!(summary["pipes"], 254);
    assert_eq!(summary["fixed_heads"], 2);
    assert!(summary["groups"].as_array().unwrap().len() == 5);
    assert!(
        summary["caution"]
            .as_str()
            .unwrap()
            .contains("licensed engineer")
    );
    let text = std::fs::read_to_string(&out).unwrap();
    // SOURCE_DATE_EPOCH 1796256000 is 2026-12-03 00:00 UTC.
    assert!(
        text.starts_with("# Imported by `roughcal import` on 2026-12-03"),
        "{}",
        &text[..200]
    );
    assert!(text.contains("pipes.geojson") && text.contains("IMPORT.toml"));
    let check = roughcal(&["check", out_s]);
    assert_eq!(
        check.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&check.stderr)
    );

    let again = run(args(&[]));
    assert_eq!(again.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&again.stderr).contains("--force"));
    let forced = run(args(&["--force"]));
    assert_eq!(forced.status.code(), Some(0));
    assert!(String::from_utf8_lossy(&forced.stdout).contains("Caution"));
    assert_eq!(
        std::fs::read_to_string(&out).unwrap(),
        text,
        "a re-import is the same bytes"
    );

    let usage = roughcal(&["import", "--config", "x.toml"]);
    assert_eq!(usage.status.code(), Some(2));
    let wrong_kind = roughcal(&[
        "import", "--config", "c.toml", "--pipes", "p.shp", "--nodes", "n.csv", "--out", "o.toml",
    ]);
    assert_eq!(wrong_kind.status.code(), Some(2));

    let bad = dir.path().join("pipes.geojson");
    std::fs::write(&bad, r#"{"type": "Point", "coordinates": [0, 0]}"#).unwrap();
    let refused = roughcal(&[
        "import",
        "--config",
        &format!("{gis}/IMPORT.toml"),
        "--pipes",
        bad.to_str().unwrap(),
        "--nodes",
        &format!("{gis}/nodes.geojson"),
        "--out",
        dir.path().join("new.toml").to_str().unwrap(),
    ]);
    assert_eq!(refused.status.code(), Some(1));
    let stderr = String::from_utf8_lossy(&refused.stderr);
    assert!(
        stderr.contains("not a GeoJSON FeatureCollection"),
        "{stderr}"
    );
    assert!(stderr.contains("nothing written"));
    assert!(!dir.path().join("new.toml").exists());
}
