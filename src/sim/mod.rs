//! The simulated bench: a physical model of the conducted bench and the instruments on it.

pub mod truth;

pub use truth::SimTruth;
