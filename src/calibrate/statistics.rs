//! Fit statistics, parameter uncertainty and the per-group verdicts.

use crate::network::units::as_typed;
use nalgebra::DMatrix;

use super::evaluate::TestEvaluation;
use super::{
    CalibrationOptions, CalibrationTest, FitTarget, GroupCandidate, GroupFit, GroupStatus,
    TestComparison,
};
use crate::network::{Network, NodeRef};

/// Summary of measured-minus-modelled errors over a set of readings, in the network's pressure units.
#[derive(Debug, Clone, PartialEq)]
pub struct FitStatistics {
    /// Number of readings (static and residual pressures, or drops).
    pub n: usize,
    pub mean_error: f64,
    pub rmse: f64,
    pub max_abs_error: f64,
    /// Thresholds of the two shares below, in the network's pressure units.
    pub within_tight: f64,
    pub within_loose: f64,
    /// Share (0..1) of readings with |error| <= `within_tight`.
    pub share_within_tight: f64,
    pub share_within_loose: f64,
}

impl FitStatistics {
    /// Statistics of `errors` (measured minus modelled, network units).
    pub fn of(errors: &[f64], within_tight: f64, within_loose: f64) -> Self {
        let n = errors.len();
        if n == 0 {
            return Self {
                n,
                mean_error: 0.0,
                rmse: 0.0,
                max_abs_error: 0.0,
                within_tight,
                within_loose,
                share_within_tight: 0.0,
                share_within_loose: 0.0,
            };
        }
        let count = n as f64;
        let share = |limit: f64| errors.iter().filter(|e| e.abs() <= limit).count() as f64 / count;
        Self {
            n,
            mean_error: errors.iter().sum::<f64>() / count,
            rmse: (errors.iter().map(|e| e * e).sum::<f64>() / count).sqrt(),
            max_abs_error: errors.iter().map(|e| e.abs()).fold(0.0, f64::max),
            within_tight,
            within_loose,
            share_within_tight: share(within_tight),
            share_within_loose: share(within_loose),
        }
    }
}

/// Measured minus modelled errors of one test (network pressure units) for the fit target.
fn test_errors(
    test: &CalibrationTest,
    eval: &TestEvaluation,
    fit: FitTarget,
    to_pressure: f64,
) -> Vec<f64> {
    match fit {
        FitTarget::Pressures => vec![
            (test.static_head_m - eval.static_head_m) * to_pressure,
            (test.residual_head_m - eval.residual_head_m) * to_pressure,
        ],
        FitTarget::Drop => vec![
            ((test.static_head_m - test.residual_head_m)
                - (eval.static_head_m - eval.residual_head_m))
                * to_pressure,
        ],
    }
}

pub(super) struct SummaryInput<'a> {
    pub net: &'a Network,
    pub tests: &'a [CalibrationTest],
    pub options: &'a CalibrationOptions,
    pub candidates: &'a [GroupCandidate],
    pub fitted: &'a [usize],
    pub informing: &'a [usize],
    pub start_eval: &'a [TestEvaluation],
    pub final_eval: &'a [TestEvaluation],
    /// C of every candidate after the fit.
    pub final_c: &'a [f64],
    pub final_residuals: &'a [f64],
    /// Whitened Jacobian rows over all candidates at the final point.
    pub final_rows: &'a [Vec<f64>],
}

pub(super) struct Summary {
    pub groups: Vec<GroupFit>,
    pub correlation_groups: Vec<String>,
    pub correlation: Vec<Vec<f64>>,
    /// Covariance of the C of `correlation_groups` (empty when the normal matrix is singular).
    pub covariance: Vec<Vec<f64>>,
    /// Pipes of each of `correlation_groups`.
    pub covariance_pipes: Vec<Vec<usize>>,
    pub strongly_correlated: Vec<(String, String, f64)>,
    pub before: FitStatistics,
    pub after: FitStatistics,
    pub tests: Vec<TestComparison>,
    pub reduced_chi_square: Option<f64>,
}

/// A fitted value this close to a bound (as a share of the bound range) is reported `at bound`.
const AT_BOUND_SHARE: f64 = 0.005;
/// Correlation above which two groups are reported as indistinguishable.
const STRONG_CORRELATION: f64 = 0.9;

impl Summary {
    pub fn build(input: SummaryInput<'_>) -> Self {
        let SummaryInput {
            net,
            tests,
            options,
            candidates,
            fitted,
            informing,
            start_eval,
            final_eval,
            final_c,
            final_residuals,
            final_rows,
        } = input;
        let to_pressure = net.units.pressure_per_head_m();
        let tight = options.within_m.0 * to_pressure;
        let loose = options.within_m.1 * to_pressure;

        let mut all_before = Vec::new();
        let mut all_after = Vec::new();
        let mut comparisons = Vec::with_capacity(tests.len());
        for ((test, before), after) in tests.iter().zip(start_eval).zip(final_eval) {
            let errors_before = test_errors(test, before, options.fit, to_pressure);
            let errors_after = test_errors(test, after, options.fit, to_pressure);
            comparisons.push(TestComparison {
                id: test.id.clone(),
                measured_static: as_typed(test.static_head_m * to_pressure),
                measured_residual: as_typed(test.residual_head_m * to_pressure),
                modelled_static_before: before.static_head_m * to_pressure,
                modelled_residual_before: before.residual_head_m * to_pressure,
                modelled_static_after: after.static_head_m * to_pressure,
                modelled_residual_after: after.residual_head_m * to_pressure,
                before: FitStatistics::of(&errors_before, tight, loose),
                after: FitStatistics::of(&errors_after, tight, loose),
                valves_static_after: after.valves_static.clone(),
                valves_residual_after: after.valves_residual.clone(),
            });
            all_before.extend(errors_before);
            all_after.extend(errors_after);
        }

        // Status of every candidate first, so the covariance covers only groups fitted inside bounds.
        let status: Vec<GroupStatus> = (0..candidates.len())
            .map(|g| {
                let cand = &candidates[g];
                if cand.locked {
                    GroupStatus::Locked
                } else if !fitted.contains(&g) {
                    GroupStatus::NotInformed
                } else {
                    let margin = AT_BOUND_SHARE * (cand.max_c - cand.min_c);
                    if final_c[g] - cand.min_c <= margin || cand.max_c - final_c[g] <= margin {
                        GroupStatus::AtBound
                    } else {
                        GroupStatus::Fitted
                    }
                }
            })
            .collect();
        let inside: Vec<usize> = (0..candidates.len())
            .filter(|&g| status[g] == GroupStatus::Fitted)
            .collect();

        let readings = final_residuals.len();
        let chi_square: f64 = final_residuals.iter().map(|r| r * r).sum();
        let mut prior_rows = 0;
        if options.prior_sd_c.is_some() {
            prior_rows = inside.len();
        }
        let dof = (readings + prior_rows).saturating_sub(inside.len());
        let reduced_chi_square = (dof > 0).then(|| chi_square / dof as f64);
        // Covariance from the weighted Gauss-Newton normal matrix, inflated by the reduced chi-square
        // when the misfit is larger than the gauge accuracy explains (never deflated below it).
        let inflation = reduced_chi_square.unwrap_or(1.0).max(1.0);
        let p = inside.len();
        let mut normal = DMatrix::<f64>::zeros(p, p);
        for row in final_rows {
            for (a, &ga) in inside.iter().enumerate() {
                for (b, &gb) in inside.iter().enumerate() {
                    normal[(a, b)] += row[ga] * row[gb];
                }
            }
        }
        if let Some(prior_sd) = options.prior_sd_c {
            for a in 0..p {
                normal[(a, a)] += 1.0 / (prior_sd * prior_sd);
            }
        }
        let covariance = normal.clone().try_inverse().map(|inv| inv * inflation);

        let mut groups = Vec::with_capacity(candidates.len());
        for (g, cand) in candidates.iter().enumerate() {
            let slot = inside.iter().position(|&i| i == g);
            let std_error = match (&covariance, slot) {
                (Some(cov), Some(s)) if cov[(s, s)] > 0.0 => Some(cov[(s, s)].sqrt()),
                _ => None,
            };
            let ci95 = std_error.map(|se| {
                (
                    (final_c[g] - 1.96 * se).max(cand.min_c),
                    (final_c[g] + 1.96 * se).min(cand.max_c),
                )
            });
            let suggested_test_nodes = if status[g] == GroupStatus::NotInformed {
                suggest_test_nodes(net, &cand.pipes)
            } else {
                Vec::new()
            };
            groups.push(GroupFit {
                name: net.groups[cand.group].name.clone(),
                group: cand.group,
                pipe_count: cand.pipes.len(),
                start_c: cand.start_c,
                fitted_c: final_c[g],
                min_c: cand.min_c,
                max_c: cand.max_c,
                std_error,
                ci95,
                tests_informing: informing[g],
                status: status[g],
                suggested_test_nodes,
            });
        }

        let correlation_groups: Vec<String> = inside
            .iter()
            .map(|&g| net.groups[candidates[g].group].name.clone())
            .collect();
        let mut correlation = vec![vec![0.0; p]; p];
        let mut strongly_correlated = Vec::new();
        if let Some(cov) = &covariance {
            for a in 0..p {
                for b in 0..p {
                    let denom = (cov[(a, a)] * cov[(b, b)]).sqrt();
                    correlation[a][b] = if denom > 0.0 {
                        cov[(a, b)] / denom
                    } else {
                        0.0
                    };
                }
            }
            for a in 0..p {
                for b in a + 1..p {
                    if correlation[a][b].abs() > STRONG_CORRELATION {
                        strongly_correlated.push((
                            correlation_groups[a].clone(),
                            correlation_groups[b].clone(),
                            correlation[a][b],
                        ));
                    }
                }
            }
        }

        let covariance_rows = covariance
            .as_ref()
            .map(|cov| {
                (0..p)
                    .map(|a| (0..p).map(|b| cov[(a, b)]).collect())
                    .collect()
            })
            .unwrap_or_default();
        Self {
            groups,
            correlation_groups,
            correlation,
            covariance: covariance_rows,
            covariance_pipes: inside
                .iter()
                .map(|&g| candidates[g].pipes.clone())
                .collect(),
            strongly_correlated,
            before: FitStatistics::of(&all_before, tight, loose),
            after: FitStatistics::of(&all_after, tight, loose),
            tests: comparisons,
            reduced_chi_square,
        }
    }
}

/// Junctions where a flow test would stress a group's pipes: the junction ends of its pipes, those
/// carrying the most of the group's length first (up to three).
fn suggest_test_nodes(net: &Network, pipes: &[usize]) -> Vec<String> {
    let mut length_at: Vec<(usize, f64)> = Vec::new();
    for &k in pipes {
        for node in [net.pipes[k].from, net.pipes[k].to] {
            if let NodeRef::Junction(j) = node {
                match length_at.iter_mut().find(|(i, _)| *i == j) {
                    Some(entry) => entry.1 += net.pipes[k].length_m,
                    None => length_at.push((j, net.pipes[k].length_m)),
                }
            }
        }
    }
    length_at.sort_by(|a, b| b.1.total_cmp(&a.1));
    length_at
        .into_iter()
        .take(3)
        .map(|(j, _)| net.junctions[j].id.clone())
        .collect()
}
