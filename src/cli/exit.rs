//! Exit statuses (a contract): 0 completed and every limit met; 1 completed but a limit failed;
//! 2 bad input or usage, nothing run; 3 run stopped, data kept.

use std::process::ExitCode;

/// Why taucal exits.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Exit {
    /// Completed, every acceptance limit met.
    Ok,
    /// Completed, an acceptance limit failed.
    LimitFailed,
    /// Bad input or usage; nothing was run.
    BadInput,
    /// The run stopped early; its data are kept.
    Stopped,
}

impl From<Exit> for ExitCode {
    fn from(e: Exit) -> ExitCode {
        ExitCode::from(match e {
            Exit::Ok => 0,
            Exit::LimitFailed => 1,
            Exit::BadInput => 2,
            Exit::Stopped => 3,
        })
    }
}
