//! A synthetic city for trying and measuring roughcal at scale: a [`looped_city`] network whose pipes
//! are split into roughness groups by plan position, flow tests synthesised on "true" C values, and the
//! model and field sheet a user would start from (every group at one start C). Invented data, for
//! benchmarks and `roughcal make-city`, never a real place.

use std::fmt::Write as _;

use crate::calibrate::CalibrationTest;
use crate::hydraulics::{GradientSolver, OperatingState, SolveError};
use crate::network::synthetic::looped_city;
use crate::network::{Network, RoughnessGroup};

/// The C every group of the model starts from.
pub const START_C: f64 = 110.0;

/// What to build.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CityPlan {
    pub junctions: usize,
    /// Roughness groups (west-to-east bands), at least one.
    pub groups: usize,
    pub tests: usize,
    pub seed: u64,
}

impl Default for CityPlan {
    /// The city of issue 11: a 300 x 300 street grid (90,000 junctions, about 180,000 pipes), 8 groups,
    /// 20 tests.
    fn default() -> Self {
        Self {
            junctions: 90_000,
            groups: 8,
            tests: 20,
            seed: 7,
        }
    }
}

/// A synthetic city: the truth the tests were made on, the model to calibrate, and the tests.
#[derive(Debug, Clone)]
pub struct City {
    pub truth: Network,
    /// The truth with every pipe at [`START_C`].
    pub model: Network,
    pub tests: Vec<CalibrationTest>,
}

/// Splits the pipes of `net` into `count` roughness groups `band-0`.. by plan position (west-to-east
/// bands of equal width), bounds 40 to 150, every pipe at [`START_C`].
pub fn banded_groups(net: &mut Network, count: usize) {
    let count = count.max(1);
    let x_of = |net: &Network, k: usize| {
        net.node_position(net.pipes[k].from)
            .map(|p| p.0)
            .unwrap_or(0.0)
    };
    let (lo, hi) = (0..net.pipes.len()).fold((f64::MAX, f64::MIN), |(lo, hi), k| {
        let x = x_of(net, k);
        (lo.min(x), hi.max(x))
    });
    net.groups = (0..count)
        .map(|g| RoughnessGroup {
            name: format!("band-{g}"),
            min_c: 40.0,
            max_c: 150.0,
            locked: false,
        })
        .collect();
    for k in 0..net.pipes.len() {
        let share = (x_of(net, k) - lo) / (hi - lo).max(1.0);
        let g = ((share * count as f64) as usize).min(count - 1);
        net.pipes[k].group = Some(g);
        net.pipes[k].c_factor = START_C;
    }
}

/// Builds the city of `plan`. The truth's C is 80 + 5 g + (k mod 3) for pipe k in band g: older in the
/// west, a little spread within each band.
pub fn city(plan: &CityPlan) -> Result<City, SolveError> {
    let mut truth = looped_city(plan.junctions, plan.seed);
    banded_groups(&mut truth, plan.groups);
    let model = truth.clone();
    for (k, pipe) in truth.pipes.iter_mut().enumerate() {
        pipe.c_factor = 80.0 + 5.0 * (pipe.group.unwrap_or(0) as f64) + (k % 3) as f64;
    }
    let tests = synthetic_tests(&truth, plan.tests)?;
    Ok(City {
        truth,
        model,
        tests,
    })
}

/// Drop at the gauge the synthetic tests aim for (m of water, about 14 psi): above the 10 psi
/// smallest useful drop of the sheet screening (common practice, no source), which a stiff part of the
/// grid may still not reach at the largest flow.
const TARGET_DROP_M: f64 = 10.0;
/// Largest flow of one synthetic test (m^3/s, about 4,000 gpm).
const MAX_TEST_FLOW_M3S: f64 = 0.25;

/// `count` flow tests on `truth` under its base state: gauges spread through the network, the next
/// junction flowed hard enough for a drop of about `TARGET_DROP_M` where the network allows (up to
/// `MAX_TEST_FLOW_M3S`; on a stiff grid many drops stay at a few psi). Flows
/// are rounded to a whole gpm or L/s and pressures to 0.01 psi or kPa, as the sheet of [`sheet_csv`]
/// writes them, so tests read back from that sheet equal these.
pub fn synthetic_tests(truth: &Network, count: usize) -> Result<Vec<CalibrationTest>, SolveError> {
    let n = truth.junctions.len();
    if n < 2 {
        return Ok(Vec::new());
    }
    let units = truth.units;
    let solver = GradientSolver::new(truth)?;
    let base = OperatingState::base(truth);
    let cf = truth.c_factors();
    let statics = solver.solve(truth, &base, &cf, None)?;
    let flowing = |hydrant: usize, flow: f64| {
        let mut state = base.clone();
        state.add_demand(hydrant, flow);
        solver.solve(truth, &state, &cf, Some(&statics))
    };
    let pressure = |head_m: f64| {
        units.pressure_to_head_m((units.pressure_from_head_m(head_m) * 100.0).round() / 100.0)
    };
    let mut tests = Vec::with_capacity(count);
    for t in 0..count {
        let gauge = (t * 7919 + 13) % (n - 1);
        let hydrant = gauge + 1;
        // With the network's own demands flowing, the extra drop grows nearly in proportion to the
        // hydrant flow at first (and faster later): a straight-line guess from one trial flow.
        let trial_flow = 0.06;
        let trial_drop = statics.head_m[gauge] - flowing(hydrant, trial_flow)?.head_m[gauge];
        let wanted = trial_flow * TARGET_DROP_M / trial_drop.max(1e-6);
        let flow = units.flow_to_m3s(units.flow_from_m3s(wanted.min(MAX_TEST_FLOW_M3S)).round());
        let residual = flowing(hydrant, flow)?;
        let elevation = truth.junctions[gauge].elevation_m;
        tests.push(CalibrationTest {
            id: format!("T{t:02}"),
            residual_junction: gauge,
            condition: None,
            hydrant_flows_m3s: vec![(hydrant, flow)],
            static_head_m: pressure(statics.head_m[gauge] - elevation),
            residual_head_m: pressure(residual.head_m[gauge] - elevation),
        });
    }
    Ok(tests)
}

/// The field sheet of `tests` on `net` (the template's columns in the network's units, metered flows).
pub fn sheet_csv(net: &Network, tests: &[CalibrationTest]) -> String {
    let units = net.units;
    let (p, q) = match units {
        crate::network::UnitSystem::Us => ("psi", "gpm"),
        crate::network::UnitSystem::Si => ("kpa", "lps"),
    };
    let outlet = match units {
        crate::network::UnitSystem::Us => "in",
        crate::network::UnitSystem::Si => "mm",
    };
    let mut out = format!(
        "test,date,time,residual_node,flow_node,static_{p},residual_{p},flow_{q},pitot_{p},outlet_{outlet},coefficient,condition,note\n"
    );
    for (t, test) in tests.iter().enumerate() {
        let ids: Vec<&str> = test
            .hydrant_flows_m3s
            .iter()
            .map(|&(j, _)| net.junctions[j].id.as_str())
            .collect();
        let flows: Vec<String> = test
            .hydrant_flows_m3s
            .iter()
            .map(|&(_, f)| format!("{:.0}", units.flow_from_m3s(f)))
            .collect();
        let _ = writeln!(
            out,
            "{},2026-11-{:02},{:02}:{:02},{},{},{:.2},{:.2},{},,,,,synthetic",
            test.id,
            2 + t / 8,
            8 + t % 8,
            (t * 17) % 60,
            net.junctions[test.residual_junction].id,
            ids.join(";"),
            units.pressure_from_head_m(test.static_head_m),
            units.pressure_from_head_m(test.residual_head_m),
            flows.join(";"),
        );
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fieldtest::{FieldSheet, calibration_tests, screen_sheet};
    use crate::network::file::parse_network;
    use crate::network::write::network_toml;

    #[test]
    fn the_written_city_reads_back_as_the_same_tests() {
        let plan = CityPlan {
            junctions: 900,
            groups: 4,
            tests: 6,
            seed: 3,
        };
        let city = city(&plan).unwrap();
        assert_eq!(city.model.groups.len(), 4);
        assert!(city.model.pipes.iter().all(|p| p.c_factor == START_C));
        let net = parse_network(&network_toml(&city.model), "city.toml")
            .unwrap()
            .network;
        let sheet = FieldSheet::parse(&sheet_csv(&net, &city.tests), "city.csv").unwrap();
        let (tests, excluded) = calibration_tests(&net, &screen_sheet(&sheet, Some(&net)));
        assert!(excluded.is_empty(), "{excluded:?}");
        assert_eq!(tests.len(), city.tests.len());
        for (a, b) in tests.iter().zip(&city.tests) {
            assert_eq!((&a.id, a.residual_junction), (&b.id, b.residual_junction));
            assert!((a.static_head_m - b.static_head_m).abs() < 1e-6);
            assert!((a.residual_head_m - b.residual_head_m).abs() < 1e-6);
            assert!((a.hydrant_flows_m3s[0].1 - b.hydrant_flows_m3s[0].1).abs() < 1e-9);
            // A real test: the drop is several psi at least.
            assert!(a.static_head_m - a.residual_head_m > 3.0);
        }
    }
}
