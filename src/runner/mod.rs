//! The runner: executes a plan's stages against instrument handles, through one clock, into a
//! record sink.

pub mod clock;

pub use clock::{BenchClock, ClockMode};
