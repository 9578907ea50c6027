//! Instrument failures, as the runner sees them.

use thiserror::Error;

/// What went wrong talking to an instrument.
#[derive(Debug, Clone, Error, PartialEq)]
pub enum InstrumentError {
    /// The instrument refused or could not carry out a request.
    #[error("{role}: {message}")]
    Failed {
        /// Bench role (`attenuator`, `dut`).
        role: String,
        /// The instrument's or driver's own words.
        message: String,
    },
    /// A request refused as it stands, by the instrument (a SCPI error) or by its driver file's
    /// limits before anything was sent: asking again would be refused again, so it is not
    /// retried.
    #[error("{role}: {message}")]
    Refused {
        /// Bench role.
        role: String,
        /// The instrument's or driver's own words.
        message: String,
    },
    /// A passing fault: a reply timed out, came garbled, or the connection dropped. Worth a
    /// retry after reconnecting.
    #[error("{role}: {message}")]
    Transient {
        /// Bench role.
        role: String,
        /// What happened.
        message: String,
    },
    /// The device restarted and lost its configuration: it must be initialised again.
    #[error("{role}: the device restarted")]
    Restarted {
        /// Bench role.
        role: String,
    },
    /// The task owning the instrument is gone (it failed earlier or the run is ending).
    #[error("{role}: the instrument's connection is closed")]
    Gone {
        /// Bench role.
        role: String,
    },
}
