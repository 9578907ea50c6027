//! The page's event stream (server-sent events): the latest progress, sections and log lines,
//! each sent when it changes.
//!
//! Each viewer holds receivers of the feed's watch channels: it sees the latest value of each
//! whenever it gets to read, so a slow viewer skips snapshots instead of holding anything up,
//! and the publisher never waits for a viewer.

use super::{Content, Feed};
use crate::web::Shutdown;
use axum::response::sse::{Event, KeepAlive, Sse};
use futures_util::stream::Stream;
use std::convert::Infallible;
use std::sync::{Arc, Mutex, MutexGuard, PoisonError};
use std::time::{Duration, Instant};
use tokio::sync::watch;

/// What one viewer's stream holds between events.
struct Viewer {
    progress: watch::Receiver<Arc<super::Progress>>,
    content: watch::Receiver<Arc<Content>>,
    log: watch::Receiver<Arc<super::LogTail>>,
    content_json: SharedJson,
    shutdown: Shutdown,
    /// When the next progress event may be sent.
    progress_at: Instant,
    /// When the next log event may be sent.
    log_at: Instant,
}

/// The latest sections' JSON, made once and shared by every viewer: the sections (table and
/// plots) are the bulk of what is sent, so a viewer costs a copy of them, not a serialisation.
#[derive(Clone, Default)]
pub(super) struct SharedJson(Arc<Mutex<Made>>);

/// The last snapshot made JSON, held so that its address cannot be taken by a new one.
type Made = Option<(Arc<Content>, Arc<str>)>;

impl SharedJson {
    /// The JSON of snapshot `c`: the one made already when it is the same snapshot.
    fn of(&self, c: &Arc<Content>) -> Arc<str> {
        if let Some((held, json)) = &*self.lock() {
            if Arc::ptr_eq(held, c) {
                return json.clone();
            }
        }
        // Made outside the lock: two viewers may both make a new snapshot's, never a stale one.
        let json: Arc<str> = to_json(&**c).into();
        *self.lock() = Some((c.clone(), json.clone()));
        json
    }

    fn lock(&self) -> MutexGuard<'_, Made> {
        // What it guards is replaced whole: a panic elsewhere cannot leave it half written.
        self.0.lock().unwrap_or_else(PoisonError::into_inner)
    }
}

/// A viewer's event stream: everything current at once, then each change, until the server
/// stops.
pub fn stream(
    feed: &Feed,
    shutdown: Shutdown,
) -> Sse<impl Stream<Item = Result<Event, Infallible>>> {
    let mut viewer = Viewer {
        progress: feed.progress.subscribe(),
        content: feed.content.subscribe(),
        log: feed.log.subscribe(),
        content_json: feed.content_json.clone(),
        shutdown,
        progress_at: Instant::now(),
        log_at: Instant::now(),
    };
    viewer.progress.mark_changed();
    viewer.content.mark_changed();
    viewer.log.mark_changed();
    let events = futures_util::stream::unfold(viewer, |mut v| async move {
        let event = v.next().await?;
        Some((Ok(event), v))
    });
    Sse::new(events).keep_alive(KeepAlive::default())
}

/// The least time between two events of a kind to one viewer. Ten a second is as fast as a
/// page can be read; a faster run's progress and log lines are coalesced (each viewer still
/// gets the latest), so a viewer costs the server per tenth of a second, not per exchange.
/// The sections are paced by the builder already.
const PACE: Duration = Duration::from_millis(100);

impl Viewer {
    /// The next event, or `None` once the server stops. What changed is sent before the stop
    /// is heard (paced or not), so the last sections and figures reach every viewer before
    /// its stream ends.
    async fn next(&mut self) -> Option<Event> {
        loop {
            let now = Instant::now();
            let (progress_due, log_due) = (self.progress_at <= now, self.log_at <= now);
            // The earliest a kind held back by its pace becomes due.
            let wake = [(progress_due, self.progress_at), (log_due, self.log_at)]
                .into_iter()
                .filter(|&(due, _)| !due)
                .map(|(_, at)| at)
                .min()
                .unwrap_or(now);
            tokio::select! {
                biased;
                Ok(()) = self.content.changed() => {
                    let c = self.content.borrow_and_update().clone();
                    return Some(Event::default().event("content").data(&*self.content_json.of(&c)));
                }
                Ok(()) = self.progress.changed(), if progress_due => return Some(self.progress_event()),
                Ok(()) = self.log.changed(), if log_due => return Some(self.log_event()),
                _ = self.shutdown.wait() => {
                    return if self.progress.has_changed().unwrap_or(false) {
                        Some(self.progress_event())
                    } else if self.log.has_changed().unwrap_or(false) {
                        Some(self.log_event())
                    } else {
                        None
                    };
                }
                // A kind held back becomes due: look again.
                () = tokio::time::sleep_until(wake.into()), if !(progress_due && log_due) => {}
            }
        }
    }

    fn progress_event(&mut self) -> Event {
        self.progress_at = Instant::now() + PACE;
        let p = self.progress.borrow_and_update().clone();
        json("progress", &*p)
    }

    fn log_event(&mut self) -> Event {
        self.log_at = Instant::now() + PACE;
        let l = self.log.borrow_and_update().clone();
        json("log", &*l)
    }
}

fn json<T: serde::Serialize>(name: &str, value: &T) -> Event {
    Event::default().event(name).data(to_json(value))
}

fn to_json<T: serde::Serialize>(value: &T) -> String {
    // The types sent serialise infallibly (strings, numbers, flags).
    serde_json::to_string(value).unwrap_or_else(|_| "null".into())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn snapshot(rows: u64) -> Arc<Content> {
        Arc::new(Content {
            title: "t".into(),
            html: format!("<p>{rows} rows</p>"),
            rows,
            ..Content::default()
        })
    }

    #[test]
    fn a_snapshot_is_made_json_once_and_a_new_one_again() {
        let shared = SharedJson::default();
        let viewer = shared.clone();
        let (first, second) = (snapshot(1), snapshot(2));
        let a = shared.of(&first);
        // Another viewer of the same snapshot gets the very string made for the first.
        assert!(Arc::ptr_eq(&a, &viewer.of(&first)));
        assert_eq!(&*a, to_json(&*first));
        // A new snapshot, even one equal in value, is made afresh and is its own.
        let b = viewer.of(&second);
        assert_eq!(&*b, to_json(&*second));
        let again = snapshot(1);
        let c = shared.of(&again);
        assert!(!Arc::ptr_eq(&a, &c));
        assert_eq!(&*c, &*a);
    }
}
