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
        let bar = ProgressBar::with_draw_target(None, ProgressDrawTarget::stderr());
        bar.set_style(style);
        log::set_progress(Some(bar.clone()));
        Some(Progress::on(bar, estimate))
    }

    /// A display drawing on `bar`, whose length it sets from the estimate.
    fn on(bar: ProgressBar, estimate: &Estimate) -> Progress {
        bar.set_length((estimate.bench_s * TICKS_PER_S).ceil().max(1.0) as u64);
        Progress {
            bar,
            estimate_s: estimate.bench_s,
            lower_bound: estimate.bound != Bound::Estimate,
            stage: String::new(),
            point: String::new(),
            exchanges: 0,
            bench_s: 0.0,
        }
    }

    fn redraw(&self) {
        // Past the estimate (it was a lower bound) the bar holds just short of full: growing
        // its length instead would move the bar backwards each time.
        let len = self.bar.length().unwrap_or(1);
        let pos = ((self.bench_s * TICKS_PER_S) as u64)
            .min(len.saturating_sub(1))
            .max(self.bar.position());
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::runner::estimate::{Timing, TimingSource};

    #[test]
    fn the_bar_never_moves_backwards_past_a_lower_bound() {
        let estimate = Estimate {
            stages: Vec::new(),
            bench_s: 2.0,
            bound: Bound::AtLeast,
            timing: Timing {
                burst_setup_ms: 5.0,
                frame_interval_us: 1000.0,
                atten_switch_ms: 2.0,
                source: TimingSource::Simulation,
            },
        };
        let mut p = Progress::on(ProgressBar::hidden(), &estimate);
        let mut shown = 0.0;
        for (i, bench_time_s) in [0.5, 1.9, 2.0, 2.1, 2.3, 3.0, 5.0, 9.5]
            .into_iter()
            .enumerate()
        {
            p.event(&RunEvent::BurstRecorded {
                exchanges: 16 * (i as u64 + 1),
                exchanges_ok: 16 * (i as u64 + 1),
                bench_time_s,
            });
            let len = p.bar.length().expect("length") as f64;
            let fraction = p.bar.position() as f64 / len;
            assert!(fraction >= shown, "{bench_time_s} s: {fraction} < {shown}");
            assert!(fraction < 1.0, "{bench_time_s} s: full before the run ends");
            shown = fraction;
        }
        assert!(shown > 0.99, "{shown}");
    }
}
