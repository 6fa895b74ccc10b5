//! Steady-state hydraulics: the head-loss law, the gradient solver and the loop solver.

pub mod headloss;

pub use headloss::HazenWilliams;
