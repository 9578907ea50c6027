//! The run directory's lock: one taucal process at a time drives a run and writes its files.
//! An advisory exclusive lock (`flock`) on `taucal.lock` in the directory, held for as long as
//! the holder lives; the kernel drops it when the process ends however it ends (SIGKILL, power
//! loss), so a crash never leaves a stale lock behind.

use nix::errno::Errno;
use nix::fcntl::{Flock, FlockArg};
use std::fs::{File, OpenOptions};
use std::path::{Path, PathBuf};

/// The lock file's name in a run directory.
pub const LOCK_FILE: &str = "taucal.lock";

/// A held run-directory lock; dropping it releases the directory.
#[derive(Debug)]
pub struct RunLock {
    _held: Flock<File>,
}

/// Why a run directory could not be locked.
#[derive(Debug, thiserror::Error)]
pub enum RunLockError {
    /// Another process holds the directory.
    #[error("{} is in use by another taucal process (a `run` or `resume` on it is still going)", dir.display())]
    Held {
        /// The run directory.
        dir: PathBuf,
    },
    /// The lock file could not be opened or locked.
    #[error("cannot lock {}: {source}", path.display())]
    Io {
        /// The lock file.
        path: PathBuf,
        /// Cause.
        source: std::io::Error,
    },
}

impl RunLock {
    /// Locks `dir` (which must exist) without waiting: a directory another process holds is
    /// refused at once rather than waited for, since that process may run for hours.
    pub fn acquire(dir: &Path) -> Result<RunLock, RunLockError> {
        let path = dir.join(LOCK_FILE);
        let file = OpenOptions::new()
            .create(true)
            .truncate(false)
            .write(true)
            .open(&path)
            .map_err(|source| RunLockError::Io {
                path: path.clone(),
                source,
            })?;
        match Flock::lock(file, FlockArg::LockExclusiveNonblock) {
            Ok(held) => Ok(RunLock { _held: held }),
            Err((_, Errno::EWOULDBLOCK)) => Err(RunLockError::Held {
                dir: dir.to_path_buf(),
            }),
            Err((_, errno)) => Err(RunLockError::Io {
                path,
                source: errno.into(),
            }),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_held_directory_is_refused_until_released() {
        // flock locks belong to an open file description, so a second open in the same process
        // stands for a second process.
        let dir = tempfile::tempdir().expect("tempdir");
        let first = RunLock::acquire(dir.path()).expect("first lock");
        let second = RunLock::acquire(dir.path());
        assert!(
            matches!(&second, Err(RunLockError::Held { dir: d }) if d == dir.path()),
            "{second:?}"
        );
        drop(first);
        assert!(RunLock::acquire(dir.path()).is_ok());
    }
}
