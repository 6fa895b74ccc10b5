//! The argmin problem: residuals and Jacobian in the bounded parametrisation, with a memo so that the
//! Jacobian call at a point reuses the model solves of the residual call at the same point.
//!
//! Everything else goes the argmin way: progress is an argmin observer ([`Progress`]) called after
//! every iteration, and a failed model solve or a cancel travels as argmin's error (the
//! [`SolveError`] itself, or [`Cancelled`]) and is recovered from it as
//! [`CalibrationError::Solve`] or [`CalibrationError::Cancelled`].

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::mpsc;
use std::sync::{Mutex, PoisonError};

use argmin::core::observers::{Observe, ObserverMode};
use argmin::core::{
    Error as ArgminError, Executor, Jacobian, KV, Operator, State, TerminationReason,
    TerminationStatus,
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

#[derive(Clone)]
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

/// The run was cancelled: carried through argmin as its error.
#[derive(Debug, thiserror::Error)]
#[error("cancelled")]
struct Cancelled;

struct FitProblem<'a> {
    evaluator: Evaluator<'a>,
    tests: &'a [CalibrationTest],
    options: &'a CalibrationOptions,
    bounds: Bounds,
    start_c: Vec<f64>,
    start_u: DVector<f64>,
    /// The model evaluation at the last point asked for (argmin asks for residuals and then the
    /// Jacobian at one point; both take `&self`).
    memo: Mutex<Option<Cached>>,
    cancel: &'a AtomicBool,
}

impl FitProblem<'_> {
    /// Evaluates the model at `u` unless the memo already holds it. Sensitivities are always computed:
    /// the line search's accepted point is where argmin next asks for the Jacobian, and the two extra
    /// triangular solves per test cost far less than solving every test again.
    fn evaluations(&self, u: &DVector<f64>) -> Result<Vec<TestEvaluation>, ArgminError> {
        if self.cancel.load(Ordering::Relaxed) {
            return Err(ArgminError::new(Cancelled));
        }
        let mut memo = self.memo.lock().unwrap_or_else(PoisonError::into_inner);
        if let Some(cached) = memo.as_ref()
            && cached.u == *u
        {
            return Ok(cached.evaluations.clone());
        }
        let evaluations = self
            .evaluator
            .evaluate(&self.bounds.to_c(u))
            .map_err(ArgminError::new)?;
        *memo = Some(Cached {
            u: u.clone(),
            evaluations: evaluations.clone(),
        });
        Ok(evaluations)
    }

    /// Whitened residuals and their Jacobian with respect to C (not u), prior rows included.
    fn rows(&self, u: &DVector<f64>) -> Result<(Vec<f64>, Vec<Vec<f64>>), ArgminError> {
        let evaluations = self.evaluations(u)?;
        let (mut residuals, mut rows) = residual_rows(
            self.tests,
            &evaluations,
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

impl Operator for FitProblem<'_> {
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

impl Jacobian for FitProblem<'_> {
    type Param = DVector<f64>;
    type Jacobian = DMatrix<f64>;

    fn jacobian(&self, u: &Self::Param) -> Result<Self::Jacobian, ArgminError> {
        let (_, rows) = self.rows(u)?;
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
        Ok(jac)
    }
}

/// The argmin observer that reports each iteration: the C of every fitted group at the iterate the
/// iteration ended on, the objective there (half the squared norm of the residual vector argmin's line
/// search minimised, ridge rows included) and the largest C step. Reports go over a channel, as argmin
/// keeps its observers for the whole run.
struct Progress {
    bounds: Bounds,
    names: Vec<String>,
    previous_c: Vec<f64>,
    sender: mpsc::Sender<IterationReport>,
}

impl<I: State<Param = DVector<f64>, Float = f64>> Observe<I> for Progress {
    fn observe_iter(&mut self, state: &I, _kv: &KV) -> Result<(), ArgminError> {
        let Some(u) = state.get_param() else {
            return Ok(());
        };
        let c = self.bounds.to_c(u);
        let step_c = self
            .previous_c
            .iter()
            .zip(&c)
            .map(|(a, b)| (a - b).abs())
            .fold(0.0, f64::max);
        let cost = state.get_cost();
        let report = IterationReport {
            iteration: state.get_iter() + 1,
            objective: 0.5 * cost * cost,
            step_c,
            group_c: self.names.iter().cloned().zip(c.iter().copied()).collect(),
        };
        self.previous_c = c;
        // The receiver outlives the run; a send can only fail once nobody listens.
        let _ = self.sender.send(report);
        Ok(())
    }
}

/// The calibration error an argmin error carries: the model's own solve error, a cancel, or the
/// optimizer's message.
fn recover(error: ArgminError, cancel: &AtomicBool) -> CalibrationError {
    if let Some(solve) = error.downcast_ref::<SolveError>() {
        return CalibrationError::Solve(solve.clone());
    }
    if error.is::<Cancelled>() || cancel.load(Ordering::Relaxed) {
        return CalibrationError::Cancelled;
    }
    CalibrationError::Optimizer(error.to_string())
}

/// Runs Gauss-Newton with line search over the `fitted` candidates; `progress` hears of every
/// iteration as it ends.
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
    let (sender, receiver) = mpsc::channel();
    let observer = Progress {
        bounds: bounds.clone(),
        names,
        previous_c: bounds.to_c(&start_u),
        sender,
    };
    let problem = FitProblem {
        evaluator,
        tests,
        options,
        bounds,
        start_c,
        start_u: start_u.clone(),
        memo: Mutex::new(None),
        cancel,
    };

    let condition =
        ArmijoCondition::new(1e-4).map_err(|e| CalibrationError::Optimizer(e.to_string()))?;
    let line_search = BacktrackingLineSearch::new(condition)
        .rho(0.5)
        .map_err(|e| CalibrationError::Optimizer(e.to_string()))?;
    // argmin's stopping rule is on the change of the cost between iterations (for Gauss-Newton with
    // a line search, the norm of the whitened residuals). 1e-6 is a millionth of one reading's worth
    // of misfit: the C it leaves unsettled is about a thousandth of its standard error.
    let solver = GaussNewtonLS::new(line_search)
        .with_tolerance(OBJECTIVE_CHANGE_TOLERANCE)
        .map_err(|e| CalibrationError::Optimizer(e.to_string()))?;

    // argmin keeps its observers for the whole run ('static), so the run goes on a thread of its own
    // and this one hands each report to `progress` as it comes.
    let mut iterations = Vec::new();
    let result = std::thread::scope(|scope| {
        let run = scope.spawn(move || {
            Executor::new(problem, solver)
                .configure(|state| state.param(start_u).max_iters(options.max_iterations))
                .add_observer(observer, ObserverMode::Always)
                .timer(false)
                .run()
        });
        for report in receiver {
            progress(&report);
            iterations.push(report);
        }
        run.join().unwrap_or_else(|e| std::panic::resume_unwind(e))
    });

    let mut result = result.map_err(|error| recover(error, cancel))?;
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
        iterations,
        converged,
        termination,
    })
}
