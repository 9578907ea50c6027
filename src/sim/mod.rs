//! The simulated bench: a physical model of the conducted bench and the instruments on it.

pub mod agc;
pub mod counter;
pub mod model;
pub mod timing;
pub mod truth;

pub use agc::Agc;
pub use counter::Counter48;
pub use model::{BurstOutcome, BurstRequest, SimBench};
pub use timing::Receiver;
pub use truth::SimTruth;
