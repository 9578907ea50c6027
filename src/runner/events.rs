//! What a run tells an observer as it goes — stages, points, bursts — so a front end can show
//! progress while the library itself prints nothing.

/// One step of a run in progress.
#[derive(Debug, Clone, PartialEq)]
pub enum RunEvent<'a> {
    /// Stage `index` (of `count`) begins.
    StageBegins {
        /// Position in the plan, from 0.
        index: usize,
        /// Stages in the plan.
        count: usize,
        /// Stage name.
        name: &'a str,
    },
    /// The attenuator was set: a new point begins.
    PointBegins {
        /// Stage name.
        stage: &'a str,
        /// Point index within the stage.
        point: u32,
        /// The setting.
        atten_db: f64,
    },
    /// A burst was recorded.
    BurstRecorded {
        /// Exchanges recorded so far in the run.
        exchanges: u64,
        /// Of those, exchanges with status `ok`.
        exchanges_ok: u64,
        /// Bench time now, seconds.
        bench_time_s: f64,
    },
    /// No more stages run (they finished or one failed); fitting and writing follow.
    StagesEnded,
}

/// Receives a run's events, on the thread that runs the stages.
pub trait RunObserver {
    /// Called for every event, in order.
    fn event(&mut self, event: &RunEvent<'_>);
}

/// An observer that ignores everything.
pub struct Unobserved;

impl RunObserver for Unobserved {
    fn event(&mut self, _: &RunEvent<'_>) {}
}
