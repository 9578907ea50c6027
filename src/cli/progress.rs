//! The live progress display of `taucal run`: stage, point, exchanges and bench time against the
//! plan's estimate, with the time left in bench time. Driven by the runner's events; shown only
//! on a terminal (nothing is drawn, let alone animated, into a pipe or file), never with
//! `--quiet`, and without colour under `NO_COLOR`.

use super::log::{self, Verbosity};
use crate::runner::estimate::{human_duration, Bound, Estimate};
use crate::runner::{RunEvent, RunObserver};
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::io::IsTerminal;

/// The display and what it knows of the run so far.
pub struct Progress {
    bar: ProgressBar,
    estimate_s: f64,
    lower_bound: bool,
    stage: String,
    point: String,
    exchanges: u64,
    bench_s: f64,
}

/// Bar length units per second of bench time.
const TICKS_PER_S: f64 = 1000.0;

impl Progress {
    /// A display for a run of the estimated length, or `None` when nothing should be drawn.
    pub fn start(verbosity: Verbosity, estimate: &Estimate) -> Option<Progress> {
        if verbosity == Verbosity::Quiet || !std::io::stderr().is_terminal() {
            return None;
        }
        let template = if log::colour() {
            "{bar:30.cyan/blue} {percent:>3}% {msg}"
        } else {
            "{bar:30} {percent:>3}% {msg}"
        };
        let style = ProgressStyle::with_template(template)
            .ok()?
            .progress_chars("█▌░");
        let len = (estimate.bench_s * TICKS_PER_S).ceil().max(1.0) as u64;
        let bar = ProgressBar::with_draw_target(Some(len), ProgressDrawTarget::stderr());
        bar.set_style(style);
        log::set_progress(Some(bar.clone()));
        Some(Progress {
            bar,
            estimate_s: estimate.bench_s,
            lower_bound: estimate.bound != Bound::Estimate,
            stage: String::new(),
            point: String::new(),
            exchanges: 0,
            bench_s: 0.0,
        })
    }

    fn redraw(&self) {
        let pos = (self.bench_s * TICKS_PER_S) as u64;
        if self.bar.length().is_some_and(|len| pos >= len) {
            // Past the estimate (it was a lower bound): keep the bar just short of full.
            self.bar.set_length(pos + pos / 20 + 1);
        }
        self.bar.set_position(pos);
        let about = if self.lower_bound { "≥" } else { "≈" };
        let left = (self.estimate_s - self.bench_s).max(0.0);
        let eta = if left > 0.0 {
            format!(", {about} {} left", human_duration(left))
        } else {
            String::new()
        };
        self.bar.set_message(format!(
            "{} · {} · {} exchanges · bench {} of {about} {}{eta}",
            self.stage,
            self.point,
            self.exchanges,
            human_duration(self.bench_s),
            human_duration(self.estimate_s)
        ));
    }
}

impl RunObserver for Progress {
    fn event(&mut self, event: &RunEvent<'_>) {
        match event {
            RunEvent::StageBegins { index, count, name } => {
                self.stage = format!("stage {}/{count} `{name}`", index + 1);
                self.point = "starting".into();
            }
            RunEvent::PointBegins {
                point, atten_db, ..
            } => self.point = format!("point {} at {atten_db} dB", point + 1),
            RunEvent::BurstRecorded {
                exchanges,
                bench_time_s,
                ..
            } => {
                self.exchanges = *exchanges;
                self.bench_s = *bench_time_s;
            }
            RunEvent::StagesEnded => {
                self.bar.finish_and_clear();
                log::set_progress(None);
                return;
            }
        }
        self.redraw();
    }
}
