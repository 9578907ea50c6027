//! The fitter: pure functions from recorded exchanges to a calibration table.

pub mod deembed;
pub mod rtt;
pub mod stats;
