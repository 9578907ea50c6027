//! The page's event stream (server-sent events): the latest progress, sections and log lines,
//! each sent when it changes.
//!
//! Each viewer holds receivers of the feed's watch channels: it sees the latest value of each
//! whenever it gets to read, so a slow viewer skips snapshots instead of holding anything up,
//! and the publisher never waits for a viewer.

use super::Feed;
use crate::web::Shutdown;
use axum::response::sse::{Event, KeepAlive, Sse};
use futures_util::stream::Stream;
use std::convert::Infallible;
use tokio::sync::watch;

/// What one viewer's stream holds between events.
struct Viewer {
    progress: watch::Receiver<std::sync::Arc<super::Progress>>,
    content: watch::Receiver<std::sync::Arc<super::Content>>,
    log: watch::Receiver<std::sync::Arc<super::LogTail>>,
    shutdown: Shutdown,
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
                Some(json("content", &*c))
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
    // The types sent serialise infallibly (strings, numbers, flags).
    let data = serde_json::to_string(value).unwrap_or_else(|_| "null".into());
    Event::default().event(name).data(data)
}
