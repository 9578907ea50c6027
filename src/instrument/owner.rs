//! Each instrument sits behind one lock; cloneable handles run jobs on it and wait for the answer.
//!
//! This serialises access to the instrument, and lets the synchronous runner thread (and the
//! Rhai engine on it) call async drivers. A job runs on the calling thread, driven by the
//! runtime's handle (the runtime's workers drive sockets and timers): handing each job to a task
//! on a worker and the reply back cost two thread wake-ups per command, more than a loopback
//! round trip itself. Handles must not be used from inside the async runtime: they block.

use super::InstrumentError;
use std::future::Future;
use std::panic::AssertUnwindSafe;
use std::pin::Pin;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use tokio::sync::Mutex;

/// A future borrowed from the instrument for the length of one job.
pub type BoxFuture<'a, R> = Pin<Box<dyn Future<Output = R> + Send + 'a>>;

/// The instrument and whether a job on it has failed beyond recovery.
struct Slot<T: ?Sized> {
    instrument: Mutex<Box<T>>,
    /// Set when a job panicked: the instrument's state is unknown, so it takes no more jobs.
    broken: AtomicBool,
}

/// A handle on an instrument shared by its handles.
pub struct Owned<T: ?Sized + Send + 'static> {
    role: String,
    rt: tokio::runtime::Handle,
    slot: Arc<Slot<T>>,
}

impl<T: ?Sized + Send + 'static> Clone for Owned<T> {
    fn clone(&self) -> Self {
        Owned {
            role: self.role.clone(),
            rt: self.rt.clone(),
            slot: self.slot.clone(),
        }
    }
}

impl<T: ?Sized + Send + 'static> Owned<T> {
    /// Puts the instrument behind its lock, its jobs driven by `rt`, and returns a handle to it.
    /// The instrument is dropped with its last handle.
    pub fn spawn(rt: &tokio::runtime::Handle, role: &str, instrument: Box<T>) -> Self {
        Owned {
            role: role.to_string(),
            rt: rt.clone(),
            slot: Arc::new(Slot {
                instrument: Mutex::new(instrument),
                broken: AtomicBool::new(false),
            }),
        }
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
        match std::panic::catch_unwind(AssertUnwindSafe(|| self.rt.block_on(job))) {
            Ok(answer) => answer,
            Err(_) => {
                self.slot.broken.store(true, Ordering::Release);
                Err(gone())
            }
        }
    }
}
