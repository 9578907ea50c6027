//! The thread that keeps the live page's sections current: it follows the run directory, draws
//! the sections from the rows so far, and publishes them into the feed.
//!
//! Drawing fits every row recorded so far, so it is paced: at most one drawing per
//! [`MIN_INTERVAL`], and after one that took `d`, none for `PACE × d`, so the page never takes
//! more than about a fifth of one core from the run however long it grows.

use super::content::{self, Content};
use super::follow::RunFollower;
use super::progress::{point_text, stage_text, Progress};
use super::{Feed, LogTail, PlanFacts};
use crate::bench::Bench;
use crate::data::RunStatus;
use std::path::PathBuf;
use std::sync::mpsc::{Receiver, RecvTimeoutError, Sender};
use std::sync::Arc;
use std::time::{Duration, Instant};

/// How often the run's files are looked at.
const POLL: Duration = Duration::from_millis(200);
/// The shortest time between two drawings of the sections.
const MIN_INTERVAL: Duration = Duration::from_millis(400);
/// Idle time after a drawing, in multiples of the time it took.
const PACE: u32 = 4;

/// What the builder is told.
pub enum Command {
    /// Follow this run directory (the run has made it).
    Follow(PathBuf),
    /// The run has ended: publish its report and stop; the sender hears when that is done.
    Finish(Sender<()>),
}

/// Where the strip's progress comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ProgressFrom {
    /// The runner's events, published by a [`super::LiveObserver`] in this process.
    Events,
    /// The run's files (a run in another process).
    Files,
}

/// Runs the builder until [`Command::Finish`] or until every sender is gone.
pub fn run(
    feed: Feed,
    bench: Arc<Bench>,
    plan: PlanFacts,
    from: ProgressFrom,
    start: Option<PathBuf>,
    commands: Receiver<Command>,
) {
    let mut follower = start.as_deref().map(RunFollower::new);
    let mut next_draw = Instant::now();
    let mut dirty = false;
    loop {
        match commands.recv_timeout(POLL) {
            Ok(Command::Follow(dir)) => {
                follower = Some(RunFollower::new(&dir));
            }
            Ok(Command::Finish(done)) => {
                if let Some(f) = follower.as_mut() {
                    let _ = f.poll();
                    publish_log(&feed, f);
                    publish_end(&feed, f, &bench, &plan, from, true);
                }
                let _ = done.send(());
                return;
            }
            Err(RecvTimeoutError::Timeout) => {}
            Err(RecvTimeoutError::Disconnected) => return,
        }
        let Some(f) = follower.as_mut() else {
            continue;
        };
        let changes = match f.poll() {
            Ok(c) => c,
            Err(e) => {
                tracing::debug!("live page: cannot read {}: {e}", f.dir().display());
                continue;
            }
        };
        if changes.log {
            publish_log(&feed, f);
        }
        let ended = f.manifest().is_some_and(|m| m.status != RunStatus::Running);
        if ended {
            // Once per new manifest: a resumed run says `running` again and is followed again.
            if changes.manifest {
                publish_end(&feed, f, &bench, &plan, from, false);
            }
            dirty = false;
            continue;
        }
        if from == ProgressFrom::Files && (changes.rows || changes.manifest) {
            feed.progress
                .send_replace(Arc::new(progress_from_files(f, &plan.stages, &feed)));
        }
        dirty |= changes.rows || changes.manifest;
        if dirty && Instant::now() >= next_draw {
            let started = Instant::now();
            if let Some(m) = f.manifest() {
                match content::live(m, f.rows(), &bench, &plan.verify_stages) {
                    Ok(c) => {
                        feed.content.send_replace(Arc::new(c));
                    }
                    Err(e) => tracing::debug!("live page: cannot draw the sections: {e}"),
                }
                dirty = false;
            }
            next_draw = Instant::now() + (started.elapsed() * PACE).max(MIN_INTERVAL);
        }
    }
}

fn publish_log(feed: &Feed, f: &RunFollower) {
    feed.log.send_replace(Arc::new(LogTail {
        lines: f.log_lines().map(str::to_string).collect(),
    }));
}

/// The finished (or stopped) run: its report's sections and its final figures.
fn publish_end(
    feed: &Feed,
    f: &RunFollower,
    bench: &Bench,
    plan: &PlanFacts,
    from: ProgressFrom,
    last: bool,
) {
    let mut p = progress_from_files(f, &plan.stages, feed);
    if let (ProgressFrom::Events, Some(m)) = (from, f.manifest()) {
        // The runner's own counts: the events said them as they came.
        p.exchanges = m.counts.exchanges;
        p.exchanges_ok = m.counts.exchanges_ok;
    }
    if !last && f.manifest().is_some_and(|m| m.status == RunStatus::Running) {
        return;
    }
    match content::ended(f.dir(), bench) {
        Ok(c) => {
            feed.content.send_replace(Arc::new(c));
        }
        Err(e) => {
            let note = format!(
                "<section class=\"empty\"><h2>Report</h2><p>The run has ended, but its report \
                 cannot be drawn: {}</p></section>\n",
                crate::web::escape(&e.to_string())
            );
            feed.content.send_replace(Arc::new(Content {
                html: note,
                ended: true,
                ..(**feed.content.borrow()).clone()
            }));
        }
    }
    feed.progress.send_replace(Arc::new(p));
}

/// The strip as the files show it: the last row's stage and point, the rows' counts, the last
/// row's bench time (the manifest's once the run has ended).
fn progress_from_files(f: &RunFollower, stages: &[String], feed: &Feed) -> Progress {
    let mut p = (**feed.progress.borrow()).clone();
    let rows = f.rows();
    if let Some(last) = rows.last() {
        let index = stages.iter().position(|s| *s == last.stage);
        p.stage = stage_text(index, stages.len(), &last.stage);
        p.point = point_text(last.point, last.atten_db);
        p.bench_s = last.time_s.unwrap_or(p.bench_s);
    }
    p.exchanges = rows.len() as u64;
    p.exchanges_ok = rows
        .iter()
        .filter(|x| x.status == crate::data::STATUS_OK)
        .count() as u64;
    if let Some(m) = f.manifest() {
        p.status = content::status_word(m.status).into();
        if m.status != RunStatus::Running {
            p.bench_s = m.bench_time_s;
            p.point = "ended".into();
        }
    }
    p.touch();
    p
}
