//! Claiming a run directory for this process — a fresh one for `run`, an existing one for
//! `resume` — so that two processes never drive the instruments of one run or interleave its
//! records: each claim holds the directory's lock until it is dropped.

use crate::data::run_dir::{self, CreateError};
use crate::data::run_lock::{RunLock, RunLockError};
use crate::diagnostic::Diagnostic;
use std::path::{Path, PathBuf};

/// Creates and locks a new run directory (`--out`, or `runs/<time>-<name>`).
pub fn fresh(
    out: Option<&Path>,
    name: &str,
    now: time::OffsetDateTime,
) -> Result<(PathBuf, RunLock), Diagnostic> {
    run_dir::create(out, name, now).map_err(|e| match e {
        CreateError::Locked(e) => refused(e),
        e @ CreateError::Io(_) => Diagnostic::plain(e.to_string()),
    })
}

/// Locks the existing run directory `dir`.
pub fn existing(dir: &Path) -> Result<RunLock, Diagnostic> {
    RunLock::acquire(dir).map_err(refused)
}

fn refused(e: RunLockError) -> Diagnostic {
    let hint = match &e {
        RunLockError::Held { .. } => {
            "one process at a time drives a run: wait for the other to end (Ctrl-C stops it \
             cleanly), then `taucal resume` the directory, or give this run another --out"
        }
        RunLockError::Io { .. } => "the run directory must be writable",
    };
    Diagnostic::plain(e.to_string()).with_hint(hint)
}
