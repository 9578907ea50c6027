//! What one script stage may spend, whatever its code does: bench time (a script may wait on the
//! bench clock, up to the stage's `time_limit_s`), its own computing time (wall time outside bench
//! calls, up to `compute_limit_s`), and log volume (a fixed [`MAX_LOG_BYTES`]). The engine's
//! progress hook asks [`Budget::exceeded`] between operations; bench calls add their wall time to
//! [`Budget::in_calls`] so that waiting on the bench is not counted as computing.

use crate::recipe::plan::ScriptLimits;
use std::cell::Cell;
use std::time::{Duration, Instant};

/// Most bytes one script stage may write to the run log with `log()` and `print()`: a script
/// that logs every exchange of a long run would otherwise fill the disk.
pub const MAX_LOG_BYTES: usize = 1 << 20;

/// Which limit a script stage went past.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Exceeded {
    /// More bench time than `time_limit_s`.
    BenchTime(f64),
    /// More computing than `compute_limit_s`.
    Computing(f64),
    /// More than [`MAX_LOG_BYTES`] logged.
    LogVolume,
}

impl Exceeded {
    /// What happened, and what to do about it.
    pub fn describe(self) -> (String, String) {
        match self {
            Exceeded::BenchTime(s) => (
                format!("the stage took more than its time_limit_s of {s} s of bench time and was stopped"),
                "raise the stage's time_limit_s if it really needs longer".into(),
            ),
            Exceeded::Computing(s) => (
                format!(
                    "the script computed for more than its compute_limit_s of {s} s (wall time outside bench calls) and was stopped (an endless loop?)"
                ),
                "raise the stage's compute_limit_s if the work is real".into(),
            ),
            Exceeded::LogVolume => (
                format!(
                    "the script logged more than {} KiB in this stage and was stopped",
                    MAX_LOG_BYTES / 1024
                ),
                "log summaries, not every exchange: they are in exchanges.csv".into(),
            ),
        }
    }
}

/// The running account of one script stage.
#[derive(Debug)]
pub struct Budget {
    limits: ScriptLimits,
    started: Instant,
    started_bench_s: f64,
    in_calls: Cell<Duration>,
    logged: Cell<usize>,
    over: Cell<Option<Exceeded>>,
}

impl Budget {
    /// Starts the account now, at bench time `bench_s`.
    pub fn start(limits: ScriptLimits, bench_s: f64) -> Budget {
        Budget {
            limits,
            started: Instant::now(),
            started_bench_s: bench_s,
            in_calls: Cell::new(Duration::ZERO),
            logged: Cell::new(0),
            over: Cell::new(None),
        }
    }

    /// Counts `spent` wall time as waiting on the bench, not computing.
    pub fn in_calls(&self, spent: Duration) {
        self.in_calls.set(self.in_calls.get() + spent);
    }

    /// Counts a log line; false once the stage has logged too much (the line is then dropped).
    pub fn log(&self, bytes: usize) -> bool {
        let total = self.logged.get().saturating_add(bytes);
        self.logged.set(total);
        if total > MAX_LOG_BYTES {
            self.over.set(Some(Exceeded::LogVolume));
        }
        total <= MAX_LOG_BYTES
    }

    /// Whether a wait of `ms` starting at bench time `bench_s` would end past the time limit.
    pub fn wait_fits(&self, bench_s: f64, ms: f64) -> bool {
        bench_s + ms / 1000.0 - self.started_bench_s <= self.limits.time_limit_s
    }

    /// The first limit gone past by bench time `bench_s` (wall time is read now), if any.
    pub fn exceeded(&self, bench_s: f64) -> Option<Exceeded> {
        if self.over.get().is_none() {
            let computing = self.started.elapsed().saturating_sub(self.in_calls.get());
            if bench_s - self.started_bench_s > self.limits.time_limit_s {
                self.over
                    .set(Some(Exceeded::BenchTime(self.limits.time_limit_s)));
            } else if computing.as_secs_f64() > self.limits.compute_limit_s {
                self.over
                    .set(Some(Exceeded::Computing(self.limits.compute_limit_s)));
            }
        }
        self.over.get()
    }

    /// The stage's bench-time limit, s.
    pub fn time_limit_s(&self) -> f64 {
        self.limits.time_limit_s
    }

    /// The limit gone past, as last found.
    pub fn over(&self) -> Option<Exceeded> {
        self.over.get()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const LIMITS: ScriptLimits = ScriptLimits {
        time_limit_s: 100.0,
        compute_limit_s: 60.0,
    };

    #[test]
    fn bench_time_past_the_limit_is_caught_and_waits_are_judged_before_they_start() {
        let b = Budget::start(LIMITS, 50.0);
        assert_eq!(b.exceeded(150.0), None, "exactly the limit is allowed");
        assert!(b.wait_fits(120.0, 30_000.0));
        assert!(!b.wait_fits(120.0, 30_001.0));
        assert_eq!(b.exceeded(150.5), Some(Exceeded::BenchTime(100.0)));
        assert_eq!(b.over(), Some(Exceeded::BenchTime(100.0)));
    }

    #[test]
    fn computing_excludes_the_wall_time_spent_in_bench_calls() {
        let limits = ScriptLimits {
            compute_limit_s: 0.0,
            ..LIMITS
        };
        let b = Budget::start(limits, 0.0);
        // As if every moment so far had been spent inside bench calls.
        b.in_calls(Duration::from_secs(3600));
        assert_eq!(b.exceeded(0.0), None);
        let b = Budget::start(limits, 0.0);
        std::thread::sleep(Duration::from_millis(2));
        assert_eq!(b.exceeded(0.0), Some(Exceeded::Computing(0.0)));
    }

    #[test]
    fn logging_past_the_volume_limit_is_refused_and_remembered() {
        let b = Budget::start(LIMITS, 0.0);
        assert!(b.log(MAX_LOG_BYTES));
        assert_eq!(b.exceeded(0.0), None);
        assert!(!b.log(1));
        assert_eq!(b.exceeded(0.0), Some(Exceeded::LogVolume));
    }
}
