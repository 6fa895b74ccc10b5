//! Fixtures shared by the integration tests; a test file that uses them declares `mod common;`.

use roughcal::calibrate::CalibrationTest;
use roughcal::hydraulics::{GradientSolver, OperatingState};
use roughcal::network::Network;

/// (residual junction, flowing junction, gpm) on the 4 x 4 test grids of `calibration.rs` and
/// `report.rs`: tests that stress both halves and never the spur.
pub const PLAN: [(usize, usize, f64); 6] = [
    (5, 9, 900.0),
    (4, 8, 1000.0),
    (9, 13, 800.0),
    (10, 14, 1100.0),
    (11, 15, 900.0),
    (6, 7, 1000.0),
];

/// Readings a gauge would show on `truth` for each planned test, plus `noise_psi[k]` on reading k (the
/// static then the residual of each test in turn; missing entries are 0), with ids `{id_prefix}{i}`.
pub fn synthetic_readings(
    truth: &Network,
    plan: &[(usize, usize, f64)],
    noise_psi: &[f64],
    id_prefix: &str,
) -> Vec<CalibrationTest> {
    let units = truth.units;
    let solver = GradientSolver::new(truth).unwrap();
    let base = OperatingState::base(truth);
    let c = truth.c_factors();
    let statics = solver.solve(truth, &base, &c, None).unwrap();
    plan.iter()
        .enumerate()
        .map(|(i, &(gauge, hydrant, gpm))| {
            let mut state = base.clone();
            state.add_demand(hydrant, units.flow_to_m3s(gpm));
            let flowing = solver.solve(truth, &state, &c, Some(&statics)).unwrap();
            let elevation = truth.junctions[gauge].elevation_m;
            let noise =
                |k: usize| units.pressure_to_head_m(noise_psi.get(k).copied().unwrap_or(0.0));
            CalibrationTest {
                id: format!("{id_prefix}{i}"),
                residual_junction: gauge,
                condition: None,
                hydrant_flows_m3s: vec![(hydrant, units.flow_to_m3s(gpm))],
                static_head_m: statics.head_m[gauge] - elevation + noise(2 * i),
                residual_head_m: flowing.head_m[gauge] - elevation + noise(2 * i + 1),
            }
        })
        .collect()
}
