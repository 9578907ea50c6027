//! The run directory: `runs/<UTC time>-<recipe name>/` and the names of the files in it.

use super::run_lock::{RunLock, RunLockError};
use std::io;
use std::path::{Path, PathBuf};
use time::OffsetDateTime;

/// File names inside a run directory.
pub mod files {
    /// Run description and outcome.
    pub const MANIFEST: &str = "manifest.toml";
    /// Every exchange recorded.
    pub const EXCHANGES: &str = "exchanges.csv";
    /// The calibration table.
    pub const CALTABLE: &str = "caltable.csv";
    /// Each cell's uncertainty budget, component by component.
    pub const BUDGET: &str = "budget.csv";
    /// Gain-state plateaus found by gain-map stages.
    pub const GAINMAP: &str = "gainmap.csv";
    /// Temperature coefficients of K, when the run spans temperatures.
    pub const DRIFT: &str = "drift.csv";
    /// Verification against receive level.
    pub const VERIFY: &str = "verify.csv";
    /// Checkpoints at point boundaries, for `taucal resume`.
    pub const JOURNAL: &str = "journal.log";
    /// Human-readable log.
    pub const LOG: &str = "run.log";
    /// The same log as JSON lines, for tools.
    pub const JSON_LOG: &str = "run.jsonl";
    /// The run report.
    pub const REPORT: &str = "report.html";
    /// Held by the process driving the run (see `run_lock`).
    pub const LOCK: &str = super::super::run_lock::LOCK_FILE;
}

/// Why a run directory could not be made.
#[derive(Debug, thiserror::Error)]
pub enum CreateError {
    /// The directory could not be created, or already holds a run.
    #[error("cannot create the run directory: {0}")]
    Io(#[from] io::Error),
    /// Another process holds it.
    #[error(transparent)]
    Locked(#[from] RunLockError),
}

/// Creates a fresh run directory and locks it: `out` itself when given (it must not hold a
/// manifest yet, which is checked under the lock, so two runs given the same `--out` cannot both
/// start), else `runs/<UTC time>-<name>` with a numeric suffix if that exists.
pub fn create(
    out: Option<&Path>,
    name: &str,
    now: OffsetDateTime,
) -> Result<(PathBuf, RunLock), CreateError> {
    if let Some(dir) = out {
        std::fs::create_dir_all(dir)?;
        let lock = RunLock::acquire(dir)?;
        if dir.join(files::MANIFEST).exists() {
            return Err(io::Error::new(
                io::ErrorKind::AlreadyExists,
                format!(
                    "{} already holds a run (manifest.toml); choose another --out",
                    dir.display()
                ),
            )
            .into());
        }
        return Ok((dir.to_path_buf(), lock));
    }
    let stamp = format!(
        "{:04}{:02}{:02}T{:02}{:02}{:02}Z",
        now.year(),
        u8::from(now.month()),
        now.day(),
        now.hour(),
        now.minute(),
        now.second()
    );
    let base = Path::new("runs").join(format!("{stamp}-{name}"));
    std::fs::create_dir_all("runs")?;
    // `create_dir` (not `_all`) fails on a directory that exists, so two runs started in the same
    // second each get their own.
    let mut n = 1;
    let mut dir = base.clone();
    loop {
        match std::fs::create_dir(&dir) {
            Ok(()) => break,
            Err(e) if e.kind() == io::ErrorKind::AlreadyExists => {
                n += 1;
                dir = PathBuf::from(format!("{}-{n}", base.display()));
            }
            Err(e) => return Err(e.into()),
        }
    }
    let lock = RunLock::acquire(&dir)?;
    Ok((dir, lock))
}

/// RFC 3339 text of a UTC time.
pub fn rfc3339(t: OffsetDateTime) -> String {
    t.format(&time::format_description::well_known::Rfc3339)
        .unwrap_or_else(|_| t.unix_timestamp().to_string())
}
