//! The simulated bench: a physical model of the conducted bench and the instruments on it.

pub mod counter;
pub mod truth;

pub use counter::Counter48;
pub use truth::SimTruth;
