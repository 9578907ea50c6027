//! Why a run stopped.

use crate::diagnostic::Diagnostic;
use crate::instrument::InstrumentError;
use thiserror::Error;

/// A failure during a run. Data recorded before it are kept.
#[derive(Debug, Error)]
pub enum RunError {
    /// An instrument failed.
    #[error(transparent)]
    Instrument(#[from] InstrumentError),
    /// A run file could not be written.
    #[error("cannot write {path}: {source}")]
    Io {
        /// The file.
        path: String,
        /// Cause.
        source: std::io::Error,
    },
    /// A step was refused because it would break a bench limit (receiver protection).
    #[error("refused: {message}")]
    Refused {
        /// What was asked and why it is refused.
        message: String,
        /// What to do instead.
        hint: String,
    },
    /// After its safe state the attenuator reads a setting that exposes a receiver.
    #[error("receivers exposed: {message}")]
    Exposed {
        /// What the attenuator reads and what that puts into which receiver.
        message: String,
        /// What to do.
        hint: String,
    },
    /// SIGINT or SIGTERM asked the run to stop.
    #[error("stopped on request (SIGINT or SIGTERM)")]
    Interrupted,
    /// A resumed simulated run no longer reproduces what the interrupted one recorded.
    #[error("resume diverged at exchange {row}: the bench, seed or recipe behave differently than when the run began")]
    Diverged {
        /// 1-based exchange number.
        row: u64,
    },
    /// The device changed how it reports (its form, or the K it removes from ranges).
    #[error("device reports changed: {0}")]
    ReportChanged(crate::runner::report_watch::ReportChange),
    /// The device reports ranges, and neither it, its driver nor the bench says what K it
    /// removed from them, so they cannot give the DUT's K.
    #[error(
        "the device reports ranges but not the K it removed from them; declare it as \
         `applied_k_ps` under `[dut]` in the bench file (the device's factory K, from its maker), \
         or use a driver whose device reports it"
    )]
    NoAppliedK,
    /// A script failed; the diagnostic points at its line.
    #[error("{0}")]
    Script(Box<Diagnostic>),
}

impl RunError {
    /// A run file at `path` that could not be written.
    pub fn io(path: &std::path::Path, source: std::io::Error) -> RunError {
        RunError::Io {
            path: path.display().to_string(),
            source,
        }
    }
}
