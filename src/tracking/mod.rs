//! Deep-space tracking: trajectories, light-time solutions and observables.

pub mod observables;
pub mod propagate;
pub mod troposphere;
