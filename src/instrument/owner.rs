//! Each instrument sits behind one lock; cloneable handles run jobs on it and wait for the answer.
//!
//! This serialises access to the instrument, and lets the synchronous runner thread (and the
//! Rhai engine on it) call async drivers. A job runs on the calling thread, on a single-threaded
//! runtime of the instrument's own that drives its sockets and timers there too: handing each
//! job to a task on a worker and the reply back cost two thread wake-ups per command, more than
//! a loopback round trip itself, and a shared runtime whose workers watch the sockets still
//! cost one. Handles must not be used from inside an async runtime: they block.

use super::InstrumentError;
use std::future::Future;
use std::panic::AssertUnwindSafe;
use std::pin::Pin;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use tokio::sync::Mutex;

/// A future borrowed from the instrument for the length of one job.
pub type BoxFuture<'a, R> = Pin<Box<dyn Future<Output = R> + Send + 'a>>;

/// The instrument, the runtime its jobs run on, and whether a job has failed beyond recovery.
/// Fields drop in order: the instrument's sockets leave a runtime that is still there.
struct Slot<T: ?Sized> {
    instrument: Mutex<Box<T>>,
    /// Set when a job panicked: the instrument's state is unknown, so it takes no more jobs.
    broken: AtomicBool,
    runtime: OwnRuntime,
}

/// An instrument's runtime, shut down without waiting when the last handle goes (a runtime
/// dropped the ordinary way blocks, which is refused inside another runtime).
struct OwnRuntime(Option<tokio::runtime::Runtime>);

impl Drop for OwnRuntime {
    fn drop(&mut self) {
        if let Some(runtime) = self.0.take() {
            runtime.shutdown_background();
        }
    }
}

/// A handle on an instrument shared by its handles.
pub struct Owned<T: ?Sized + Send + 'static> {
    role: String,
    slot: Arc<Slot<T>>,
}

impl<T: ?Sized + Send + 'static> Clone for Owned<T> {
    fn clone(&self) -> Self {
        Owned {
            role: self.role.clone(),
            slot: self.slot.clone(),
        }
    }
}

impl<T: ?Sized + Send + 'static> Owned<T> {
    /// Puts the instrument behind its lock, on a runtime of its own, and returns a handle to
    /// it. The instrument is dropped with its last handle.
    pub fn spawn(role: &str, instrument: Box<T>) -> std::io::Result<Self> {
        let runtime = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()?;
        Ok(Owned {
            role: role.to_string(),
            slot: Arc::new(Slot {
                instrument: Mutex::new(instrument),
                broken: AtomicBool::new(false),
                runtime: OwnRuntime(Some(runtime)),
            }),
        })
    }

    /// The bench role this instrument plays.
    pub fn role(&self) -> &str {
        &self.role
    }

    /// Runs `f` on the instrument and blocks until it answers. A job that panics leaves the
    /// instrument gone: this and every later call fail with [`InstrumentError::Gone`].
    pub fn call<R, F>(&self, f: F) -> Result<R, InstrumentError>
    where
        R: Send + 'static,
        F: for<'a> FnOnce(&'a mut T) -> BoxFuture<'a, Result<R, InstrumentError>> + Send + 'static,
    {
        let gone = || InstrumentError::Gone {
            role: self.role.clone(),
        };
        if self.slot.broken.load(Ordering::Acquire) {
            return Err(gone());
        }
        let job = async {
            let mut instrument = self.slot.instrument.lock().await;
            f(&mut **instrument).await
        };
        let Some(runtime) = &self.slot.runtime.0 else {
            return Err(gone());
        };
        match std::panic::catch_unwind(AssertUnwindSafe(|| runtime.block_on(job))) {
            Ok(answer) => answer,
            Err(_) => {
                self.slot.broken.store(true, Ordering::Release);
                Err(gone())
            }
        }
    }
}
