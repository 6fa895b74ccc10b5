//! Speed of the solver and the calibration (targets in the README; never asserted in tests).
//!
//! Baselines in the same run: `solve/*/fresh-analysis` redoes the symbolic analysis on every solve, so the
//! gain of reusing it shows beside `solve/*/reused-analysis`; calibration is timed with 10 and 50 tests to
//! show the cost per iteration growing with tests, not tests times groups.

use std::hint::black_box;
use std::sync::atomic::AtomicBool;
use std::time::Duration;

use criterion::{Criterion, criterion_group, criterion_main};
use roughcal::calibrate::{CalibrationOptions, CalibrationTest, calibrate};
use roughcal::city::banded_groups;
use roughcal::fieldtest::{FieldSheet, calibration_tests, screen_sheet};
use roughcal::hydraulics::{GradientSolver, OperatingState};
use roughcal::network::Network;
use roughcal::network::synthetic::looped_city;

fn solve_benches(c: &mut Criterion) {
    let mut group = c.benchmark_group("solve");
    group
        .sample_size(10)
        .measurement_time(Duration::from_secs(8));
    for junctions in [10_000usize, 90_000] {
        let net = looped_city(junctions, 7);
        let state = OperatingState::base(&net);
        let cf = net.c_factors();
        group.bench_function(format!("{junctions}/symbolic-analysis"), |b| {
            b.iter(|| black_box(GradientSolver::new(&net).unwrap()))
        });
        let solver = GradientSolver::new(&net).unwrap();
        group.bench_function(format!("{junctions}/reused-analysis"), |b| {
            b.iter(|| black_box(solver.solve(&net, &state, &cf, None).unwrap()))
        });
        group.bench_function(format!("{junctions}/fresh-analysis"), |b| {
            b.iter(|| {
                let solver = GradientSolver::new(&net).unwrap();
                black_box(solver.solve(&net, &state, &cf, None).unwrap())
            })
        });
    }
    group.finish();
}

/// Flow tests synthesised on `truth`: gauges spread through the network, a hydrant next to each, flowed
/// hard enough that the drop at the gauge is about 12 m (17 psi), clear of the 10 psi smallest useful
/// drop that the sheet screening applies (common practice, no source).
fn synthetic_tests(truth: &Network, count: usize) -> Vec<CalibrationTest> {
    const TARGET_DROP_M: f64 = 12.0;
    let solver = GradientSolver::new(truth).unwrap();
    let base = OperatingState::base(truth);
    let cf = truth.c_factors();
    let statics = solver.solve(truth, &base, &cf, None).unwrap();
    let n = truth.junctions.len();
    let flowing = |hydrant: usize, flow: f64| {
        let mut state = base.clone();
        state.add_demand(hydrant, flow);
        solver.solve(truth, &state, &cf, Some(&statics)).unwrap()
    };
    (0..count)
        .map(|t| {
            let gauge = (t * 7919 + 13) % (n - 1);
            let hydrant = gauge + 1;
            // Head loss grows as flow^1.852: one trial flow tells the flow that gives the target drop.
            let trial_flow = 0.03;
            let trial_drop = statics.head_m[gauge] - flowing(hydrant, trial_flow).head_m[gauge];
            let flow =
                (trial_flow * (TARGET_DROP_M / trial_drop.max(1e-3)).powf(1.0 / 1.852)).min(0.25);
            let residual = flowing(hydrant, flow);
            let elevation = truth.junctions[gauge].elevation_m;
            CalibrationTest {
                id: format!("T{t}"),
                residual_junction: gauge,
                condition: None,
                hydrant_flows_m3s: vec![(hydrant, flow)],
                static_head_m: statics.head_m[gauge] - elevation,
                residual_head_m: residual.head_m[gauge] - elevation,
            }
        })
        .collect()
}

fn calibration_benches(c: &mut Criterion) {
    let mut group = c.benchmark_group("calibrate");
    group
        .sample_size(10)
        .measurement_time(Duration::from_secs(10));

    let root = env!("CARGO_MANIFEST_DIR");
    let net_text = std::fs::read_to_string(format!("{root}/demo-network/district.toml")).unwrap();
    let net = roughcal::network::file::parse_network(&net_text, "district.toml")
        .unwrap()
        .network;
    let sheet_text = std::fs::read_to_string(format!("{root}/field-sheets/demo.csv")).unwrap();
    let sheet = FieldSheet::parse(&sheet_text, "demo.csv").unwrap();
    let (tests, _) = calibration_tests(&net, &screen_sheet(&sheet, Some(&net)));
    let options = CalibrationOptions::for_units(net.units);
    group.bench_function("demo", |b| {
        b.iter(|| {
            black_box(
                calibrate(&net, &tests, &options, &mut |_| {}, &AtomicBool::new(false)).unwrap(),
            )
        })
    });

    // 10,000 junctions and about 20,000 pipes; the truth has 8 groups. The model is fitted with 8 groups
    // on 10 and 50 tests (cost grows with tests) and with 2 groups on 50 tests (and not with groups).
    let mut truth = looped_city(10_000, 11);
    banded_groups(&mut truth, 8);
    for (k, pipe) in truth.pipes.iter_mut().enumerate() {
        pipe.c_factor = 80.0 + 5.0 * (pipe.group.unwrap_or(0) as f64) + (k % 3) as f64;
    }
    let options = CalibrationOptions::for_units(truth.units);
    let tests_50 = synthetic_tests(&truth, 50);
    let tests_10: Vec<CalibrationTest> = tests_50[..10].to_vec();
    for (groups, tests) in [(8usize, &tests_10), (8, &tests_50), (2, &tests_50)] {
        let mut model = truth.clone();
        banded_groups(&mut model, groups);
        let run = || {
            calibrate(
                &model,
                tests,
                &options,
                &mut |_| {},
                &AtomicBool::new(false),
            )
            .unwrap()
        };
        let name = format!("20k-pipes-{groups}-groups/{}-tests", tests.len());
        // The iteration count turns the time into a cost per optimizer iteration for the README.
        eprintln!(
            "calibrate/{name}: {} optimizer iterations",
            run().iterations.len()
        );
        group.bench_function(name, |b| b.iter(|| black_box(run())));
    }
    group.finish();
}

criterion_group!(benches, solve_benches, calibration_benches);
criterion_main!(benches);
