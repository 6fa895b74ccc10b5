//! Import of a large GIS export: a 200,000-pipe GeoJSON district (a synthetic looped city drawn by
//! `network::import::export`, ends off their nodes and bent lines included) through parsing, snapping,
//! rules and the network writer. Target: under 5 s for the whole `roughcal import` command, under 1 GB
//! peak (README, Speed). Baseline in the same run: parsing the two GeoJSON files alone.
//!
//! The bench also leaves the export in `target/import-bench/` so the whole command can be measured
//! with `/usr/bin/time -v` (DEVELOPERS.md, Benchmarks).

use std::hint::black_box;

use criterion::{Criterion, criterion_group, criterion_main};
use roughcal::network::import::export::{ExportPlan, gis_export};
use roughcal::network::import::{Coordinates, ImportInput, Source, SourceFormat, import_network};
use roughcal::network::lonlat::LonLat;
use roughcal::network::synthetic::Synthetic;

fn bench_import(c: &mut Criterion) {
    // About two pipes per junction: 100,000 junctions give about 200,000 pipes.
    let net = Synthetic {
        groups: 8,
        ..Synthetic::new(2026)
    }
    .looped_city(100_000);
    let plan = ExportPlan {
        coordinates: Coordinates::Projected,
        origin: LonLat {
            lon_deg: 0.0,
            lat_deg: 0.0,
        },
        snap: 1.5,
        bend_every: 7,
        offset_every: 3,
        materials: (0..net.groups.len())
            .map(|g| (format!("mat-{g}"), 1940 + g as i64 * 8))
            .collect(),
        header: "benchmark export".into(),
    };
    let export = match gis_export(&net, &plan) {
        Ok(export) => export,
        Err(error) => {
            eprintln!("cannot draw the export: {error}");
            return;
        }
    };
    eprintln!(
        "{} pipes, {} nodes; pipes.geojson {:.0} MB, nodes.geojson {:.0} MB",
        net.pipes.len(),
        net.junctions.len() + net.fixed_heads.len(),
        export.pipes_geojson.len() as f64 / 1e6,
        export.nodes_geojson.len() as f64 / 1e6
    );
    let folder = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("target/import-bench");
    if std::fs::create_dir_all(&folder).is_ok() {
        for (name, text) in [
            ("pipes.geojson", &export.pipes_geojson),
            ("nodes.geojson", &export.nodes_geojson),
            ("IMPORT.toml", &export.import_toml),
        ] {
            if let Err(error) = roughcal::storage::write_atomic(&folder.join(name), text.as_bytes())
            {
                eprintln!("cannot keep the export: {error}");
            }
        }
    }
    let input = ImportInput {
        config_file: "IMPORT.toml",
        config_text: &export.import_toml,
        pipes: Source {
            file: "pipes.geojson",
            text: &export.pipes_geojson,
            format: SourceFormat::GeoJson,
        },
        nodes: Source {
            file: "nodes.geojson",
            text: &export.nodes_geojson,
            format: SourceFormat::GeoJson,
        },
    };
    let mut group = c.benchmark_group("import");
    group.sample_size(10);
    group.bench_function("parse the two GeoJSON files only (baseline)", |b| {
        b.iter(|| {
            let pipes: Result<geojson::FeatureCollection, _> = export.pipes_geojson.parse();
            let nodes: Result<geojson::FeatureCollection, _> = export.nodes_geojson.parse();
            black_box((pipes.is_ok(), nodes.is_ok()))
        })
    });
    group.bench_function("import 200,000 pipes and write the network text", |b| {
        b.iter(|| match import_network(&input) {
            Ok(imported) => black_box(imported.network_toml(&input, "2026-12-03").is_ok()),
            Err(error) => {
                eprintln!("{error}");
                false
            }
        })
    });
    group.finish();
}

criterion_group!(benches, bench_import);
criterion_main!(benches);
