//! Evaluation of one trial set of group C-factors: solve every usable test (static and residual state),
//! collect modelled pressures and their sensitivities to each group's C.
//!
//! Two things keep an evaluation cheap on a large network. Every solve is warm-started from the same
//! state's solution at the previous evaluation (the optimizer moves C a little at a time, so the flows
//! barely change), falling back to a colder start if that fails. And the tests are shared out over the
//! machine's cores: each test's solves are independent of every other test's.

use std::sync::{Mutex, PoisonError};

use crate::hydraulics::{GradientSolver, OperatingState, Solution, SolveError, ValveState};
use crate::network::Network;

use super::{CalibrationTest, FitTarget};

/// Modelled pressures (m of water) of one test, and their derivatives with respect to each parameter
/// group's C (m per unit of C), in parameter order.
#[derive(Debug, Clone)]
pub struct TestEvaluation {
    pub static_head_m: f64,
    pub residual_head_m: f64,
    pub d_static_d_c: Vec<f64>,
    pub d_residual_d_c: Vec<f64>,
    /// Every control valve in the static state (empty for a network without valves).
    pub valves_static: Vec<ValveState>,
    /// Every control valve in the residual (flowing) state.
    pub valves_residual: Vec<ValveState>,
}

/// Everything that stays fixed while the optimizer varies C: solver, states, which pipes belong to which
/// parameter.
pub struct Evaluator<'a> {
    pub net: &'a Network,
    pub tests: &'a [CalibrationTest],
    solver: GradientSolver,
    /// For each parameter, the pipes whose C it sets.
    parameter_pipes: Vec<Vec<usize>>,
    /// Static state of each test, by index into `static_states` (tests under one condition share it).
    static_state_of_test: Vec<usize>,
    static_states: Vec<OperatingState>,
    residual_states: Vec<OperatingState>,
    base_c: Vec<f64>,
    /// The previous evaluation's solutions (without their factorizations), to warm-start the next.
    previous: Mutex<PreviousSolutions>,
    /// Threads an evaluation shares the tests over (at least 1).
    threads: usize,
}

/// One test's pressures and the residual solution they came from.
type TestOutcome = Result<(TestEvaluation, Solution), SolveError>;

/// Empty until the first evaluation; a missing entry means "start from the static solution or cold".
#[derive(Default, Clone)]
struct PreviousSolutions {
    statics: Vec<Option<Solution>>,
    residuals: Vec<Option<Solution>>,
}

impl<'a> Evaluator<'a> {
    pub fn new(
        net: &'a Network,
        tests: &'a [CalibrationTest],
        parameter_pipes: Vec<Vec<usize>>,
        threads: Option<usize>,
    ) -> Result<Self, SolveError> {
        let solver = GradientSolver::new(net)?;
        let mut static_states: Vec<OperatingState> = Vec::new();
        let mut static_keys: Vec<Option<usize>> = Vec::new();
        let mut static_state_of_test = Vec::with_capacity(tests.len());
        let mut residual_states = Vec::with_capacity(tests.len());
        for test in tests {
            let state = OperatingState::for_condition_index(net, test.condition);
            let slot = match static_keys.iter().position(|k| *k == test.condition) {
                Some(slot) => slot,
                None => {
                    static_keys.push(test.condition);
                    static_states.push(state.clone());
                    static_states.len() - 1
                }
            };
            static_state_of_test.push(slot);
            let mut residual = state;
            for &(junction, q) in &test.hydrant_flows_m3s {
                residual.add_demand(junction, q);
            }
            residual_states.push(residual);
        }
        Ok(Self {
            net,
            tests,
            solver,
            parameter_pipes,
            static_state_of_test,
            static_states,
            previous: Mutex::new(PreviousSolutions::default()),
            threads: threads
                .or_else(|| std::thread::available_parallelism().ok().map(|n| n.get()))
                .unwrap_or(1)
                .max(1),
            residual_states,
            base_c: net.c_factors(),
        })
    }

    /// The same tests and solver with other parameter groups, starting from this evaluator's latest
    /// solutions (the optimizer's first evaluation is then nearly free after the screening pass).
    pub fn reparametrised(&self, parameter_pipes: Vec<Vec<usize>>) -> Self {
        let previous = self.previous.lock().unwrap_or_else(PoisonError::into_inner);
        Self {
            net: self.net,
            tests: self.tests,
            solver: self.solver.clone(),
            parameter_pipes,
            static_state_of_test: self.static_state_of_test.clone(),
            static_states: self.static_states.clone(),
            residual_states: self.residual_states.clone(),
            base_c: self.base_c.clone(),
            previous: Mutex::new(previous.clone()),
            threads: self.threads,
        }
    }

    /// Pipe C-factors with each parameter group set to `group_c`.
    pub fn pipe_c_factors(&self, group_c: &[f64]) -> Vec<f64> {
        let mut c = self.base_c.clone();
        for (pipes, &value) in self.parameter_pipes.iter().zip(group_c) {
            for &k in pipes {
                c[k] = value;
            }
        }
        c
    }

    /// Solves every test at `group_c`, with the derivatives.
    pub fn evaluate(&self, group_c: &[f64]) -> Result<Vec<TestEvaluation>, SolveError> {
        self.evaluate_pipes(&self.pipe_c_factors(group_c))
    }

    /// Solves every test with the C of every pipe given (groups that are not being fitted keep each
    /// pipe's own C, which need not be equal within a group), with the derivatives.
    pub fn evaluate_pipes(&self, c: &[f64]) -> Result<Vec<TestEvaluation>, SolveError> {
        let mut previous = self.previous.lock().unwrap_or_else(PoisonError::into_inner);
        // One set of resistances serves every solve of this evaluation.
        let resistance = self.solver.pipe_resistances(self.net, c);
        let resistance = resistance.as_slice();
        let statics: Vec<Solution> = self
            .static_states
            .iter()
            .enumerate()
            .map(|(i, state)| {
                let warm = previous.statics.get(i).and_then(Option::as_ref);
                self.solve_warm(state, resistance, warm, None)
            })
            .collect::<Result<_, _>>()?;

        let warm_residuals = &previous.residuals;
        let results: Vec<TestOutcome> = map_over_threads(self.tests.len(), self.threads, |t| {
            let static_solution = &statics[self.static_state_of_test[t]];
            let warm = warm_residuals.get(t).and_then(Option::as_ref);
            self.evaluate_test(t, c, resistance, static_solution, warm)
        });

        let mut out = Vec::with_capacity(self.tests.len());
        let mut residual_solutions = Vec::with_capacity(self.tests.len());
        for result in results {
            let (evaluation, solution) = result?;
            out.push(evaluation);
            residual_solutions.push(Some(solution));
        }
        previous.statics = statics
            .into_iter()
            .map(|s| Some(s.into_warm_start()))
            .collect();
        previous.residuals = residual_solutions;
        Ok(out)
    }

    /// Pressures and their sensitivities of test `t`: its residual state solved, warm-started from its
    /// own previous solution or else from the static one.
    fn evaluate_test(
        &self,
        t: usize,
        c: &[f64],
        resistance: &[f64],
        static_solution: &Solution,
        previous: Option<&Solution>,
    ) -> TestOutcome {
        let residual_solution = self.solve_warm(
            &self.residual_states[t],
            resistance,
            previous.or(Some(static_solution)),
            Some(static_solution),
        )?;
        let j = self.tests[t].residual_junction;
        let elevation = self.net.junctions[j].elevation_m;
        let evaluation = TestEvaluation {
            static_head_m: static_solution.head_m[j] - elevation,
            residual_head_m: residual_solution.head_m[j] - elevation,
            d_static_d_c: self.group_sensitivity(static_solution, c, j),
            d_residual_d_c: self.group_sensitivity(&residual_solution, c, j),
            valves_static: static_solution.valve_states(self.net),
            valves_residual: residual_solution.valve_states(self.net),
        };
        Ok((evaluation, residual_solution.into_warm_start()))
    }

    /// Solves `state` from `warm`; if that start fails, from `fallback`, and last from cold. A start far
    /// from the answer can stall a status change (a check valve or pump on the edge), which a colder
    /// start does not inherit.
    fn solve_warm(
        &self,
        state: &OperatingState,
        resistance: &[f64],
        warm: Option<&Solution>,
        fallback: Option<&Solution>,
    ) -> Result<Solution, SolveError> {
        let solve = |start| {
            self.solver
                .solve_with_resistances(self.net, state, resistance, start)
        };
        let mut result = solve(warm);
        if result.is_err()
            && let Some(fallback) = fallback
            && !warm.is_some_and(|w| std::ptr::eq(w, fallback))
        {
            result = solve(Some(fallback));
        }
        if result.is_err() && (warm.is_some() || fallback.is_some()) {
            result = solve(None);
        }
        result
    }

    fn group_sensitivity(&self, solution: &Solution, c: &[f64], junction: usize) -> Vec<f64> {
        let per_pipe = solution
            .head_sensitivity_to_c(self.net, c, junction)
            .unwrap_or_else(|| vec![0.0; c.len()]);
        self.parameter_pipes
            .iter()
            .map(|pipes| pipes.iter().map(|&k| per_pipe[k]).sum())
            .collect()
    }
}

/// `task(0)`, ..., `task(count - 1)` shared out over up to `threads` threads, results in order. Items
/// are dealt round-robin so that each thread gets a fair mix of cheap and dear ones (tests near a
/// source solve faster than tests at the far end of a zone).
pub(crate) fn map_over_threads<T: Send>(
    count: usize,
    threads: usize,
    task: impl Fn(usize) -> T + Sync,
) -> Vec<T> {
    let threads = threads.clamp(1, count.max(1));
    let task = &task;
    let share = move |first: usize| -> Vec<(usize, T)> {
        (first..count)
            .step_by(threads)
            .map(|item| (item, task(item)))
            .collect()
    };
    let mut results: Vec<(usize, T)> = if threads == 1 {
        share(0)
    } else {
        std::thread::scope(|scope| {
            let handles: Vec<_> = (0..threads)
                .map(|first| scope.spawn(move || share(first)))
                .collect();
            handles
                .into_iter()
                .flat_map(|h| h.join().unwrap_or_else(|e| std::panic::resume_unwind(e)))
                .collect()
        })
    };
    results.sort_by_key(|(item, _)| *item);
    results.into_iter().map(|(_, result)| result).collect()
}

/// Whitened residuals (measured minus modelled, divided by their standard deviation) of every test, in
/// the order the fit uses them, and the matching Jacobian rows d(residual)/dC.
pub fn residual_rows(
    tests: &[CalibrationTest],
    evaluations: &[TestEvaluation],
    fit: FitTarget,
    gauge_sd_m: f64,
) -> (Vec<f64>, Vec<Vec<f64>>) {
    let mut residuals = Vec::new();
    let mut rows = Vec::new();
    for (test, eval) in tests.iter().zip(evaluations) {
        match fit {
            FitTarget::Pressures => {
                residuals.push((test.static_head_m - eval.static_head_m) / gauge_sd_m);
                rows.push(eval.d_static_d_c.iter().map(|d| -d / gauge_sd_m).collect());
                residuals.push((test.residual_head_m - eval.residual_head_m) / gauge_sd_m);
                rows.push(
                    eval.d_residual_d_c
                        .iter()
                        .map(|d| -d / gauge_sd_m)
                        .collect(),
                );
            }
            FitTarget::Drop => {
                // Two readings of one gauge: the drop's error has sqrt(2) times the reading's spread
                // (independent reading errors assumed).
                let sd = gauge_sd_m * std::f64::consts::SQRT_2;
                let measured = test.static_head_m - test.residual_head_m;
                let modelled = eval.static_head_m - eval.residual_head_m;
                residuals.push((measured - modelled) / sd);
                rows.push(
                    eval.d_static_d_c
                        .iter()
                        .zip(&eval.d_residual_d_c)
                        .map(|(s, r)| -(s - r) / sd)
                        .collect(),
                );
            }
        }
    }
    (residuals, rows)
}
