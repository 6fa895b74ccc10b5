//! The argmin problem: residuals and Jacobian in the bounded parametrisation, with a cache so that the
//! Jacobian call at a point reuses the model solves of the residual call at the same point.

use std::cell::RefCell;
use std::sync::atomic::{AtomicBool, Ordering};

use argmin::core::{
    Error as ArgminError, Executor, Jacobian, Operator, State, TerminationReason, TerminationStatus,
};
use argmin::solver::gaussnewton::GaussNewtonLS;
use argmin::solver::linesearch::BacktrackingLineSearch;
use argmin::solver::linesearch::condition::ArmijoCondition;
use nalgebra::{DMatrix, DVector};

use super::evaluate::{Evaluator, TestEvaluation, residual_rows};
use super::{
    CalibrationError, CalibrationOptions, CalibrationTest, GroupCandidate, IterationReport,
};
use crate::hydraulics::SolveError;

/// Weight of the rows that keep the normal equations invertible when a parameter sits far out on its
/// logistic tail (its derivative then vanishes). In whitened units a weight of 1e-4 changes the objective
/// by about 1e-8 per unit of u: invisible next to any real reading.
const RIDGE_WEIGHT: f64 = 1e-4;

/// Change of the objective between iterations below which the fit is converged.
pub const OBJECTIVE_CHANGE_TOLERANCE: f64 = 1e-6;

/// What the optimizer hands back.
pub struct OptimizerOutcome {
    /// C of each fitted group, in the order of `fitted`.
    pub fitted_c: Vec<f64>,
    pub iterations: Vec<IterationReport>,
    pub converged: bool,
    pub termination: String,
}

struct Bounds {
    lo: Vec<f64>,
    hi: Vec<f64>,
}

impl Bounds {
    fn to_c(&self, u: &DVector<f64>) -> Vec<f64> {
        u.iter()
            .enumerate()
            .map(|(i, &u)| self.lo[i] + (self.hi[i] - self.lo[i]) / (1.0 + (-u).exp()))
            .collect()
    }

    fn dc_du(&self, c: &[f64]) -> Vec<f64> {
        c.iter()
            .enumerate()
            .map(|(i, &c)| (c - self.lo[i]) * (self.hi[i] - c) / (self.hi[i] - self.lo[i]))
            .collect()
    }

    fn to_u(&self, c: &[f64]) -> DVector<f64> {
        DVector::from_iterator(
            c.len(),
            c.iter().enumerate().map(|(i, &c)| {
                let span = self.hi[i] - self.lo[i];
                // Keep the start strictly inside the bounds so u is finite.
                let s = ((c - self.lo[i]) / span).clamp(1e-6, 1.0 - 1e-6);
                (s / (1.0 - s)).ln()
            }),
        )
    }
}

struct Cached {
    u: DVector<f64>,
    evaluations: Vec<TestEvaluation>,
}

struct FitProblem<'a, 'p> {
    evaluator: Evaluator<'a>,
    tests: &'a [CalibrationTest],
    options: &'a CalibrationOptions,
    bounds: Bounds,
    start_c: Vec<f64>,
    start_u: DVector<f64>,
    names: Vec<String>,
    cache: RefCell<Option<Cached>>,
    cancel: &'a AtomicBool,
    progress: RefCell<&'p mut dyn FnMut(&IterationReport)>,
    history: RefCell<Vec<IterationReport>>,
    last_solve_error: RefCell<Option<SolveError>>,
}

impl FitProblem<'_, '_> {
    /// Evaluates the model at `u` unless the cache already holds it. Sensitivities are always computed:
    /// the line search's accepted point is where argmin next asks for the Jacobian, and the two extra
    /// triangular solves per test cost far less than solving every test again.
    fn evaluations(&self, u: &DVector<f64>) -> Result<(), ArgminError> {
        if self.cancel.load(Ordering::Relaxed) {
            return Err(ArgminError::msg("cancelled"));
        }
        if let Some(cached) = self.cache.borrow().as_ref()
            && cached.u == *u
        {
            return Ok(());
        }
        let c = self.bounds.to_c(u);
        match self.evaluator.evaluate(&c) {
            Ok(evaluations) => {
                *self.cache.borrow_mut() = Some(Cached {
                    u: u.clone(),
                    evaluations,
                });
                Ok(())
            }
            Err(e) => {
                let message = e.to_string();
                *self.last_solve_error.borrow_mut() = Some(e);
                Err(ArgminError::msg(message))
            }
        }
    }

    /// Whitened residuals and their Jacobian with respect to C (not u), prior rows included.
    fn rows(&self, u: &DVector<f64>) -> Result<(Vec<f64>, Vec<Vec<f64>>), ArgminError> {
        self.evaluations(u)?;
        let cache = self.cache.borrow();
        let Some(cached) = cache.as_ref() else {
            return Err(ArgminError::msg("no model evaluation"));
        };
        let (mut residuals, mut rows) = residual_rows(
            self.tests,
            &cached.evaluations,
            self.options.fit,
            self.options.gauge_sd_m,
        );
        let c = self.bounds.to_c(u);
        let p = c.len();
        if let Some(prior_sd) = self.options.prior_sd_c {
            for i in 0..p {
                residuals.push((c[i] - self.start_c[i]) / prior_sd);
                let mut row = vec![0.0; p];
                row[i] = 1.0 / prior_sd;
                rows.push(row);
            }
        }
        Ok((residuals, rows))
    }
}

impl Operator for FitProblem<'_, '_> {
    type Param = DVector<f64>;
    type Output = DVector<f64>;

    fn apply(&self, u: &Self::Param) -> Result<Self::Output, ArgminError> {
        let (mut residuals, _) = self.rows(u)?;
        for i in 0..u.len() {
            residuals.push(RIDGE_WEIGHT * (u[i] - self.start_u[i]));
        }
        Ok(DVector::from_vec(residuals))
    }
}

impl Jacobian for FitProblem<'_, '_> {
    type Param = DVector<f64>;
    type Jacobian = DMatrix<f64>;

    fn jacobian(&self, u: &Self::Param) -> Result<Self::Jacobian, ArgminError> {
        let (residuals, rows) = self.rows(u)?;
        let c = self.bounds.to_c(u);
        let chain = self.bounds.dc_du(&c);
        let p = u.len();
        let m = rows.len();
        let mut jac = DMatrix::zeros(m + p, p);
        for (i, row) in rows.iter().enumerate() {
            for j in 0..p {
                jac[(i, j)] = row[j] * chain[j];
            }
        }
        for j in 0..p {
            jac[(m + j, j)] = RIDGE_WEIGHT;
        }

        // argmin asks for the Jacobian once per iteration, at the iterate: report progress from here.
        let ridge: f64 = (0..p)
            .map(|i| (RIDGE_WEIGHT * (u[i] - self.start_u[i])).powi(2))
            .sum();
        let objective = 0.5 * (residuals.iter().map(|r| r * r).sum::<f64>() + ridge);
        let mut history = self.history.borrow_mut();
        let step_c = history.last().map_or(0.0, |prev| {
            prev.group_c
                .iter()
                .zip(&c)
                .map(|((_, a), b)| (a - b).abs())
                .fold(0.0, f64::max)
        });
        let report = IterationReport {
            iteration: history.len() as u64,
            objective,
            step_c,
            group_c: self.names.iter().cloned().zip(c.iter().copied()).collect(),
        };
        (self.progress.borrow_mut())(&report);
        history.push(report);
        Ok(jac)
    }
}

/// Runs Gauss-Newton with line search over the `fitted` candidates.
pub fn run(
    screening: &Evaluator<'_>,
    options: &CalibrationOptions,
    candidates: &[GroupCandidate],
    fitted: &[usize],
    progress: &mut dyn FnMut(&IterationReport),
    cancel: &AtomicBool,
) -> Result<OptimizerOutcome, CalibrationError> {
    let parameter_pipes = fitted
        .iter()
        .map(|&g| candidates[g].pipes.clone())
        .collect();
    let (net, tests) = (screening.net, screening.tests);
    let evaluator = screening.reparametrised(parameter_pipes);
    let bounds = Bounds {
        lo: fitted.iter().map(|&g| candidates[g].min_c).collect(),
        hi: fitted.iter().map(|&g| candidates[g].max_c).collect(),
    };
    let start_c: Vec<f64> = fitted.iter().map(|&g| candidates[g].start_c).collect();
    let start_u = bounds.to_u(&start_c);
    let names = fitted
        .iter()
        .map(|&g| net.groups[candidates[g].group].name.clone())
        .collect();
    let problem = FitProblem {
        evaluator,
        tests,
        options,
        bounds,
        start_c,
        start_u: start_u.clone(),
        names,
        cache: RefCell::new(None),
        cancel,
        progress: RefCell::new(progress),
        history: RefCell::new(Vec::new()),
        last_solve_error: RefCell::new(None),
    };

    let condition =
        ArmijoCondition::new(1e-4).map_err(|e| CalibrationError::Optimizer(e.to_string()))?;
    let line_search = BacktrackingLineSearch::new(condition)
        .rho(0.5)
        .map_err(|e| CalibrationError::Optimizer(e.to_string()))?;
    // argmin's stopping rule is on the change of the objective (half the whitened sum of squares) between
    // iterations. 1e-6 is a millionth of one reading's worth of misfit: the C it leaves unsettled is about
    // a thousandth of its standard error.
    let solver = GaussNewtonLS::new(line_search)
        .with_tolerance(OBJECTIVE_CHANGE_TOLERANCE)
        .map_err(|e| CalibrationError::Optimizer(e.to_string()))?;

    let result = Executor::new(problem, solver)
        .configure(|state| state.param(start_u).max_iters(options.max_iterations))
        .timer(false)
        .run();

    match result {
        Ok(mut result) => {
            let state = result.state();
            let best = state
                .get_best_param()
                .or_else(|| state.get_param())
                .cloned();
            let status = state.get_termination_status().clone();
            let Some(problem) = result.problem.take_problem() else {
                return Err(CalibrationError::Optimizer(
                    "the optimizer lost its problem".into(),
                ));
            };
            let Some(best) = best else {
                return Err(CalibrationError::Optimizer(
                    "the optimizer returned no parameters".into(),
                ));
            };
            let (converged, termination) = match status {
                TerminationStatus::Terminated(TerminationReason::SolverConverged) => {
                    (true, "the residual norm stopped changing".to_string())
                }
                TerminationStatus::Terminated(TerminationReason::MaxItersReached) => (
                    false,
                    format!(
                        "NOT converged: stopped at the iteration limit ({})",
                        options.max_iterations
                    ),
                ),
                TerminationStatus::Terminated(reason) => {
                    (false, format!("NOT converged: {}", reason.text()))
                }
                TerminationStatus::NotTerminated => (
                    false,
                    "NOT converged: the optimizer stopped early".to_string(),
                ),
            };
            Ok(OptimizerOutcome {
                fitted_c: problem.bounds.to_c(&best),
                iterations: problem.history.into_inner(),
                converged,
                termination,
            })
        }
        Err(error) => {
            if cancel.load(Ordering::Relaxed) {
                return Err(CalibrationError::Cancelled);
            }
            Err(CalibrationError::Optimizer(error.to_string()))
        }
    }
}
