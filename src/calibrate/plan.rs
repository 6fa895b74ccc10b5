//! Where to test next: candidate flow tests ranked by the information they would add to the fit so far.
//!
//! A candidate is a residual (gauge) hydrant and one or two flow hydrants within a distance of it along
//! the mains. For each, the model with the fitted C predicts the static and residual pressure at the
//! gauge for the flow to run, and the whitened sensitivities of those readings to each fitted group's C
//! (the same adjoint rows the fit uses, [`super::TestEvaluation`]). Its value is the D-optimal gain
//! log det(M + J'J) - log det(M), with M the current information matrix (the inverse of the fitted C
//! covariance; groups at a bound or not informed enter with a vague prior, [`VAGUE_PRIOR_SHARE_OF_RANGE`])
//! and J the candidate's rows: the sampling-design criterion of Bush and Uber (1998),
//! "Sampling design methods for water distribution model calibration", J. Water Resour. Plann. Manage.
//! 124(6) (from memory). `count` tests are chosen greedily: each next one maximises the gain given M
//! plus the rows of those already chosen.
//!
//! The flow to run is the largest the flow hydrants' outlets can deliver at their modelled residual
//! (pitot pressure at most the residual at the hydrant, NFPA 291 pitot formula) while every junction
//! whose static is above the zone limit stays at or above it; the candidate is kept only if the
//! predicted drop at the gauge reaches the minimum drop (limits: common practice, no source).
//!
//! Results are an aid to be reviewed by a licensed engineer; local codes and the fire authority govern.

use std::cmp::Ordering;
use std::collections::BinaryHeap;

use nalgebra::DMatrix;

use super::{CalibrationOptions, CalibrationResult, FitTarget, GroupStatus, INFORMED_C_CHANGE};

/// Prior standard deviation of a group the fit could not estimate (at a bound or not informed), as a
/// share of its bound range: a quarter puts the bounds two standard deviations either side of the
/// middle (a vague prior; common practice, no source).
pub const VAGUE_PRIOR_SHARE_OF_RANGE: f64 = 0.25;
use crate::fieldtest::pitot::{DEFAULT_OUTLET_COEFFICIENT, pitot_flow};
use crate::hydraulics::{GradientSolver, OperatingState, Solution, SolveError};
use crate::network::{Network, NodeRef, UnitSystem};

/// Settings of a plan. Pressures are water columns (m); distances are metres along pipes.
#[derive(Debug, Clone, PartialEq)]
pub struct PlanOptions {
    /// Number of tests to choose.
    pub count: usize,
    /// Flow hydrants per test: 1 or 2.
    pub flow_hydrants: usize,
    /// Largest distance along the mains from the gauge to a flow hydrant (m).
    pub max_distance_m: f64,
    /// Smallest predicted drop at the gauge for a usable test (m). Default 10 psi / 70 kPa.
    pub min_drop_m: f64,
    /// No junction of the zone may fall below this while the hydrants flow (m). Default 20 psi /
    /// 140 kPa.
    pub min_zone_residual_m: f64,
    /// Outlet diameter in the network's outlet unit (in or mm). Default 2.5 in / 65 mm.
    pub outlet: f64,
    pub outlet_coefficient: f64,
    /// Nearest flow hydrants considered per gauge.
    pub neighbours: usize,
}

impl PlanOptions {
    /// Defaults for a network in `units` (limits: common practice, no source).
    pub fn for_units(units: UnitSystem) -> Self {
        let (drop, zone, outlet, distance) = match units {
            UnitSystem::Us => (10.0, 20.0, 2.5, 1000.0 * 0.3048),
            UnitSystem::Si => (70.0, 140.0, 65.0, 300.0),
        };
        Self {
            count: 5,
            flow_hydrants: 1,
            max_distance_m: distance,
            min_drop_m: units.pressure_to_head_m(drop),
            min_zone_residual_m: units.pressure_to_head_m(zone),
            outlet,
            outlet_coefficient: DEFAULT_OUTLET_COEFFICIENT,
            neighbours: 3,
        }
    }
}

/// One proposed test.
#[derive(Debug, Clone, PartialEq)]
pub struct PlanCandidate {
    /// 1 for the first test of the day.
    pub rank: usize,
    pub residual_junction: usize,
    pub flow_junctions: Vec<usize>,
    /// Total flow to run (m^3/s), shared equally by the flow hydrants.
    pub flow_m3s: f64,
    pub predicted_static_m: f64,
    pub predicted_residual_m: f64,
    pub predicted_drop_m: f64,
    /// Groups whose C moves one of the test's readings by at least the calibration's informed
    /// threshold ([`CalibrationOptions::informed_response_sd`] per [`INFORMED_C_CHANGE`]).
    pub informs: Vec<String>,
    /// Expected standard error of every fitted group once this test and those ranked before it are in
    /// the fit (same order as [`TestPlan::groups`]).
    pub expected_std_error: Vec<f64>,
    /// D-optimal gain: log det(M + J'J) - log det(M) given the tests ranked before.
    pub gain: f64,
}

/// A day's plan.
#[derive(Debug, Clone, PartialEq)]
pub struct TestPlan {
    /// The unlocked groups, in the order of the standard errors.
    pub groups: Vec<String>,
    /// Standard error of each group now (for a group at a bound or not informed, the vague prior's,
    /// [`VAGUE_PRIOR_SHARE_OF_RANGE`] of its bound range).
    pub current_std_error: Vec<f64>,
    /// Candidates meeting the limits, of all examined.
    pub feasible: usize,
    pub examined: usize,
    pub candidates: Vec<PlanCandidate>,
}

/// Why no plan was made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum PlanError {
    #[error(
        "every roughness group is locked, so no test can add information; unlock a group first"
    )]
    NothingToInform,
    #[error("--flow-hydrants must be 1 or 2, got {0}")]
    FlowHydrants(usize),
    #[error(
        "no candidate test meets the limits (drop at least {min_drop:.1}, every junction at least {min_zone:.1} in the network's pressure unit, flow hydrants within the distance); widen --max-distance or relax the limits"
    )]
    NoFeasibleCandidate { min_drop: f64, min_zone: f64 },
    #[error("the network model could not be solved while planning: {0}")]
    Solve(#[from] SolveError),
}

/// Candidate rows and predictions before ranking.
struct Scored {
    residual_junction: usize,
    flow_junctions: Vec<usize>,
    flow_m3s: f64,
    static_m: f64,
    residual_m: f64,
    rows: Vec<Vec<f64>>,
}

/// Ranks candidate tests on `net` with the fitted C of `result` (see the module documentation).
pub fn plan_tests(
    net: &Network,
    result: &CalibrationResult,
    calibration: &CalibrationOptions,
    options: &PlanOptions,
) -> Result<TestPlan, PlanError> {
    if !(1..=2).contains(&options.flow_hydrants) {
        return Err(PlanError::FlowHydrants(options.flow_hydrants));
    }
    // Every unlocked group is planned for: those fitted inside their bounds carry the fit's
    // information; a group at a bound or not informed enters with a vague prior only.
    let planned: Vec<&super::GroupFit> = result
        .groups
        .iter()
        .filter(|g| g.status != GroupStatus::Locked)
        .collect();
    let p = planned.len();
    if p == 0 {
        return Err(PlanError::NothingToInform);
    }
    let mut information = DMatrix::<f64>::zeros(p, p);
    let fitted_information = (result.covariance.len() == result.correlation_groups.len())
        .then(|| {
            let q = result.covariance.len();
            DMatrix::from_fn(q, q, |a, b| result.covariance[a][b]).try_inverse()
        })
        .flatten();
    let slot_in_fit = |name: &str| result.correlation_groups.iter().position(|n| n == name);
    for (a, ga) in planned.iter().enumerate() {
        match (&fitted_information, slot_in_fit(&ga.name)) {
            (Some(fit), Some(sa)) => {
                for (b, gb) in planned.iter().enumerate() {
                    if let Some(sb) = slot_in_fit(&gb.name) {
                        information[(a, b)] = fit[(sa, sb)];
                    }
                }
            }
            _ => {
                let sd = VAGUE_PRIOR_SHARE_OF_RANGE * (ga.max_c - ga.min_c);
                information[(a, a)] = 1.0 / (sd * sd);
            }
        }
    }
    let group_names: Vec<String> = planned.iter().map(|g| g.name.clone()).collect();
    let group_pipes: Vec<Vec<usize>> = planned
        .iter()
        .map(|g| {
            (0..net.pipes.len())
                .filter(|&k| net.pipes[k].group == Some(g.group))
                .collect()
        })
        .collect();
    let c = &result.pipe_c_after;
    let solver = GradientSolver::new(net)?;
    let base = OperatingState::base(net);
    let statics = solver.solve(net, &base, c, None)?;
    let static_m: Vec<Option<f64>> = (0..net.junctions.len())
        .map(|j| statics.pressure_head_m(net, j))
        .collect();
    let zone: Vec<usize> = (0..net.junctions.len())
        .filter(|&j| static_m[j].is_some_and(|h| h >= options.min_zone_residual_m))
        .collect();
    let sensitivity = |solution: &Solution, j: usize| -> Option<Vec<f64>> {
        let per_pipe = solution.head_sensitivity_to_c(net, c, j)?;
        Some(
            group_pipes
                .iter()
                .map(|pipes| pipes.iter().map(|&k| per_pipe[k]).sum())
                .collect(),
        )
    };

    let adjacency = adjacency(net);
    let mut scored = Vec::new();
    let mut examined = 0;
    for gauge in zone.iter().copied() {
        let Some(static_head) = static_m[gauge] else {
            continue;
        };
        let near = within_distance(&adjacency, gauge, options.max_distance_m)
            .into_iter()
            .filter(|&j| j != gauge && zone.contains(&j))
            .take(options.neighbours)
            .collect::<Vec<_>>();
        let sets: Vec<Vec<usize>> = if options.flow_hydrants == 1 {
            near.iter().map(|&j| vec![j]).collect()
        } else {
            let mut pairs = Vec::new();
            for a in 0..near.len() {
                for b in a + 1..near.len() {
                    pairs.push(vec![near[a], near[b]]);
                }
            }
            pairs
        };
        let mut static_rows: Option<Vec<f64>> = None;
        for flow_junctions in sets {
            examined += 1;
            let Some((flow_m3s, flowing)) = flow_to_run(
                net,
                &solver,
                &base,
                c,
                &statics,
                &flow_junctions,
                &zone,
                options,
            )?
            else {
                continue;
            };
            let Some(residual_m) = flowing.pressure_head_m(net, gauge) else {
                continue;
            };
            if static_head - residual_m < options.min_drop_m {
                continue;
            }
            if static_rows.is_none() {
                static_rows = sensitivity(&statics, gauge);
            }
            let (Some(d_static), Some(d_residual)) =
                (static_rows.clone(), sensitivity(&flowing, gauge))
            else {
                continue;
            };
            let sd = calibration.gauge_sd_m;
            let rows = match calibration.fit {
                FitTarget::Pressures => vec![
                    d_static.iter().map(|d| d / sd).collect(),
                    d_residual.iter().map(|d| d / sd).collect(),
                ],
                FitTarget::Drop => {
                    let sd = sd * std::f64::consts::SQRT_2;
                    vec![
                        d_static
                            .iter()
                            .zip(&d_residual)
                            .map(|(s, r)| (s - r) / sd)
                            .collect(),
                    ]
                }
            };
            scored.push(Scored {
                residual_junction: gauge,
                flow_junctions,
                flow_m3s,
                static_m: static_head,
                residual_m,
                rows,
            });
        }
    }
    let feasible = scored.len();
    if scored.is_empty() {
        let to_pressure = net.units.pressure_per_head_m();
        return Err(PlanError::NoFeasibleCandidate {
            min_drop: options.min_drop_m * to_pressure,
            min_zone: options.min_zone_residual_m * to_pressure,
        });
    }

    let current_std_error = std_errors(&information).unwrap_or_default();
    let mut m = information;
    let mut taken = vec![false; scored.len()];
    let mut candidates = Vec::new();
    for rank in 1..=options.count.min(scored.len()) {
        let base_logdet = log_det(&m);
        let mut best: Option<(usize, f64, DMatrix<f64>)> = None;
        for (i, s) in scored.iter().enumerate() {
            if taken[i] {
                continue;
            }
            let after = &m + outer(&s.rows, p);
            let gain = log_det(&after) - base_logdet;
            if gain.is_finite() && best.as_ref().is_none_or(|b| gain > b.1) {
                best = Some((i, gain, after));
            }
        }
        let Some((i, gain, after)) = best else {
            break;
        };
        taken[i] = true;
        let s = &scored[i];
        let threshold = calibration.informed_response_sd / INFORMED_C_CHANGE;
        let informs = (0..p)
            .filter(|&g| s.rows.iter().any(|row| row[g].abs() >= threshold))
            .map(|g| group_names[g].clone())
            .collect();
        candidates.push(PlanCandidate {
            rank,
            residual_junction: s.residual_junction,
            flow_junctions: s.flow_junctions.clone(),
            flow_m3s: s.flow_m3s,
            predicted_static_m: s.static_m,
            predicted_residual_m: s.residual_m,
            predicted_drop_m: s.static_m - s.residual_m,
            informs,
            expected_std_error: std_errors(&after).unwrap_or_default(),
            gain,
        });
        m = after;
    }
    Ok(TestPlan {
        groups: group_names,
        current_std_error,
        feasible,
        examined,
        candidates,
    })
}

/// J'J of whitened rows over `p` parameters.
fn outer(rows: &[Vec<f64>], p: usize) -> DMatrix<f64> {
    DMatrix::from_fn(p, p, |a, b| rows.iter().map(|r| r[a] * r[b]).sum())
}

/// log det of a symmetric positive definite matrix by Cholesky; -inf when it is not.
fn log_det(m: &DMatrix<f64>) -> f64 {
    match m.clone().cholesky() {
        Some(ch) => 2.0 * ch.l().diagonal().iter().map(|d| d.ln()).sum::<f64>(),
        None => f64::NEG_INFINITY,
    }
}

/// sqrt of the diagonal of M^-1.
fn std_errors(m: &DMatrix<f64>) -> Option<Vec<f64>> {
    let inv = m.clone().try_inverse()?;
    Some(
        (0..m.nrows())
            .map(|a| inv[(a, a)].max(0.0).sqrt())
            .collect(),
    )
}

/// Neighbours of every junction through open pipes: (junction, length in m).
fn adjacency(net: &Network) -> Vec<Vec<(usize, f64)>> {
    let mut adj = vec![Vec::new(); net.junctions.len()];
    for pipe in net.pipes.iter().filter(|p| !p.closed) {
        if let (NodeRef::Junction(a), NodeRef::Junction(b)) = (pipe.from, pipe.to) {
            adj[a].push((b, pipe.length_m));
            adj[b].push((a, pipe.length_m));
        }
    }
    adj
}

#[derive(PartialEq)]
struct Reach(f64, usize);
impl Eq for Reach {}
impl PartialOrd for Reach {
    fn partial_cmp(&self, other: &Self) -> Option<Ordering> {
        Some(self.cmp(other))
    }
}
impl Ord for Reach {
    // Nearest first out of the max-heap.
    fn cmp(&self, other: &Self) -> Ordering {
        other.0.total_cmp(&self.0).then(other.1.cmp(&self.1))
    }
}

/// Junctions within `max_m` of `from` along the mains (Dijkstra), nearest first, `from` included.
fn within_distance(adj: &[Vec<(usize, f64)>], from: usize, max_m: f64) -> Vec<usize> {
    let mut best = vec![f64::INFINITY; adj.len()];
    let mut order = Vec::new();
    let mut heap = BinaryHeap::new();
    best[from] = 0.0;
    heap.push(Reach(0.0, from));
    while let Some(Reach(d, j)) = heap.pop() {
        if d > best[j] {
            continue;
        }
        order.push(j);
        for &(k, len) in &adj[j] {
            let nd = d + len;
            if nd <= max_m && nd < best[k] {
                best[k] = nd;
                heap.push(Reach(nd, k));
            }
        }
    }
    order
}

/// The largest total flow (m^3/s, shared equally) the outlets can deliver at their modelled residual
/// with every zone junction at or above the limit, and the solution there; `None` when no positive
/// flow meets both.
#[allow(clippy::too_many_arguments)]
fn flow_to_run(
    net: &Network,
    solver: &GradientSolver,
    base: &OperatingState,
    c: &[f64],
    statics: &Solution,
    hydrants: &[usize],
    zone: &[usize],
    options: &PlanOptions,
) -> Result<Option<(f64, Solution)>, SolveError> {
    let units = net.units;
    let outlet_m3s = |head_m: f64| {
        units.flow_to_m3s(pitot_flow(
            units,
            options.outlet_coefficient,
            options.outlet,
            units.pressure_from_head_m(head_m),
        ))
    };
    // Upper bound: each outlet at the full static pressure of its hydrant.
    let mut per_hydrant = hydrants
        .iter()
        .map(|&j| statics.pressure_head_m(net, j).map_or(0.0, outlet_m3s))
        .fold(f64::INFINITY, f64::min);
    if per_hydrant.is_nan() || per_hydrant <= 0.0 {
        return Ok(None);
    }
    let mut warm = statics.clone();
    // A few shrinking steps: each step moves the flow towards the largest that meets both limits,
    // using the Hazen-Williams law (drop as flow^1.852) to guess, then checks it on the solver.
    for _ in 0..8 {
        let mut state = base.clone();
        for &j in hydrants {
            state.add_demand(j, per_hydrant);
        }
        let solution = solver.solve(net, &state, c, Some(&warm))?;
        let mut ratio: f64 = 1.0;
        for &j in zone {
            let (Some(s), Some(r)) = (
                statics.pressure_head_m(net, j),
                solution.pressure_head_m(net, j),
            ) else {
                return Ok(None);
            };
            if r < options.min_zone_residual_m {
                let allowed = (s - options.min_zone_residual_m).max(0.0);
                let drop = (s - r).max(f64::MIN_POSITIVE);
                ratio = ratio.min((allowed / drop).powf(1.0 / 1.852));
            }
        }
        for &j in hydrants {
            let residual = solution.pressure_head_m(net, j).unwrap_or(0.0);
            let capacity = outlet_m3s(residual);
            if capacity < per_hydrant {
                ratio = ratio.min(capacity / per_hydrant);
            }
        }
        if ratio >= 1.0 {
            return Ok(Some((per_hydrant * hydrants.len() as f64, solution)));
        }
        // A little under the guess so the next check usually passes.
        per_hydrant *= (ratio * 0.98).max(0.05);
        warm = solution;
    }
    Ok(None)
}

#[cfg(test)]
mod tests {
    use std::sync::atomic::AtomicBool;

    use super::*;
    use crate::calibrate::{CalibrationTest, calibrate};
    use crate::network::{FixedHead, Junction, Pipe, RoughnessGroup};

    /// Reservoir (80 m) - A - J1 - A - J2 - B - J3 - B - J4 along one main, 400 m pipes of 200 mm.
    fn line(c_a: f64, c_b: f64) -> Network {
        let group = |name: &str| RoughnessGroup {
            name: name.into(),
            min_c: 40.0,
            max_c: 150.0,
            locked: false,
        };
        let pipe = |k: usize, from: NodeRef, to: usize, g: usize, c: f64| Pipe {
            id: format!("P{k}"),
            from,
            to: NodeRef::Junction(to),
            length_m: 400.0,
            diameter_m: 0.2,
            c_factor: c,
            group: Some(g),
            closed: false,
            check_valve: false,
            minor_loss: 0.0,
        };
        Network {
            title: "line".into(),
            units: UnitSystem::Si,
            junctions: (1..=4)
                .map(|i| Junction {
                    id: format!("J{i}"),
                    elevation_m: 0.0,
                    demand_m3s: 0.0,
                    position: None,
                })
                .collect(),
            fixed_heads: vec![FixedHead {
                id: "R".into(),
                head_m: 80.0,
                position: None,
            }],
            pipes: vec![
                pipe(1, NodeRef::FixedHead(0), 0, 0, c_a),
                pipe(2, NodeRef::Junction(0), 1, 0, c_a),
                pipe(3, NodeRef::Junction(1), 2, 1, c_b),
                pipe(4, NodeRef::Junction(2), 3, 1, c_b),
            ],
            pumps: vec![],
            flow_unit: None,
            valves: Vec::new(),
            hazen_williams_constant: None,
            lonlat_origin: None,
            groups: vec![group("A"), group("B")],
            conditions: vec![],
        }
    }

    /// A test with pressures from the true network (no noise).
    fn true_test(
        truth: &Network,
        id: &str,
        gauge: usize,
        flow_at: usize,
        q: f64,
    ) -> CalibrationTest {
        let solver = GradientSolver::new(truth).unwrap();
        let base = OperatingState::base(truth);
        let c = truth.c_factors();
        let statics = solver.solve(truth, &base, &c, None).unwrap();
        let mut state = base.clone();
        state.add_demand(flow_at, q);
        let flowing = solver.solve(truth, &state, &c, None).unwrap();
        CalibrationTest {
            id: id.into(),
            residual_junction: gauge,
            condition: None,
            hydrant_flows_m3s: vec![(flow_at, q)],
            static_head_m: statics.pressure_head_m(truth, gauge).unwrap(),
            residual_head_m: flowing.pressure_head_m(truth, gauge).unwrap(),
        }
    }

    #[test]
    fn greedy_first_test_separates_two_correlated_groups() {
        // Both tests gauge the far end (J4), so they load A and B together: the fit cannot tell them
        // apart (|correlation| > 0.9). A test whose drop runs through A alone separates them; with
        // information rows (2a, b) and (2a, 2b) a pure-A row takes B's variance from 8/4 to at most 1/5
        // of the units (algebra of the 2x2 information matrix, worked by hand).
        let truth = line(110.0, 80.0);
        let model = line(100.0, 100.0);
        let tests = [
            true_test(&truth, "T1", 3, 2, 0.03),
            true_test(&truth, "T2", 3, 3, 0.03),
        ];
        let options = CalibrationOptions::for_units(UnitSystem::Si);
        let result = calibrate(
            &model,
            &tests,
            &options,
            &mut |_| {},
            &AtomicBool::new(false),
        )
        .unwrap();
        assert_eq!(result.correlation_groups, ["A", "B"]);
        assert!(
            result.correlation[0][1].abs() > 0.9,
            "{:?}",
            result.correlation
        );

        let plan_options = PlanOptions {
            count: 2,
            max_distance_m: 900.0,
            ..PlanOptions::for_units(UnitSystem::Si)
        };
        let plan = plan_tests(&model, &result, &options, &plan_options).unwrap();
        let first = &plan.candidates[0];
        assert_eq!(first.rank, 1);
        assert_eq!(first.informs, ["A"], "{first:?}");
        // The gauge's drop must not run through a B pipe: gauge and flow upstream of J3, or gauge at J3
        // fed through A only.
        assert!(first.flow_junctions.iter().all(|&j| j <= 2), "{first:?}");
        assert!(
            first.expected_std_error[1] < 0.6 * plan.current_std_error[1],
            "B: {} -> {}",
            plan.current_std_error[1],
            first.expected_std_error[1]
        );
        assert!(first.predicted_drop_m >= plan_options.min_drop_m);
        assert!(first.gain > 0.0);
        // Greedy: the second test is scored given the first, so its errors are lower still.
        let second = &plan.candidates[1];
        assert!(second.expected_std_error[0] <= first.expected_std_error[0]);
        assert!(second.gain <= first.gain + 1e-12);
    }

    #[test]
    fn limits_are_kept_and_a_bad_count_of_flow_hydrants_is_refused() {
        let truth = line(110.0, 80.0);
        let model = line(100.0, 100.0);
        let tests = [
            true_test(&truth, "T1", 3, 2, 0.03),
            true_test(&truth, "T2", 1, 0, 0.03),
        ];
        let options = CalibrationOptions::for_units(UnitSystem::Si);
        let result = calibrate(
            &model,
            &tests,
            &options,
            &mut |_| {},
            &AtomicBool::new(false),
        )
        .unwrap();
        let plan_options = PlanOptions {
            count: 10,
            max_distance_m: 900.0,
            ..PlanOptions::for_units(UnitSystem::Si)
        };
        let plan = plan_tests(&model, &result, &options, &plan_options).unwrap();
        let solver = GradientSolver::new(&model).unwrap();
        for candidate in &plan.candidates {
            let mut state = OperatingState::base(&model);
            let share = candidate.flow_m3s / candidate.flow_junctions.len() as f64;
            for &j in &candidate.flow_junctions {
                state.add_demand(j, share);
            }
            let solution = solver
                .solve(&model, &state, &result.pipe_c_after, None)
                .unwrap();
            for j in 0..model.junctions.len() {
                let h = solution.pressure_head_m(&model, j).unwrap();
                assert!(
                    h >= plan_options.min_zone_residual_m - 1e-6,
                    "{candidate:?}"
                );
            }
            assert!(candidate.predicted_drop_m >= plan_options.min_drop_m);
        }
        let two = PlanOptions {
            flow_hydrants: 3,
            ..plan_options
        };
        assert_eq!(
            plan_tests(&model, &result, &options, &two),
            Err(PlanError::FlowHydrants(3))
        );
    }
}
