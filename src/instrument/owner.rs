//! One task owns each instrument; cloneable handles send it jobs and wait for the answer.
//!
//! This serialises access to the instrument without locks, and lets the synchronous runner
//! thread (and the Rhai engine on it) call async drivers. Handles must not be used from
//! inside the async runtime: they block.

use super::InstrumentError;
use std::future::Future;
use std::pin::Pin;
use tokio::sync::{mpsc, oneshot};

/// A future borrowed from the instrument for the length of one job.
pub type BoxFuture<'a, R> = Pin<Box<dyn Future<Output = R> + Send + 'a>>;

type Job<T> = Box<dyn for<'a> FnOnce(&'a mut T) -> BoxFuture<'a, ()> + Send>;

/// A handle on an instrument owned by its own task.
pub struct Owned<T: ?Sized + Send + 'static> {
    role: String,
    tx: mpsc::UnboundedSender<Job<T>>,
}

impl<T: ?Sized + Send + 'static> Clone for Owned<T> {
    fn clone(&self) -> Self {
        Owned {
            role: self.role.clone(),
            tx: self.tx.clone(),
        }
    }
}

impl<T: ?Sized + Send + 'static> Owned<T> {
    /// Moves the instrument into a task on `rt` and returns a handle to it. The task ends when
    /// every handle is dropped.
    pub fn spawn(rt: &tokio::runtime::Handle, role: &str, mut instrument: Box<T>) -> Self {
        let (tx, mut rx) = mpsc::unbounded_channel::<Job<T>>();
        rt.spawn(async move {
            while let Some(job) = rx.recv().await {
                job(&mut instrument).await;
            }
        });
        Owned {
            role: role.to_string(),
            tx,
        }
    }

    /// The bench role this instrument plays.
    pub fn role(&self) -> &str {
        &self.role
    }

    /// Runs `f` on the instrument in its task and blocks until it answers.
    pub fn call<R, F>(&self, f: F) -> Result<R, InstrumentError>
    where
        R: Send + 'static,
        F: for<'a> FnOnce(&'a mut T) -> BoxFuture<'a, Result<R, InstrumentError>> + Send + 'static,
    {
        let (reply_tx, reply_rx) = oneshot::channel();
        let job: Job<T> = Box::new(move |inst: &mut T| {
            Box::pin(async move {
                let _ = reply_tx.send(f(inst).await);
            })
        });
        let gone = || InstrumentError::Gone {
            role: self.role.clone(),
        };
        self.tx.send(job).map_err(|_| gone())?;
        reply_rx.blocking_recv().map_err(|_| gone())?
    }
}
