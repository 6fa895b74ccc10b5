//! The model's fire flow at each tested hydrant after the fit, with a 95 % interval propagated from the
//! covariance of the fitted C.
//!
//! At the available flow Q* the modelled residual pressure at the gauge equals the target T:
//! p(Q*, C) = T. Differentiating implicitly, dQ*/dC_g = -(dp/dC_g) / (dp/dQ), where dp/dC_g is the
//! adjoint sensitivity the calibration already uses ([`crate::hydraulics::Solution::head_sensitivity_to_c`],
//! summed over the group's pipes) and dp/dQ = sum_i s_i dH/dd_i over the flowing hydrants i with their
//! share s_i of the total ([`crate::hydraulics::Solution::head_sensitivity_to_demand`]). The variance of
//! Q* follows to first order as g' Sigma g with g = dQ*/dC and Sigma the covariance of the fitted C (the
//! delta method; any statistics text, e.g. Casella and Berger, Statistical Inference, section 5.5.4,
//! from memory). The interval is Q* +- 1.96 sd, clipped at zero.
//!
//! Results are an aid to be reviewed by a licensed engineer; local codes and the fire authority govern.

use crate::fieldtest::model_check::model_available_flow;
use crate::hydraulics::{GradientSolver, OperatingState, Solution, SolveError};
use crate::network::Network;

use super::CalibrationTest;
use super::evaluate::map_over_threads;

/// The model's flow available at the target residual for one test, after the fit.
#[derive(Debug, Clone, PartialEq)]
pub struct FireFlowEstimate {
    pub test_id: String,
    /// Total hydrant flow (split as in the test) at which the modelled residual at the gauge falls to
    /// the target, in the network's flow unit; `None` when the model cannot say (gauge isolated, a
    /// failed solve, or no fall to the target within a thousand times the test flow).
    pub flow: Option<f64>,
    /// First-order standard error of `flow` from the C covariance (network flow unit).
    pub std_error: Option<f64>,
    /// 95 % interval: flow +- 1.96 standard errors, the low end clipped at 0.
    pub ci95: Option<(f64, f64)>,
}

/// First-order (delta-method) standard deviation of a function with gradient `gradient` of parameters
/// with covariance `covariance`: sqrt(g' Sigma g). `None` when the sizes disagree or the quadratic form
/// is negative (a covariance that is not positive semi-definite).
pub fn first_order_std_error(gradient: &[f64], covariance: &[Vec<f64>]) -> Option<f64> {
    if covariance.len() != gradient.len() || covariance.iter().any(|r| r.len() != gradient.len()) {
        return None;
    }
    let variance: f64 = gradient
        .iter()
        .zip(covariance)
        .map(|(ga, row)| ga * row.iter().zip(gradient).map(|(s, gb)| s * gb).sum::<f64>())
        .sum();
    (variance >= 0.0 && variance.is_finite()).then(|| variance.sqrt())
}

/// dQ*/dC_g (m^3/s per unit of C) for each group's pipes at a solution `at_flow` where the gauge sits at
/// the target: `-(dp/dC_g) / (dp/dQ)` (see the module documentation). `None` when the solution has no
/// sensitivities or the pressure does not fall with flow.
pub fn available_flow_gradient(
    net: &Network,
    at_flow: &Solution,
    pipe_c: &[f64],
    (gauge, hydrants): (usize, &[(usize, f64)]),
    group_pipes: &[Vec<usize>],
) -> Option<Vec<f64>> {
    let per_pipe = at_flow.head_sensitivity_to_c(net, pipe_c, gauge)?;
    let per_demand = at_flow.head_sensitivity_to_demand(gauge)?;
    let total: f64 = hydrants.iter().map(|h| h.1).sum();
    if total <= 0.0 {
        return None;
    }
    let dp_dq: f64 = hydrants
        .iter()
        .map(|&(j, q)| per_demand[j] * q / total)
        .sum();
    if dp_dq.is_nan() || dp_dq >= 0.0 {
        return None;
    }
    Some(
        group_pipes
            .iter()
            .map(|pipes| -pipes.iter().map(|&k| per_pipe[k]).sum::<f64>() / dp_dq)
            .collect(),
    )
}

/// The model's available flow and its 95 % interval for every test, with the pipes at `pipe_c` (the
/// fitted C). `group_pipes[g]` are the pipes of the g-th fitted group and `covariance` the covariance
/// of those groups' C, in the same order; with no fitted group the interval is absent.
/// `target_head_m` is the target residual as a water column.
///
/// The static state of each condition is solved once and shared by its tests, and the tests are dealt
/// round-robin to one thread per core; each test's root search depends only on its own solves, so the
/// answer does not depend on the core count.
pub fn fire_flow_estimates(
    net: &Network,
    tests: &[CalibrationTest],
    pipe_c: &[f64],
    group_pipes: &[Vec<usize>],
    covariance: &[Vec<f64>],
    target_head_m: f64,
) -> Result<Vec<FireFlowEstimate>, SolveError> {
    let solver = GradientSolver::new(net)?;
    let mut conditions: Vec<Option<usize>> = tests.iter().map(|t| t.condition).collect();
    conditions.sort_unstable();
    conditions.dedup();
    let statics: Vec<(Option<usize>, OperatingState, Option<Solution>)> = conditions
        .into_iter()
        .map(|condition| {
            let base = OperatingState::for_condition_index(net, condition);
            let solution = solver.solve(net, &base, pipe_c, None).ok();
            (condition, base, solution)
        })
        .collect();
    let threads = std::thread::available_parallelism().map_or(1, |n| n.get());
    Ok(map_over_threads(tests.len(), threads, |t| {
        let test = &tests[t];
        let static_state = statics.iter().find(|(c, _, _)| *c == test.condition);
        match static_state {
            Some((_, base, Some(statics))) => estimate(
                &solver,
                net,
                test,
                (base, statics),
                pipe_c,
                (group_pipes, covariance),
                target_head_m,
            ),
            _ => FireFlowEstimate {
                test_id: test.id.clone(),
                flow: None,
                std_error: None,
                ci95: None,
            },
        }
    }))
}

fn estimate(
    solver: &GradientSolver,
    net: &Network,
    test: &CalibrationTest,
    (base, statics): (&OperatingState, &Solution),
    pipe_c: &[f64],
    (group_pipes, covariance): (&[Vec<usize>], &[Vec<f64>]),
    target_head_m: f64,
) -> FireFlowEstimate {
    let mut out = FireFlowEstimate {
        test_id: test.id.clone(),
        flow: None,
        std_error: None,
        ci95: None,
    };
    let point = (test.residual_junction, test.hydrant_flows_m3s.as_slice());
    let Ok(Some((flow_m3s, at_flow))) =
        model_available_flow(solver, net, base, pipe_c, point, statics, target_head_m)
    else {
        return out;
    };
    let to_flow = |q: f64| net.flows().from_m3s(q);
    out.flow = Some(to_flow(flow_m3s));
    let std_error = at_flow
        .as_ref()
        .filter(|_| !group_pipes.is_empty())
        .and_then(|s| available_flow_gradient(net, s, pipe_c, point, group_pipes))
        .and_then(|g| first_order_std_error(&g, covariance));
    if let Some(sd) = std_error {
        out.std_error = Some(to_flow(sd));
        out.ci95 = Some((
            to_flow((flow_m3s - 1.96 * sd).max(0.0)),
            to_flow(flow_m3s + 1.96 * sd),
        ));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::hydraulics::HazenWilliams;
    use crate::hydraulics::headloss::HW_FLOW_EXPONENT;
    use crate::network::{FixedHead, Junction, NodeRef, Pipe, UnitSystem};

    fn junction(id: &str, elevation_m: f64) -> Junction {
        Junction {
            id: id.into(),
            elevation_m,
            demand_m3s: 0.0,
            position: None,
        }
    }

    fn pipe(id: &str, from: NodeRef, to: NodeRef, length_m: f64, c: f64) -> Pipe {
        Pipe {
            id: id.into(),
            from,
            to,
            length_m,
            diameter_m: 0.2,
            c_factor: c,
            group: None,
            closed: false,
            check_valve: false,
            minor_loss: 0.0,
        }
    }

    /// Reservoir at 80 m -> pipe A -> J1 -> pipe B -> J2 (gauge and hydrant), both at elevation 0.
    fn series() -> Network {
        Network {
            title: "series".into(),
            units: UnitSystem::Si,
            junctions: vec![junction("J1", 0.0), junction("J2", 0.0)],
            fixed_heads: vec![FixedHead {
                id: "R".into(),
                head_m: 80.0,
                position: None,
            }],
            pipes: vec![
                pipe(
                    "A",
                    NodeRef::FixedHead(0),
                    NodeRef::Junction(0),
                    900.0,
                    110.0,
                ),
                pipe("B", NodeRef::Junction(0), NodeRef::Junction(1), 600.0, 90.0),
            ],
            pumps: vec![],
            flow_unit: None,
            valves: Vec::new(),
            hazen_williams_constant: None,
            lonlat_origin: None,
            groups: vec![],
            conditions: vec![],
        }
    }

    /// Closed form of the series line: 80 - (rA + rB) Q^1.852 = T, so Q = ((80 - T) / (rA + rB))^(1/1.852).
    fn closed_form_flow(c_a: f64, c_b: f64, target_m: f64) -> f64 {
        let law = HazenWilliams::for_units(UnitSystem::Si);
        let r = law.resistance(900.0, 0.2, c_a) + law.resistance(600.0, 0.2, c_b);
        ((80.0 - target_m) / r).powf(1.0 / HW_FLOW_EXPONENT)
    }

    fn test_at_j2(q_m3s: f64) -> CalibrationTest {
        CalibrationTest {
            id: "T1".into(),
            residual_junction: 1,
            condition: None,
            hydrant_flows_m3s: vec![(1, q_m3s)],
            static_head_m: 80.0,
            residual_head_m: 60.0,
        }
    }

    #[test]
    fn gradient_and_interval_match_the_closed_form_of_a_series_line() {
        // Closed form derived in the module: with r_g = K L / (C_g^1.852 D^4.87) (Hazen-Williams),
        // dQ/dC_A = Q r_A / ((r_A + r_B) C_A), and sd(Q) = sqrt(g' Sigma g) (delta method, from memory).
        let net = series();
        let target_m = 14.0;
        let c = [110.0, 90.0];
        let covariance = vec![vec![16.0, -10.0], vec![-10.0, 25.0]];
        let groups = vec![vec![0], vec![1]];
        let tests = [test_at_j2(0.03)];
        let estimates =
            fire_flow_estimates(&net, &tests, &c, &groups, &covariance, target_m).unwrap();
        let expected_q = closed_form_flow(c[0], c[1], target_m);
        let q = net.flows().to_m3s(estimates[0].flow.unwrap());
        // The root search stops within 0.1 % of the flow.
        assert!(
            (q - expected_q).abs() < 2e-3 * expected_q,
            "{q} vs {expected_q}"
        );

        let law = HazenWilliams::for_units(UnitSystem::Si);
        let (r_a, r_b) = (
            law.resistance(900.0, 0.2, c[0]),
            law.resistance(600.0, 0.2, c[1]),
        );
        let g = [
            expected_q * r_a / ((r_a + r_b) * c[0]),
            expected_q * r_b / ((r_a + r_b) * c[1]),
        ];
        // The same derivative by central differences of the closed form.
        let h = 1e-3;
        let fd_a = (closed_form_flow(c[0] + h, c[1], target_m)
            - closed_form_flow(c[0] - h, c[1], target_m))
            / (2.0 * h);
        assert!(
            (fd_a - g[0]).abs() < 1e-6 * g[0].abs(),
            "{fd_a} vs {}",
            g[0]
        );
        let expected_sd = first_order_std_error(&g, &covariance).unwrap();
        let by_hand = (g[0] * g[0] * 16.0 + g[1] * g[1] * 25.0 - 2.0 * 10.0 * g[0] * g[1]).sqrt();
        assert!((expected_sd - by_hand).abs() < 1e-12);
        let sd = net.units.flow_to_m3s(estimates[0].std_error.unwrap());
        assert!(
            (sd - expected_sd).abs() < 5e-3 * expected_sd,
            "{sd} vs {expected_sd}"
        );
        let (low, high) = estimates[0].ci95.unwrap();
        let flow = estimates[0].flow.unwrap();
        let sd_flow = estimates[0].std_error.unwrap();
        assert!((high - flow - 1.96 * sd_flow).abs() < 1e-9 * flow);
        assert!((flow - low - 1.96 * sd_flow).abs() < 1e-9 * flow);
    }

    #[test]
    fn one_group_interval_scales_with_c() {
        // With one group over the whole line Q is proportional to C (r goes as C^-1.852), so
        // sd(Q) = Q sd(C) / C exactly to first order (closed form, delta method).
        let net = series();
        let c = [100.0, 100.0];
        let estimates = fire_flow_estimates(
            &net,
            &[test_at_j2(0.02)],
            &c,
            &[vec![0, 1]],
            &[vec![9.0]],
            14.0,
        )
        .unwrap();
        let flow = estimates[0].flow.unwrap();
        let sd = estimates[0].std_error.unwrap();
        assert!(
            (sd - flow * 3.0 / 100.0).abs() < 5e-3 * sd,
            "{sd} vs {flow}"
        );
    }

    #[test]
    fn no_interval_without_fitted_groups_and_no_flow_below_target() {
        let net = series();
        let c = [110.0, 90.0];
        let estimates = fire_flow_estimates(&net, &[test_at_j2(0.03)], &c, &[], &[], 14.0).unwrap();
        assert!(estimates[0].flow.is_some());
        assert_eq!(estimates[0].ci95, None);
        // A target above the static (80 m): no flow is available at it.
        let estimates = fire_flow_estimates(
            &net,
            &[test_at_j2(0.03)],
            &c,
            &[vec![0]],
            &[vec![4.0]],
            90.0,
        )
        .unwrap();
        assert_eq!(estimates[0].flow, Some(0.0));
        assert_eq!(estimates[0].ci95, None);
    }

    #[test]
    fn first_order_std_error_rejects_mismatched_sizes() {
        assert_eq!(first_order_std_error(&[1.0, 2.0], &[vec![1.0]]), None);
        assert_eq!(first_order_std_error(&[2.0], &[vec![4.0]]), Some(4.0));
    }
}
