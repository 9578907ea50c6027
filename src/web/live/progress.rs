//! The live page's status strip: where the run stands (stage, point, exchanges, bench time
//! against the estimate), as the runner's events tell it ([`LiveObserver`]) or as the run's
//! files show it (a run watched from another process).
//!
//! The observer runs on the runner's thread: it swaps a new snapshot into a watch channel and
//! never waits, whoever is watching.

use crate::runner::estimate::{human_duration, Bound, Estimate};
use crate::runner::{RunEvent, RunObserver};
use serde::Serialize;
use std::sync::Arc;
use tokio::sync::watch;

/// One snapshot of the strip; sent to viewers as JSON.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct Progress {
    /// `waiting`, `running`, `completed`, `stopped` or `failed`.
    pub status: String,
    /// The stage, with its place in the plan where known (`2/3 sweep`).
    pub stage: String,
    /// The point (`point 4 at 30 dB`).
    pub point: String,
    /// Exchanges recorded.
    pub exchanges: u64,
    /// Of those, status `ok`.
    pub exchanges_ok: u64,
    /// Bench time so far, s.
    pub bench_s: f64,
    /// The plan's estimate of the whole run's bench time, s.
    pub estimate_s: Option<f64>,
    /// True when the estimate is a lower bound (adaptive or script stages).
    pub lower_bound: bool,
    /// Bench time against the estimate, as a person reads it.
    pub bench_text: String,
    /// Share of the estimate done, 0…1 (held below 1 while running past a lower bound).
    pub fraction: f64,
    /// When this snapshot was taken, UTC, to the second.
    pub updated_utc: String,
}

impl Progress {
    /// A strip before the run has recorded anything.
    pub fn waiting(estimate: Option<&Estimate>) -> Progress {
        let mut p = Progress {
            status: "waiting".into(),
            estimate_s: estimate.map(|e| e.bench_s),
            lower_bound: estimate.is_some_and(|e| e.bound != Bound::Estimate),
            ..Progress::default()
        };
        p.touch();
        p
    }

    /// Recomputes the derived texts and the time stamp.
    pub fn touch(&mut self) {
        let about = if self.lower_bound { "≥" } else { "≈" };
        self.bench_text = match self.estimate_s {
            Some(est) if est > 0.0 => {
                let left = est - self.bench_s;
                let tail = if left > 0.0 && self.status == "running" {
                    format!(", {about} {} left", human_duration(left))
                } else {
                    String::new()
                };
                format!(
                    "{} of {about} {}{tail}",
                    human_duration(self.bench_s),
                    human_duration(est)
                )
            }
            _ => human_duration(self.bench_s),
        };
        self.fraction = match self.estimate_s {
            _ if self.status == "completed" => 1.0,
            Some(est) if est > 0.0 => (self.bench_s / est).clamp(0.0, 0.995),
            _ => 0.0,
        };
        self.updated_utc = now_utc();
    }
}

/// The wall clock now, UTC, `YYYY-MM-DD HH:MM:SS`.
pub fn now_utc() -> String {
    crate::report::html::utc_seconds(time::OffsetDateTime::now_utc())
}

/// The stage's text: its place in the plan when the count is known.
pub fn stage_text(index: Option<usize>, count: usize, name: &str) -> String {
    match index {
        Some(i) if count > 0 => format!("{}/{count} {name}", i + 1),
        _ => name.to_string(),
    }
}

/// The point's text, from its index within the stage (from 0) and its setting.
pub fn point_text(point: u32, atten_db: f64) -> String {
    format!("point {} at {atten_db} dB", point + 1)
}

/// Publishes a run's events into the strip's channel; never blocks the runner.
pub struct LiveObserver {
    tx: Arc<watch::Sender<Arc<Progress>>>,
    now: Progress,
}

impl LiveObserver {
    /// An observer publishing into `tx`, starting from what it holds.
    pub fn new(tx: Arc<watch::Sender<Arc<Progress>>>) -> LiveObserver {
        let now = (**tx.borrow()).clone();
        LiveObserver { tx, now }
    }
}

impl RunObserver for LiveObserver {
    fn event(&mut self, event: &RunEvent<'_>) {
        let p = &mut self.now;
        match event {
            RunEvent::StageBegins { index, count, name } => {
                p.status = "running".into();
                p.stage = stage_text(Some(*index), *count, name);
                p.point = "starting".into();
            }
            RunEvent::PointBegins {
                point, atten_db, ..
            } => p.point = point_text(*point, *atten_db),
            RunEvent::BurstRecorded {
                exchanges,
                exchanges_ok,
                bench_time_s,
            } => {
                p.status = "running".into();
                p.exchanges = *exchanges;
                p.exchanges_ok = *exchanges_ok;
                p.bench_s = *bench_time_s;
            }
            RunEvent::StagesEnded => p.point = "fitting and writing the outputs".into(),
        }
        p.touch();
        // A swap and a wake-up of whoever waits: viewers read it in their own time.
        self.tx.send_replace(Arc::new(p.clone()));
    }
}

/// Sends a run's events to two observers in turn (the terminal's display and the live page).
pub struct Both(pub Box<dyn RunObserver>, pub Box<dyn RunObserver>);

impl RunObserver for Both {
    fn event(&mut self, event: &RunEvent<'_>) {
        self.0.event(event);
        self.1.event(event);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_observer_publishes_each_event_without_a_viewer() {
        let (tx, rx) = watch::channel(Arc::new(Progress::waiting(None)));
        let tx = Arc::new(tx);
        let mut o = LiveObserver::new(tx.clone());
        drop(rx);
        o.event(&RunEvent::StageBegins {
            index: 1,
            count: 3,
            name: "sweep",
        });
        o.event(&RunEvent::PointBegins {
            stage: "sweep",
            point: 3,
            atten_db: 30.5,
        });
        o.event(&RunEvent::BurstRecorded {
            exchanges: 48,
            exchanges_ok: 47,
            bench_time_s: 12.25,
        });
        let now = tx.borrow().clone();
        assert_eq!(now.stage, "2/3 sweep");
        assert_eq!(now.point, "point 4 at 30.5 dB");
        assert_eq!((now.exchanges, now.exchanges_ok), (48, 47));
        assert_eq!(now.status, "running");
        assert_eq!(now.updated_utc.len(), "2026-12-03 12:00:00".len());
    }

    #[test]
    fn bench_time_reads_against_the_estimate_and_never_reaches_full_while_running() {
        let mut p = Progress {
            status: "running".into(),
            bench_s: 30.0,
            estimate_s: Some(120.0),
            ..Progress::default()
        };
        p.touch();
        assert_eq!(p.bench_text, "30.0 s of ≈ 2 min, ≈ 90.0 s left");
        assert!((p.fraction - 0.25).abs() < 1e-12);
        p.bench_s = 500.0;
        p.lower_bound = true;
        p.touch();
        assert!(p.fraction < 1.0, "{}", p.fraction);
        assert_eq!(p.bench_text, "8 min of ≥ 2 min");
        p.status = "completed".into();
        p.touch();
        assert_eq!(p.fraction, 1.0);
    }
}
