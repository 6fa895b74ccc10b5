//! Steady-state hydraulics: the head-loss law, the gradient solver and the loop solver.

pub mod headloss;
pub mod loops;

pub use headloss::HazenWilliams;
