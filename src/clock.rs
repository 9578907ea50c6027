//! The one clock every wait goes through.
//!
//! A simulated bench runs in virtual time: waits and instrument actions advance a counter, so an
//! overnight recipe takes seconds and the same seed gives the same run. `--realtime` keeps the
//! virtual counter but also sleeps, so a simulated run keeps wall-clock pace. A real bench reads
//! wall time.

use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::time::{Duration, Instant};

/// How bench time relates to wall time.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ClockMode {
    /// Bench time is a counter advanced by actions; nothing sleeps.
    Virtual,
    /// Bench time is a counter advanced by actions, and every advance also sleeps.
    Paced,
    /// Bench time is wall time since the run began.
    Wall,
}

/// Bench time in integer picoseconds since the run began.
#[derive(Debug)]
pub struct BenchClock {
    mode: ClockMode,
    counter_ps: AtomicU64,
    origin: Instant,
    fast_forward: AtomicBool,
}

/// Picoseconds per second.
pub const PS_PER_S: u64 = 1_000_000_000_000;

impl BenchClock {
    /// A clock starting at zero.
    pub fn new(mode: ClockMode) -> Self {
        BenchClock {
            mode,
            counter_ps: AtomicU64::new(0),
            origin: Instant::now(),
            fast_forward: AtomicBool::new(false),
        }
    }

    /// The clock's mode.
    pub fn mode(&self) -> ClockMode {
        self.mode
    }

    /// Bench time now.
    pub fn now_ps(&self) -> u64 {
        match self.mode {
            ClockMode::Wall => u64::try_from(self.origin.elapsed().as_nanos().saturating_mul(1000))
                .unwrap_or(u64::MAX),
            _ => self.counter_ps.load(Ordering::SeqCst),
        }
    }

    /// Bench time now, in seconds.
    pub fn now_s(&self) -> f64 {
        self.now_ps() as f64 / PS_PER_S as f64
    }

    /// While set, a paced or wall clock asks for no sleep: a resumed run replays what was
    /// already recorded as fast as it can.
    pub fn set_fast_forward(&self, on: bool) {
        self.fast_forward.store(on, Ordering::SeqCst);
    }

    /// Records that `ps` of bench time pass, and returns how long the caller must sleep in wall
    /// time for that to be true.
    pub fn spend(&self, ps: u64) -> Duration {
        if self.fast_forward.load(Ordering::SeqCst) {
            if self.mode != ClockMode::Wall {
                self.counter_ps.fetch_add(ps, Ordering::SeqCst);
            }
            return Duration::ZERO;
        }
        match self.mode {
            ClockMode::Virtual => {
                self.counter_ps.fetch_add(ps, Ordering::SeqCst);
                Duration::ZERO
            }
            ClockMode::Paced => {
                self.counter_ps.fetch_add(ps, Ordering::SeqCst);
                Duration::from_nanos(ps / 1000)
            }
            ClockMode::Wall => Duration::from_nanos(ps / 1000),
        }
    }

    /// Converts milliseconds to picoseconds, saturating.
    pub fn ms_to_ps(ms: f64) -> u64 {
        (ms.max(0.0) * 1e9).round().min(u64::MAX as f64) as u64
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn virtual_time_advances_without_sleeping() {
        let c = BenchClock::new(ClockMode::Virtual);
        assert_eq!(c.spend(BenchClock::ms_to_ps(1500.0)), Duration::ZERO);
        assert_eq!(c.now_ps(), 1_500_000_000_000);
        assert!((c.now_s() - 1.5).abs() < 1e-12);
    }

    #[test]
    fn paced_time_asks_for_the_same_sleep() {
        let c = BenchClock::new(ClockMode::Paced);
        assert_eq!(c.spend(2_000_000_000), Duration::from_millis(2));
        assert_eq!(c.now_ps(), 2_000_000_000);
    }
}
