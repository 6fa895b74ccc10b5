//! Steady-state hydraulics: the head-loss law, the gradient solver and the loop solver.

pub mod gradient;
pub mod headloss;
pub mod loops;

pub use gradient::{
    GradientSolver, LinkRef, LinkStatus, OperatingState, Solution, SolveError, SolveWarning,
    SolverSettings, ValveState,
};
pub use headloss::HazenWilliams;
