//! Calibration: fit the Hazen-Williams C of each roughness group so the model reproduces the pressures
//! the gauges read in the field, and say how well and how surely it does.
//!
//! Parameters are one C per unlocked group that has pipes; locked groups and ungrouped pipes keep their C.
//! Residuals are measured minus modelled pressure at each test's residual hydrant, whitened by the gauge
//! accuracy: static and residual readings ([`FitTarget::Pressures`]) or the drop alone
//! ([`FitTarget::Drop`]). An optional prior adds (C - C_start) / prior_sd per group.
//!
//! The optimizer is argmin's Gauss-Newton with a backtracking (Armijo) line search on the bounded
//! parametrisation C = lo + (hi - lo) / (1 + e^-u), so every trial value lies strictly inside the group's
//! bounds. The Jacobian comes from the solver's factorized head system by implicit differentiation
//! ([`crate::hydraulics::Solution::head_sensitivity_to_c`]): per test, one adjoint solve for the static and
//! one for the residual state, whatever the number of groups.
//!
//! Results are a model-fitting aid: a licensed engineer reviews them before they are used for fire-flow,
//! design or operational decisions, and local codes and the fire authority's requirements govern.

mod evaluate;
pub mod fireflow;
mod job;
mod optimizer;
pub mod plan;
mod statistics;

use std::sync::atomic::AtomicBool;

pub use evaluate::TestEvaluation;
pub use fireflow::FireFlowEstimate;
pub use job::Job;
pub use statistics::FitStatistics;

use crate::hydraulics::SolveError;
use crate::network::{DEFAULT_GROUP_MAX_C, DEFAULT_GROUP_MIN_C, Network};

/// The caution every calibration output carries.
pub const CAUTION: &str = "roughcal's results (fitted C-factors, modelled pressures, available fire flow) are a model-fitting and screening aid. A licensed engineer reviews them before they are used for fire-flow, design or operational decisions; local codes and the fire authority govern.";

/// What the fit compares.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum FitTarget {
    /// Static and residual pressures.
    #[default]
    Pressures,
    /// The pressure drop alone, which cancels elevation and boundary-grade errors (common practice, no
    /// source).
    Drop,
}

impl FitTarget {
    pub fn label(self) -> &'static str {
        match self {
            Self::Pressures => "pressures",
            Self::Drop => "drop",
        }
    }
}

/// One usable flow test, resolved against the network (screening errors already excluded).
#[derive(Debug, Clone, PartialEq)]
pub struct CalibrationTest {
    pub id: String,
    pub residual_junction: usize,
    /// Index into [`Network::conditions`].
    pub condition: Option<usize>,
    /// Flowing hydrants: (junction, flow in m^3/s).
    pub hydrant_flows_m3s: Vec<(usize, f64)>,
    /// Measured static pressure as a water column (m).
    pub static_head_m: f64,
    /// Measured residual pressure as a water column (m).
    pub residual_head_m: f64,
}

/// Settings of one calibration run. Pressures here are water columns in metres; convert at the edge.
#[derive(Debug, Clone, PartialEq)]
pub struct CalibrationOptions {
    pub fit: FitTarget,
    /// One standard deviation of a gauge reading (m of water). Default: 1 psi.
    pub gauge_sd_m: f64,
    /// Prior standard deviation of each group's C around its start value; `None` for no prior.
    pub prior_sd_c: Option<f64>,
    pub max_iterations: u64,
    /// Thresholds of the "share of readings within" statistics (m of water). Default 2 and 5 psi.
    pub within_m: (f64, f64),
    /// A group is informed by a test when a change of [`INFORMED_C_CHANGE`] in its C moves one of the
    /// test's fitted readings by at least this many gauge standard deviations.
    pub informed_response_sd: f64,
    /// Target residual pressure of the fire-flow estimates (m of water). Default 20 psi / 140 kPa
    /// (NFPA 291; see [`crate::fieldtest::default_target`]).
    pub target_residual_m: f64,
    /// Threads the tests are shared over at each model evaluation; `None` for one per core. The result
    /// does not depend on it: each test's solves depend only on that test's own earlier solves.
    pub worker_threads: Option<usize>,
}

/// The change of C used to judge whether a test informs a group (see
/// [`CalibrationOptions::informed_response_sd`]).
pub const INFORMED_C_CHANGE: f64 = 10.0;

impl CalibrationOptions {
    /// Defaults for a network in `units`: gauge 1 psi / 7 kPa, within 2 and 5 psi (14 and 35 kPa).
    pub fn for_units(units: crate::network::UnitSystem) -> Self {
        use crate::network::UnitSystem;
        let (gauge, tight, loose) = match units {
            UnitSystem::Us => (1.0, 2.0, 5.0),
            UnitSystem::Si => (7.0, 14.0, 35.0),
        };
        Self {
            fit: FitTarget::Pressures,
            gauge_sd_m: units.pressure_to_head_m(gauge),
            prior_sd_c: None,
            max_iterations: 50,
            within_m: (
                units.pressure_to_head_m(tight),
                units.pressure_to_head_m(loose),
            ),
            informed_response_sd: 0.25,
            target_residual_m: units.pressure_to_head_m(crate::fieldtest::default_target(units)),
            worker_threads: None,
        }
    }
}

/// How a group came out of the fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum GroupStatus {
    Fitted,
    AtBound,
    Locked,
    NotInformed,
}

impl GroupStatus {
    /// The word written in tables, CSV and JSON.
    pub fn label(self) -> &'static str {
        match self {
            Self::Fitted => "fitted",
            Self::AtBound => "at bound",
            Self::Locked => "locked",
            Self::NotInformed => "not informed",
        }
    }
}

/// The fit of one roughness group.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupFit {
    pub name: String,
    /// Index into [`Network::groups`].
    pub group: usize,
    pub pipe_count: usize,
    pub start_c: f64,
    pub fitted_c: f64,
    pub min_c: f64,
    pub max_c: f64,
    pub std_error: Option<f64>,
    /// 95 % interval (normal approximation: fitted +- 1.96 standard errors, clipped to the bounds).
    pub ci95: Option<(f64, f64)>,
    /// Number of tests with a reading that responds to this group (see
    /// [`CalibrationOptions::informed_response_sd`]).
    pub tests_informing: usize,
    pub status: GroupStatus,
    /// For a group no test informs: junctions where a test would stress its pipes.
    pub suggested_test_nodes: Vec<String>,
}

/// Measured and modelled values of one test, before and after (pressures in the network's units).
#[derive(Debug, Clone, PartialEq)]
pub struct TestComparison {
    pub id: String,
    pub measured_static: f64,
    pub measured_residual: f64,
    pub modelled_static_before: f64,
    pub modelled_residual_before: f64,
    pub modelled_static_after: f64,
    pub modelled_residual_after: f64,
    pub before: FitStatistics,
    pub after: FitStatistics,
    /// Every control valve in the test's static state under the fitted C (internal units).
    pub valves_static_after: Vec<crate::hydraulics::ValveState>,
    /// Every control valve in the test's flowing state under the fitted C (internal units): a valve
    /// that regulates, opens or closes while the hydrant flows shapes the residual the fit matched.
    pub valves_residual_after: Vec<crate::hydraulics::ValveState>,
}

/// One optimizer iteration, as reported to a progress callback.
#[derive(Debug, Clone, PartialEq)]
pub struct IterationReport {
    pub iteration: u64,
    /// Half the sum of squared whitened residuals (including prior terms).
    pub objective: f64,
    /// Largest change of any group's C since the previous iteration.
    pub step_c: f64,
    /// Current C of each fitted group: (group name, C).
    pub group_c: Vec<(String, f64)>,
}

/// The whole outcome of a calibration.
#[derive(Debug, Clone, PartialEq)]
pub struct CalibrationResult {
    pub groups: Vec<GroupFit>,
    /// Names of the groups in the correlation matrix (the fitted ones), in order.
    pub correlation_groups: Vec<String>,
    pub correlation: Vec<Vec<f64>>,
    /// Covariance of the C of `correlation_groups`, in that order (inflated by the reduced chi-square
    /// when above 1); empty when it could not be formed.
    pub covariance: Vec<Vec<f64>>,
    /// The model's flow available at [`CalibrationOptions::target_residual_m`] for every test, after
    /// the fit, with its first-order 95 % interval ([`fireflow`]); in test order.
    pub fire_flow: Vec<FireFlowEstimate>,
    /// The same flow with every pipe at its C as written in the network (before the fit), without an
    /// interval; in test order.
    pub fire_flow_before: Vec<FireFlowEstimate>,
    /// Pairs whose correlation exceeds 0.9 in magnitude: the tests cannot tell them apart.
    pub strongly_correlated: Vec<(String, String, f64)>,
    pub before: FitStatistics,
    pub after: FitStatistics,
    pub tests: Vec<TestComparison>,
    pub iterations: Vec<IterationReport>,
    pub converged: bool,
    /// Why the optimizer stopped, in words.
    pub termination: String,
    /// C of every pipe after the fit, in pipe order.
    pub pipe_c_after: Vec<f64>,
    pub fit: FitTarget,
    /// sum of squared whitened residuals / degrees of freedom at the solution (1 when the gauge accuracy
    /// explains the misfit).
    pub reduced_chi_square: Option<f64>,
    /// The Hazen-Williams constant the C values belong to (the network's).
    pub hazen_williams: crate::hydraulics::headloss::HwConstant,
}

impl CalibrationResult {
    /// Fitted C of a group by name.
    pub fn fitted_c(&self, name: &str) -> Option<f64> {
        self.groups
            .iter()
            .find(|g| g.name == name)
            .map(|g| g.fitted_c)
    }
}

/// Why a calibration produced no result.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CalibrationError {
    #[error("no usable flow test: every test was excluded by screening or none was given")]
    NoUsableTests,
    #[error("the network model could not be solved during calibration: {0}")]
    Solve(#[from] SolveError),
    #[error("the calibration was cancelled")]
    Cancelled,
    #[error("the optimizer failed: {0}")]
    Optimizer(String),
    #[error("test `{test}` names junction index {junction}, which the network does not have")]
    BadTest { test: String, junction: usize },
    #[error(
        "test `{test}`: the gauge's junction is isolated in the model (no open path to a fixed head), so it has no modelled pressure to fit"
    )]
    GaugeIsolated { test: String },
}

/// An isolated gauge has a NaN head; fitting to it would be fitting to nothing.
fn check_gauges_connected(
    tests: &[CalibrationTest],
    evaluations: &[evaluate::TestEvaluation],
) -> Result<(), CalibrationError> {
    match tests
        .iter()
        .zip(evaluations)
        .find(|(_, e)| !(e.static_head_m.is_finite() && e.residual_head_m.is_finite()))
    {
        Some((test, _)) => Err(CalibrationError::GaugeIsolated {
            test: test.id.clone(),
        }),
        None => Ok(()),
    }
}

/// Fits the C of every unlocked, informed group of `net` to `tests`.
///
/// `progress` is called once per optimizer iteration; setting `cancel` stops the run at the next model
/// evaluation with [`CalibrationError::Cancelled`].
pub fn calibrate(
    net: &Network,
    tests: &[CalibrationTest],
    options: &CalibrationOptions,
    progress: &mut dyn FnMut(&IterationReport),
    cancel: &AtomicBool,
) -> Result<CalibrationResult, CalibrationError> {
    if tests.is_empty() {
        return Err(CalibrationError::NoUsableTests);
    }
    for test in tests {
        let bad = std::iter::once(test.residual_junction)
            .chain(test.hydrant_flows_m3s.iter().map(|h| h.0))
            .find(|&j| j >= net.junctions.len());
        if let Some(junction) = bad {
            return Err(CalibrationError::BadTest {
                test: test.id.clone(),
                junction,
            });
        }
        if test.condition.is_some_and(|c| c >= net.conditions.len()) {
            return Err(CalibrationError::BadTest {
                test: test.id.clone(),
                junction: test.residual_junction,
            });
        }
    }

    let candidates = group_candidates(net);
    // First pass: sensitivities of every candidate group at the start values.
    let all_pipes: Vec<Vec<usize>> = candidates.iter().map(|c| c.pipes.clone()).collect();
    let start_c: Vec<f64> = candidates.iter().map(|c| c.start_c).collect();
    let screening = evaluate::Evaluator::new(net, tests, all_pipes, options.worker_threads)?;
    // The start is the network as written, pipe by pipe.
    let start_eval = screening.evaluate_pipes(&net.c_factors())?;
    check_gauges_connected(tests, &start_eval)?;
    let (_, start_rows) =
        evaluate::residual_rows(tests, &start_eval, options.fit, options.gauge_sd_m);
    let rows_per_test = start_rows.len() / tests.len();
    let informing: Vec<usize> = (0..candidates.len())
        .map(|g| {
            start_rows
                .chunks(rows_per_test)
                .filter(|rows| {
                    rows.iter()
                        .any(|row| row[g].abs() * INFORMED_C_CHANGE >= options.informed_response_sd)
                })
                .count()
        })
        .collect();

    let fitted: Vec<usize> = (0..candidates.len())
        .filter(|&g| !candidates[g].locked && informing[g] > 0)
        .collect();

    let outcome = if fitted.is_empty() {
        None
    } else {
        Some(optimizer::run(
            &screening,
            options,
            &candidates,
            &fitted,
            progress,
            cancel,
        )?)
    };

    let mut final_c = start_c.clone();
    if let Some(outcome) = &outcome {
        for (slot, &g) in fitted.iter().enumerate() {
            final_c[g] = outcome.fitted_c[slot];
        }
    }
    // After the fit only the fitted groups change; every other pipe keeps its own C.
    let mut pipe_c_after = net.c_factors();
    for &g in &fitted {
        for &k in &candidates[g].pipes {
            pipe_c_after[k] = final_c[g];
        }
    }
    let final_eval = screening.evaluate_pipes(&pipe_c_after)?;
    check_gauges_connected(tests, &final_eval)?;
    let (final_residuals, final_rows) =
        evaluate::residual_rows(tests, &final_eval, options.fit, options.gauge_sd_m);

    let report = statistics::Summary::build(statistics::SummaryInput {
        net,
        tests,
        options,
        candidates: &candidates,
        fitted: &fitted,
        informing: &informing,
        start_eval: &start_eval,
        final_eval: &final_eval,
        final_c: &final_c,
        final_residuals: &final_residuals,
        final_rows: &final_rows,
    });

    // Without a covariance there is no interval, but the flow is still worth showing.
    let (interval_pipes, interval_covariance) = if report.covariance.is_empty() {
        (Vec::new(), Vec::new())
    } else {
        (report.covariance_pipes.clone(), report.covariance.clone())
    };
    let fire_flow = fireflow::fire_flow_estimates(
        net,
        tests,
        &pipe_c_after,
        &interval_pipes,
        &interval_covariance,
        options.target_residual_m,
    )?;
    let fire_flow_before = fireflow::fire_flow_estimates(
        net,
        tests,
        &net.c_factors(),
        &[],
        &[],
        options.target_residual_m,
    )?;

    let (iterations, converged, termination) = match outcome {
        Some(o) => (o.iterations, o.converged, o.termination),
        None => (
            Vec::new(),
            true,
            "nothing to fit: every group is locked or not informed".to_string(),
        ),
    };
    Ok(CalibrationResult {
        hazen_williams: crate::hydraulics::headloss::HwConstant::of_network(net),
        groups: report.groups,
        correlation_groups: report.correlation_groups,
        correlation: report.correlation,
        covariance: report.covariance,
        fire_flow,
        fire_flow_before,
        strongly_correlated: report.strongly_correlated,
        before: report.before,
        after: report.after,
        tests: report.tests,
        iterations,
        converged,
        termination,
        pipe_c_after,
        fit: options.fit,
        reduced_chi_square: report.reduced_chi_square,
    })
}

/// A roughness group that has pipes, with its start value and bounds.
#[derive(Debug, Clone)]
pub(crate) struct GroupCandidate {
    pub group: usize,
    pub pipes: Vec<usize>,
    pub start_c: f64,
    pub min_c: f64,
    pub max_c: f64,
    pub locked: bool,
}

/// A roughness group's pipes, their length, the C a fit starts from and the bounds it keeps to: what
/// the fit and the workbench's groups table both show.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupStart {
    /// Indices of the group's pipes, in pipe order.
    pub pipes: Vec<usize>,
    pub length_m: f64,
    /// The length-weighted mean C of the pipes (exactly the common C when all are equal, as in a
    /// calibrated file); `None` for a group without pipes or length.
    pub start_c: Option<f64>,
    /// The group's bounds, or [`DEFAULT_GROUP_MIN_C`] and [`DEFAULT_GROUP_MAX_C`] when the file's are
    /// not an interval.
    pub min_c: f64,
    pub max_c: f64,
}

/// The start of group `group` of `net` (see [`GroupStart`]).
pub fn group_start(net: &Network, group: usize) -> GroupStart {
    let pipes: Vec<usize> = (0..net.pipes.len())
        .filter(|&k| net.pipes[k].group == Some(group))
        .collect();
    let length_m: f64 = pipes.iter().map(|&k| net.pipes[k].length_m).sum();
    let weighted: f64 = pipes
        .iter()
        .map(|&k| net.pipes[k].c_factor * net.pipes[k].length_m)
        .sum();
    let (min_c, max_c) = match net.groups.get(group) {
        Some(g) if g.min_c < g.max_c => (g.min_c, g.max_c),
        _ => (DEFAULT_GROUP_MIN_C, DEFAULT_GROUP_MAX_C),
    };
    let first_c = pipes.first().map(|&k| net.pipes[k].c_factor);
    let start_c = match first_c {
        Some(first) if pipes.iter().all(|&k| net.pipes[k].c_factor == first) => Some(first),
        _ => (length_m > 0.0).then(|| weighted / length_m),
    };
    GroupStart {
        pipes,
        length_m,
        start_c,
        min_c,
        max_c,
    }
}

/// Groups that have at least one pipe, with their start values ([`group_start`]) and bounds.
fn group_candidates(net: &Network) -> Vec<GroupCandidate> {
    net.groups
        .iter()
        .enumerate()
        .filter_map(|(g, group)| {
            let start = group_start(net, g);
            let start_c = start.start_c?;
            Some(GroupCandidate {
                group: g,
                pipes: start.pipes,
                start_c,
                min_c: start.min_c,
                max_c: start.max_c,
                locked: group.locked,
            })
        })
        .collect()
}
