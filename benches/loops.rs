//! Speed of the synthetic network generators and of the loop solver.
//!
//! Targets: building a 90,000-junction looped city or a 100,000-junction grid well under a second;
//! balancing an 8 x 8 grid to 1 mm in a few milliseconds.

use criterion::{Criterion, criterion_group, criterion_main};
use roughcal::hydraulics::loops::{LoopOptions, solve_loops};
use roughcal::network::synthetic;

fn generators(c: &mut Criterion) {
    let mut group = c.benchmark_group("synthetic");
    group.sample_size(10);
    group.bench_function("looped_city 90k", |b| {
        b.iter(|| synthetic::looped_city(90_000, 1))
    });
    group.bench_function("grid 316x316", |b| b.iter(|| synthetic::grid(316, 316, 1)));
    group.bench_function("tree 100k", |b| b.iter(|| synthetic::tree(100_000, 1)));
    group.finish();
}

fn loop_solver(c: &mut Criterion) {
    let options = LoopOptions {
        max_iterations: 100_000,
        ..LoopOptions::default()
    };
    let mut group = c.benchmark_group("loops");
    for (name, net) in [
        ("grid 8x8", synthetic::grid(8, 8, 1)),
        ("two sources 8x7", synthetic::two_sources(8, 7, 1)),
        ("looped_city 400", synthetic::looped_city(400, 1)),
    ] {
        let c_factors = net.c_factors();
        group.bench_function(name, |b| b.iter(|| solve_loops(&net, &c_factors, options)));
    }
    group.finish();
}

criterion_group!(benches, generators, loop_solver);
criterion_main!(benches);
