//! The simulated bench: a physical model of the conducted bench and the instruments on it.
//!
//! [`SimBench`] (in `model`) is the whole bench, built from the bench file's `[path]` and
//! `[sim]` ([`SimTruth`]); it is assembled from one concept per file: the AGC gain-state machine
//! (`agc`), 48-bit picosecond counters on offset clocks (`counter`) and time-of-arrival noise,
//! late paths and frame loss (`timing`), and what the DUT's firmware makes of the exchanges
//! before it reports them (`device_report`). The model is pure and synchronous — bench time comes in
//! as an argument, randomness only from its seed — so it must never read wall time or do I/O;
//! instrument front ends and virtual clocks wrap it elsewhere.

pub mod agc;
pub mod chamber;
pub mod counter;
pub mod device_report;
pub mod faults;
pub mod front;
pub mod model;
pub mod population;
pub mod serve;
pub mod shared_reference;
pub mod timing;
pub mod truth;

pub use agc::Agc;
pub use counter::Counter48;
pub use device_report::DeviceReport;
pub use model::{BurstOutcome, BurstRequest, SimBench};
pub use timing::Receiver;
pub use truth::{DutReports, SimTruth};
