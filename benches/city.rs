//! Loading and solving the synthetic city of issue 11 (`roughcal make-city`: a 300 x 300 street
//! grid, 90,000 junctions, about 180,000 pipes, a 30 MB network file), with the baselines in the same
//! run: the bare scan of the text (what reading the file costs at the least) and the editable
//! `toml_edit` document the loader built before walking it.
//!
//! Targets (whole process, measured with `/usr/bin/time -v` on the release binary, see the README):
//! `check` under 0.5 s and 250 MB; `solve --json` under 1.5 s and 400 MB.

use std::hint::black_box;
use std::time::Duration;

use criterion::{Criterion, criterion_group, criterion_main};
use roughcal::city::{CityPlan, city};
use roughcal::hydraulics::{GradientSolver, OperatingState};
use roughcal::network::file::parse_network;
use roughcal::network::write::network_toml;

fn city_text() -> String {
    let plan = CityPlan {
        tests: 1,
        ..CityPlan::default()
    };
    match city(&plan) {
        Ok(built) => network_toml(&built.model),
        Err(error) => panic!("the synthetic city does not solve: {error}"),
    }
}

fn load(c: &mut Criterion) {
    let text = city_text();
    let mut group = c.benchmark_group("city 300x300");
    group.sample_size(10);
    group.warm_up_time(Duration::from_secs(1));
    group.measurement_time(Duration::from_secs(15));
    group.bench_function("baseline: scan the text (lines)", |b| {
        b.iter(|| black_box(&text).lines().count())
    });
    group.bench_function("baseline: toml_edit document only", |b| {
        b.iter(|| toml_edit::Document::parse(black_box(text.as_str())).is_ok())
    });
    group.bench_function("load (parse_network)", |b| {
        b.iter(|| parse_network(black_box(&text), "city.toml").is_ok())
    });
    group.bench_function("load and solve", |b| {
        b.iter(|| {
            let Ok(loaded) = parse_network(black_box(&text), "city.toml") else {
                return 0;
            };
            let net = &loaded.network;
            let state = OperatingState::for_condition_name(net, None);
            match (GradientSolver::new(net), state) {
                (Ok(solver), Ok(state)) => solver
                    .solve(net, &state, &net.c_factors(), None)
                    .map_or(0, |solution| solution.iterations),
                _ => 0,
            }
        })
    });
    group.finish();
}

/// The city calibration of issue 11 item 3 (20 tests, 8 groups) from the library, as `roughcal
/// calibrate` runs it after loading. A fit of the full 300 x 300 city takes minutes, more than a
/// criterion sample of ten allows, so the bench fits a 100 x 100 city (10,000 junctions) and the README
/// gives the full city's whole-process figure from `/usr/bin/time -v`.
fn calibrate_city(c: &mut Criterion) {
    use roughcal::calibrate::{CalibrationOptions, calibrate};
    use std::sync::atomic::AtomicBool;
    let plan = CityPlan {
        junctions: 10_000,
        ..CityPlan::default()
    };
    let built = match city(&plan) {
        Ok(built) => built,
        Err(error) => panic!("the synthetic city does not solve: {error}"),
    };
    let options = CalibrationOptions::for_units(built.model.units);
    let mut group = c.benchmark_group("city calibration");
    group.sample_size(10);
    group.warm_up_time(Duration::from_secs(1));
    group.measurement_time(Duration::from_secs(20));
    group.bench_function("100x100, 20 tests, 8 groups", |b| {
        b.iter(|| {
            calibrate(
                black_box(&built.model),
                &built.tests,
                &options,
                &mut |_| {},
                &AtomicBool::new(false),
            )
            .map_or(0, |result| result.iterations.len())
        })
    });
    group.finish();
}

criterion_group!(benches, load, calibrate_city);
criterion_main!(benches);
