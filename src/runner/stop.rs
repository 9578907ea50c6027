//! The run's stop request: set by SIGINT or SIGTERM, read by the runner between exchanges, by
//! waits, and by the script engine, so a run ends its current burst, puts every instrument in
//! its safe state and keeps its data.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

/// A shared "please stop" flag.
#[derive(Debug, Clone, Default)]
pub struct StopFlag(Arc<AtomicBool>);

impl StopFlag {
    /// Asks the run to stop.
    pub fn request(&self) {
        self.0.store(true, Ordering::SeqCst);
    }

    /// Whether a stop was asked for.
    pub fn requested(&self) -> bool {
        self.0.load(Ordering::SeqCst)
    }

    /// Sets the flag on SIGINT or SIGTERM, from a task on `rt`.
    pub fn listen(&self, rt: &tokio::runtime::Handle) {
        let flag = self.clone();
        rt.spawn(async move {
            #[cfg(unix)]
            {
                use tokio::signal::unix::{signal, SignalKind};
                let (Ok(mut int), Ok(mut term)) = (
                    signal(SignalKind::interrupt()),
                    signal(SignalKind::terminate()),
                ) else {
                    tracing::warn!(
                        "cannot listen for SIGINT/SIGTERM: stop the run with SIGKILL and resume it"
                    );
                    return;
                };
                tokio::select! {
                    _ = int.recv() => {}
                    _ = term.recv() => {}
                }
            }
            #[cfg(not(unix))]
            {
                if tokio::signal::ctrl_c().await.is_err() {
                    return;
                }
            }
            tracing::warn!("stop requested: finishing the burst under way, then safe state");
            flag.request();
        });
    }
}
