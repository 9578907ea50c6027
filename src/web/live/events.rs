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
use tokio::sync::watch;

/// What one viewer's stream holds between events.
struct Viewer {
    progress: watch::Receiver<Arc<super::Progress>>,
    content: watch::Receiver<Arc<Content>>,
    log: watch::Receiver<Arc<super::LogTail>>,
    content_json: SharedJson,
    shutdown: Shutdown,
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

impl Viewer {
    /// The next event, or `None` once the server stops. What changed is sent before the stop
    /// is heard, so the last sections reach every viewer before its stream ends.
    async fn next(&mut self) -> Option<Event> {
        tokio::select! {
            biased;
            Ok(()) = self.content.changed() => {
                let c = self.content.borrow_and_update().clone();
                Some(Event::default().event("content").data(&*self.content_json.of(&c)))
            }
            Ok(()) = self.progress.changed() => {
                let p = self.progress.borrow_and_update().clone();
                Some(json("progress", &*p))
            }
            Ok(()) = self.log.changed() => {
                let l = self.log.borrow_and_update().clone();
                Some(json("log", &*l))
            }
            _ = self.shutdown.wait() => None,
        }
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
