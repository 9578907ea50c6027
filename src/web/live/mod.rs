//! The live run page: a run's progress, its table so far with intervals, its plots and its
//! log, served while it runs (`taucal run --watch`, `taucal resume --watch`) or followed from
//! its files (`taucal watch RUN_DIR`), updated as bursts land; once the run has ended, the page
//! is its report.
//!
//! Data flows one way: the runner (through [`LiveObserver`]) and the builder thread (following
//! the run's files) publish snapshots into the [`Feed`]'s watch channels; viewers read the
//! latest snapshot when they can. Publishing is a swap that never waits, so no viewer holds the
//! run up; the sections, the bulk of what is sent, are made JSON once for all viewers
//! (`benches/watch.rs` measures what viewers cost). Read-only: GET only, and
//! nothing here writes to the run directory.

mod builder;
pub mod content;
mod events;
pub mod follow;
mod page;
pub mod progress;

pub use builder::ProgressFrom;
pub use content::Content;
pub use progress::{Both, LiveObserver, Progress};

use super::{Served, Shutdown, WebError};
use crate::bench::Bench;
use crate::runner::estimate::Estimate;
use axum::extract::State;
use axum::routing::get;
use axum::Router;
use serde::Serialize;
use std::net::TcpListener;
use std::path::{Path, PathBuf};
use std::sync::mpsc;
use std::sync::Arc;
use tokio::sync::watch;

/// What the plan tells the page: the estimate, the stages in order, which of them verify.
#[derive(Debug, Clone, Default)]
pub struct PlanFacts {
    /// The plan's estimate of the bench time.
    pub estimate: Option<Estimate>,
    /// Stage names, in order.
    pub stages: Vec<String>,
    /// The verification stages' names (their exchanges check the table, not fit it).
    pub verify_stages: Vec<String>,
}

impl PlanFacts {
    /// The facts of `plan` on `bench`.
    pub fn of(plan: &crate::recipe::Plan, bench: &Bench) -> PlanFacts {
        PlanFacts {
            estimate: Some(crate::runner::estimate::estimate(plan, bench)),
            stages: plan.stages.iter().map(|s| s.name().to_string()).collect(),
            verify_stages: plan
                .stages
                .iter()
                .filter(|s| matches!(s, crate::recipe::Stage::Verify(_)))
                .map(|s| s.name().to_string())
                .collect(),
        }
    }
}

/// The log's last lines, as sent to viewers.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct LogTail {
    /// Oldest first.
    pub lines: Vec<String>,
}

/// The latest of everything the page shows, one watch channel each.
#[derive(Clone)]
pub struct Feed {
    /// The status strip.
    pub progress: Arc<watch::Sender<Arc<Progress>>>,
    /// The sections.
    pub content: Arc<watch::Sender<Arc<Content>>>,
    /// The log's last lines.
    pub log: Arc<watch::Sender<Arc<LogTail>>>,
    /// The latest sections as JSON, shared by the viewers.
    content_json: events::SharedJson,
}

impl Feed {
    /// A feed for a run not yet started, with the plan's estimate where known.
    pub fn new(estimate: Option<&Estimate>) -> Feed {
        let waiting = Content {
            title: "a run".into(),
            sub: String::new(),
            html: "<section class=\"empty\"><h2>Calibration table so far</h2><p>Waiting for \
                   the run's first exchanges.</p></section>\n"
                .into(),
            ended: false,
            rows: 0,
        };
        Feed {
            progress: Arc::new(watch::channel(Arc::new(Progress::waiting(estimate))).0),
            content: Arc::new(watch::channel(Arc::new(waiting)).0),
            log: Arc::new(watch::channel(Arc::new(LogTail::default())).0),
            content_json: events::SharedJson::default(),
        }
    }
}

#[derive(Clone)]
struct AppState {
    feed: Feed,
    shutdown: Shutdown,
}

/// The page's routes: `/` (the page as it stands) and `/events` (its updates).
pub fn router(feed: Feed, shutdown: Shutdown) -> Router {
    Router::new()
        .route("/", get(page_now))
        .route("/events", get(events_now))
        .with_state(AppState { feed, shutdown })
}

async fn page_now(State(s): State<AppState>) -> axum::response::Response {
    let progress = s.feed.progress.borrow().clone();
    let content = s.feed.content.borrow().clone();
    let log = s.feed.log.borrow().clone();
    super::html(page::render(&progress, &content, &log))
}

async fn events_now(State(s): State<AppState>) -> axum::response::Response {
    use axum::response::IntoResponse;
    events::stream(&s.feed, s.shutdown.clone()).into_response()
}

/// A live page being served, with the thread that keeps it current.
pub struct LiveServer {
    served: Served,
    feed: Feed,
    commands: mpsc::Sender<builder::Command>,
    builder: Option<std::thread::JoinHandle<()>>,
}

impl LiveServer {
    /// Serves the page on `listener` (from [`super::bind`]) for a run on `bench`, following
    /// `dir` from the start where given (else once told by [`follow`](Self::follow)).
    pub fn start(
        listener: TcpListener,
        bench: Arc<Bench>,
        plan: PlanFacts,
        from: ProgressFrom,
        dir: Option<&Path>,
    ) -> Result<LiveServer, WebError> {
        let feed = Feed::new(plan.estimate.as_ref());
        let shutdown = Shutdown::new();
        let served = super::serve(listener, router(feed.clone(), shutdown.clone()), shutdown)?;
        let (commands, rx) = mpsc::channel();
        let start: Option<PathBuf> = dir.map(Path::to_path_buf);
        let thread_feed = feed.clone();
        let builder = std::thread::Builder::new()
            .name("taucal-live".into())
            .spawn(move || builder::run(thread_feed, bench, plan, from, start, rx))
            .map_err(WebError::Start)?;
        Ok(LiveServer {
            served,
            feed,
            commands,
            builder: Some(builder),
        })
    }

    /// The page's address.
    pub fn url(&self) -> String {
        self.served.url()
    }

    /// An observer that publishes the run's events to the page.
    pub fn observer(&self) -> LiveObserver {
        LiveObserver::new(self.feed.progress.clone())
    }

    /// Follows the run directory the run has just made.
    pub fn follow(&self, dir: &Path) {
        let _ = self
            .commands
            .send(builder::Command::Follow(dir.to_path_buf()));
    }

    /// The run has ended: publishes its report, lets every viewer receive it, and stops.
    pub fn finish(mut self) -> std::io::Result<()> {
        let (done, wait) = mpsc::channel();
        if self.commands.send(builder::Command::Finish(done)).is_ok() {
            let _ = wait.recv();
        }
        if let Some(t) = self.builder.take() {
            let _ = t.join();
        }
        self.served.stop()
    }

    /// Serves until SIGINT or SIGTERM (a run followed from its files).
    pub fn serve_until_interrupted(mut self) -> std::io::Result<()> {
        drop(self.builder.take());
        self.served.stop_on_interrupt()
    }
}
