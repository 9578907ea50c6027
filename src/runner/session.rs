//! The state a run carries from stage to stage: instrument handles, the clock, the record sink,
//! and where the run is (stage, point, burst). Sweeps and scripts act only through it, so both
//! obey the same limits and number their records the same way.

use super::journal::{Checkpoint, Journal};
use super::report_watch::{ReportForm, ReportWatch};
use super::{RunError, RunEvent, RunObserver, StopFlag, Unobserved};
use crate::bench::Bench;
use crate::clock::BenchClock;
use crate::data::manifest::{Counts, FaultTally};
use crate::data::{Exchange, RecordSink, Taken, STATUS_OK};
use crate::fit::gainmap::{count_step, GainMap};
use crate::fit::level_spread::LevelSpread;
use crate::instrument::{
    AttenuatorHandle, BurstSpec, ChamberHandle, InstrumentError, RangingHandle,
};
use crate::recipe::Channel;
use crate::recipe::FaultPolicy;
use std::collections::{BTreeMap, VecDeque};
use std::sync::Arc;

/// What one attenuation point yielded: gain states seen and how often.
#[derive(Debug, Clone, PartialEq)]
pub struct PointSummary {
    /// Stage name.
    pub stage: String,
    /// Point index within the stage.
    pub point: u32,
    /// Attenuator setting.
    pub atten_db: f64,
    /// Channel.
    pub channel: Channel,
    /// Exchanges with status `ok` per DUT gain index.
    pub ok_by_gain: BTreeMap<u32, u64>,
    /// The DUT's gain steps between consecutive usable exchanges, per (from, to), counted at
    /// the point of the second (what a gain map fits switch points from).
    pub steps: BTreeMap<(u32, u32), u64>,
    /// The DUT's reported receive levels on usable exchanges.
    pub rssi: LevelSpread,
    /// Exchanges that failed.
    pub failed: u64,
}

/// Rows an interrupted run recorded, being replayed by its resumption.
#[derive(Default)]
struct Replay {
    rows: VecDeque<Exchange>,
    /// True on a simulated bench: rows are regenerated and checked, not read back.
    regenerate: bool,
    /// Rows replayed so far.
    checked: u64,
}

/// Instruments and bookkeeping of a run in progress.
pub struct Session {
    bench: Arc<Bench>,
    clock: Arc<BenchClock>,
    atten: AttenuatorHandle,
    dut: RangingHandle,
    chamber: Option<ChamberHandle>,
    stop: StopFlag,
    journal: Option<Journal>,
    replay: Replay,
    sink: Box<dyn RecordSink>,
    sink_name: String,
    stage: String,
    channel: Channel,
    atten_db: Option<f64>,
    next_burst: u32,
    /// The DUT gain state the last exchange reported, while the chain of usable exchanges is
    /// unbroken in this stage.
    last_gain: Option<u32>,
    /// One entry per point visited, in order.
    pub points: Vec<PointSummary>,
    /// Running counts for the manifest.
    pub counts: Counts,
    /// Values recorded by scripts.
    pub results: BTreeMap<String, toml::Value>,
    /// Gain maps found by gain-map stages, by stage name.
    pub gain_maps: BTreeMap<String, (Channel, GainMap)>,
    /// Verification stages run so far: name and single-state reference level (dBm).
    pub verify_stages: Vec<(String, f64)>,
    /// The fitter's rejection threshold, for intervals computed during the run.
    pub reject_mad: f64,
    /// Retries and what a failing point does.
    pub policy: FaultPolicy,
    /// Faults and retries per role, for the manifest.
    pub faults: BTreeMap<String, FaultTally>,
    /// Points skipped after their retries ran out, described.
    pub skipped_points: Vec<String>,
    /// The DUT's report form and applied K so far.
    pub report_watch: ReportWatch,
    observer: Box<dyn RunObserver>,
}

impl Session {
    /// A session over the given instruments, writing records to `sink` (named `sink_name` in
    /// errors).
    pub fn new(
        bench: Arc<Bench>,
        clock: Arc<BenchClock>,
        atten: AttenuatorHandle,
        dut: RangingHandle,
        sink: Box<dyn RecordSink>,
        sink_name: &str,
    ) -> Self {
        Session {
            bench,
            clock,
            atten,
            dut,
            chamber: None,
            stop: StopFlag::default(),
            journal: None,
            replay: Replay::default(),
            sink,
            sink_name: sink_name.to_string(),
            stage: String::new(),
            channel: Channel {
                center_mhz: 5180,
                bw_mhz: 80,
            },
            atten_db: None,
            next_burst: 0,
            last_gain: None,
            points: Vec::new(),
            counts: Counts::default(),
            results: BTreeMap::new(),
            gain_maps: BTreeMap::new(),
            verify_stages: Vec::new(),
            reject_mad: crate::recipe::plan::DEFAULT_REJECT_MAD,
            policy: FaultPolicy::default(),
            faults: BTreeMap::new(),
            report_watch: ReportWatch::default(),
            skipped_points: Vec::new(),
            observer: Box::new(Unobserved),
        }
    }

    /// Makes the session obey a stop flag (SIGINT/SIGTERM).
    pub fn set_stop(&mut self, stop: StopFlag) {
        self.stop = stop;
    }

    /// The stop flag.
    pub fn stop(&self) -> &StopFlag {
        &self.stop
    }

    /// Journals a checkpoint at every completed point.
    pub fn set_journal(&mut self, journal: Journal) {
        self.journal = Some(journal);
    }

    /// Replays `rows` (what an interrupted run recorded up to its last checkpoint) before
    /// recording anything new. A simulated bench regenerates them, so the model reaches the
    /// state it was in, and each is checked against the record; a real bench's instruments are
    /// left alone and the recorded rows are used as they are.
    pub fn set_replay(&mut self, rows: Vec<Exchange>, regenerate: bool) {
        self.replay = Replay {
            rows: rows.into(),
            regenerate,
            checked: 0,
        };
        self.clock.set_fast_forward(!self.replay.rows.is_empty());
    }

    /// Records a checkpoint: the exchanges so far are synced, then journaled.
    pub fn checkpoint(&mut self) -> Result<(), RunError> {
        if !self.replay.rows.is_empty() {
            return Ok(());
        }
        let Some(journal) = &mut self.journal else {
            return Ok(());
        };
        let io = |source| RunError::Io {
            path: self.sink_name.clone(),
            source,
        };
        self.sink.sync().map_err(io)?;
        journal
            .append(Checkpoint {
                rows: self.counts.exchanges,
                bench_ps: self.clock.now_ps(),
            })
            .map_err(io)
    }

    /// Gives the session the bench's climatic chamber.
    pub fn set_chamber(&mut self, chamber: Option<ChamberHandle>) {
        self.chamber = chamber;
    }

    /// The climatic chamber, when the bench has one.
    pub fn chamber(&self) -> Option<&ChamberHandle> {
        self.chamber.as_ref()
    }

    /// The DUT's temperature, where the bench measures one.
    pub fn dut_temp_c(&self) -> Result<Option<f64>, RunError> {
        Ok(self.dut.temperature_c()?)
    }

    /// Sends the run's events (points, bursts, and whatever [`Session::notify`] passes on) to
    /// `observer`.
    pub fn set_observer(&mut self, observer: Box<dyn RunObserver>) {
        self.observer = observer;
    }

    /// Passes an event to the observer.
    pub fn notify(&mut self, event: &RunEvent<'_>) {
        self.observer.event(event);
    }

    /// The bench.
    pub fn bench(&self) -> &Bench {
        &self.bench
    }

    /// The clock.
    pub fn clock(&self) -> &BenchClock {
        &self.clock
    }

    /// Starts a stage: points are numbered afresh, and the attenuation must be set again.
    pub fn begin_stage(&mut self, name: &str, channel: Channel) -> Result<(), RunError> {
        self.checkpoint()?;
        self.stage = name.to_string();
        self.channel = channel;
        self.atten_db = None;
        self.last_gain = None;
        Ok(())
    }

    /// The channel bursts use.
    pub fn channel(&self) -> Channel {
        self.channel
    }

    /// Changes channel; the next burst starts a new point.
    pub fn set_channel(&mut self, channel: Channel) -> Result<(), RunError> {
        if self.channel != channel {
            self.channel = channel;
            self.last_gain = None;
            if let Some(db) = self.atten_db {
                self.new_point(db)?;
            }
        }
        Ok(())
    }

    /// The attenuation last set in this stage.
    pub fn atten_db(&self) -> Option<f64> {
        self.atten_db
    }

    /// Sets the attenuator, after checking the bench's limits (receiver protection first), and
    /// starts a new point.
    pub fn set_atten(&mut self, db: f64) -> Result<(), RunError> {
        if let Some((message, hint)) = self.bench.refuse_atten(db) {
            return Err(RunError::Refused { message, hint });
        }
        if self.stop.requested() {
            return Err(RunError::Interrupted);
        }
        if !self.feeding() {
            self.retrying("attenuator", |s| s.atten.set_atten_db(db))?;
        }
        self.new_point(db)
    }

    /// True while recorded rows stand in for a real bench's instruments.
    fn feeding(&self) -> bool {
        !self.replay.rows.is_empty() && !self.replay.regenerate
    }

    fn new_point(&mut self, db: f64) -> Result<(), RunError> {
        self.checkpoint()?;
        let point = self
            .points
            .iter()
            .filter(|p| p.stage == self.stage)
            .map(|p| p.point + 1)
            .max()
            .unwrap_or(0);
        self.points.push(PointSummary {
            stage: self.stage.clone(),
            point,
            atten_db: db,
            channel: self.channel,
            ok_by_gain: BTreeMap::new(),
            steps: BTreeMap::new(),
            rssi: LevelSpread::default(),
            failed: 0,
        });
        self.atten_db = Some(db);
        self.next_burst = 0;
        self.counts.points += 1;
        self.observer.event(&RunEvent::PointBegins {
            stage: &self.stage,
            point,
            atten_db: db,
        });
        Ok(())
    }

    /// Waits `ms` of bench time.
    pub fn wait_ms(&mut self, ms: f64) -> Result<(), RunError> {
        let mut left = self.clock.spend(BenchClock::ms_to_ps(ms));
        // Sleep in slices so a stop request is seen within a tenth of a second.
        let slice = std::time::Duration::from_millis(100);
        while !left.is_zero() {
            if self.stop.requested() {
                return Err(RunError::Interrupted);
            }
            let nap = left.min(slice);
            std::thread::sleep(nap);
            left -= nap;
        }
        Ok(())
    }

    /// Runs one burst at the current point and records it; returns the recorded rows.
    pub fn burst(&mut self, frames: u32) -> Result<Vec<Exchange>, RunError> {
        let Some(atten_db) = self.atten_db else {
            return Err(RunError::Refused {
                message: "a burst was asked for before any attenuation was set in this stage"
                    .into(),
                hint: "set the attenuation first (set_atten in a script)".into(),
            });
        };
        if self.stop.requested() {
            return Err(RunError::Interrupted);
        }
        let channel = self.channel;
        let point = self.points.last_mut().map_or(0, |p| p.point);
        if self.feeding() {
            return self.feed(point);
        }
        let spec = BurstSpec { frames, channel };
        let time_s = Some(self.clock.now_s());
        let reported = self.retrying("dut", |s| s.dut.burst(spec))?;
        let temp_c = self.retrying("dut", |s| s.dut.temperature_c())?;
        let burst = self.next_burst;
        self.next_burst += 1;
        let at = Taken {
            stage: &self.stage,
            point,
            burst,
            atten_db,
            center_mhz: channel.center_mhz,
            bw_mhz: channel.bw_mhz,
            temp_c,
            time_s,
        };
        // Judged before the rows are made but acted on after they are written: a burst in a new
        // form is kept, then stops the run.
        let changed = self.report_watch.observe(&reported);
        let rows: Vec<Exchange> = reported
            .into_iter()
            .enumerate()
            .map(|(seq, d)| Exchange::recorded(&at, seq as u32, d))
            .collect();
        if self.replay.rows.is_empty() {
            self.sink
                .write_burst(&rows)
                .map_err(|source| RunError::Io {
                    path: self.sink_name.clone(),
                    source,
                })?;
        } else {
            self.check_replayed(&rows)?;
        }
        self.tally(&rows);
        changed.map_err(RunError::ReportChanged)?;
        let ranges = self.report_watch.form() == Some(ReportForm::Range);
        if ranges
            && self.report_watch.applied_k_ps().is_none()
            && self.bench.applied_k_ps().is_none()
        {
            return Err(RunError::NoAppliedK);
        }
        Ok(rows)
    }

    /// A replayed burst of a real bench: the recorded rows of this point's next burst.
    fn feed(&mut self, point: u32) -> Result<Vec<Exchange>, RunError> {
        let burst = self.next_burst;
        self.next_burst += 1;
        let mut rows = Vec::new();
        while let Some(r) = self.replay.rows.front() {
            if r.stage != self.stage || r.point != point || r.burst != burst {
                break;
            }
            rows.extend(self.replay.rows.pop_front());
        }
        if rows.is_empty() {
            return Err(RunError::Diverged {
                row: self.replay.checked + 1,
            });
        }
        self.replay.checked += rows.len() as u64;
        self.end_replay_if_done();
        self.tally(&rows);
        Ok(rows)
    }

    /// Checks regenerated rows against the record; the replay ends when the record does.
    fn check_replayed(&mut self, rows: &[Exchange]) -> Result<(), RunError> {
        for r in rows {
            match self.replay.rows.pop_front() {
                // As the record keeps it: an older record version holds less.
                Some(recorded) if recorded == self.sink.kept(r) => self.replay.checked += 1,
                _ => {
                    return Err(RunError::Diverged {
                        row: self.replay.checked + 1,
                    })
                }
            }
        }
        self.end_replay_if_done();
        Ok(())
    }

    fn end_replay_if_done(&mut self) {
        if self.replay.rows.is_empty() && self.replay.checked > 0 {
            tracing::info!(
                "resumed: {} exchanges replayed, recording again",
                self.replay.checked
            );
            self.clock.set_fast_forward(false);
        }
    }

    /// Updates counts and the point's summary with a burst's rows.
    fn tally(&mut self, rows: &[Exchange]) {
        self.counts.bursts += 1;
        self.counts.exchanges += rows.len() as u64;
        if let Some(summary) = self.points.last_mut() {
            for r in rows {
                // A device without a gain index still completes exchanges.
                let ok = r.status == STATUS_OK && r.is_timed();
                let gain = r.dut_gain.filter(|_| ok);
                count_step(&mut self.last_gain, gain, &mut summary.steps);
                if !ok {
                    summary.failed += 1;
                    continue;
                }
                if let Some(g) = gain {
                    *summary.ok_by_gain.entry(g).or_insert(0) += 1;
                }
                if let Some(level) = r.dut_rssi_dbm {
                    summary.rssi.push(level);
                }
                self.counts.exchanges_ok += 1;
            }
        }
        self.observer.event(&RunEvent::BurstRecorded {
            exchanges: self.counts.exchanges,
            exchanges_ok: self.counts.exchanges_ok,
            bench_time_s: self.clock.now_s(),
        });
    }

    /// Runs `op` on `role`, retrying per the fault policy: after a failure it waits (doubling
    /// the wait each time), brings the instrument back (the DUT is initialised again; the
    /// attenuation is re-applied) and tries again. A closed instrument task is not retried.
    fn retrying<T>(
        &mut self,
        role: &str,
        mut op: impl FnMut(&mut Self) -> Result<T, InstrumentError>,
    ) -> Result<T, RunError> {
        let mut attempt = 0u32;
        loop {
            let e = match op(self) {
                Ok(v) => return Ok(v),
                Err(e @ InstrumentError::Gone { .. }) => return Err(e.into()),
                Err(e) => e,
            };
            let tally = self.faults.entry(role.to_string()).or_default();
            tally.faults += 1;
            if matches!(e, InstrumentError::Restarted { .. }) {
                tally.restarts += 1;
            }
            // A refusal will not pass: retrying it would only cost the backoff.
            if attempt >= self.policy.retries || matches!(e, InstrumentError::Refused { .. }) {
                return Err(e.into());
            }
            attempt += 1;
            tally.retries += 1;
            let wait_ms = self.policy.wait_before_ms(attempt);
            tracing::warn!(
                "{e}; retry {attempt} of {} in {wait_ms} ms",
                self.policy.retries
            );
            self.wait_ms(wait_ms)?;
            if role == "dut" {
                // A DUT brought back may come back in another gain state: the next exchange's
                // step from the last one says nothing about the AGC's switching.
                self.last_gain = None;
                // Initialising is identifying again. Done after any DUT fault, not only a
                // detected restart: a restart can hide behind a dropped connection or a
                // timeout. If it fails, the next attempt says so.
                if let Ok(id) = self.dut.identify() {
                    if matches!(e, InstrumentError::Restarted { .. }) {
                        tracing::info!("dut initialised again after a restart: {id}");
                    }
                }
            }
            if let (Some(db), true) = (self.atten_db, role == "dut") {
                // The attenuator keeps its setting across a DUT fault, but a reconnected or
                // power-cycled bench may not: setting it again is cheap insurance.
                let _ = self.atten.set_atten_db(db);
            }
        }
    }

    /// Puts every instrument in its safe state; returns the failures, if any, without stopping
    /// at the first so every instrument gets its chance. Each is tried as often as the fault
    /// policy retries a command: a receiver left exposed is worth a few seconds more.
    pub fn safe_state(&self) -> Vec<RunError> {
        let mut errs = Vec::new();
        if let Err(e) = self.persistently(|s| s.dut.safe_state()) {
            errs.push(e.into());
        }
        match self.persistently(|s| s.atten.safe_state().and_then(|()| s.atten.atten_db())) {
            // The read-back is checked too: a safe state that is not safe must be heard.
            Ok(db) => match self.bench.exposes_receivers(db) {
                None => tracing::info!("safe state: attenuator at {db} dB, ranging stopped"),
                Some((message, hint)) => errs.push(RunError::Exposed {
                    message: format!(
                        "after its safe state the attenuator reads {db} dB: {message}"
                    ),
                    hint: format!("switch the RF off at once; {hint}"),
                }),
            },
            Err(e) => errs.push(e.into()),
        }
        if let Some(chamber) = &self.chamber {
            if let Err(e) = self.persistently(|_| chamber.safe_state()) {
                errs.push(e.into());
            }
        }
        errs
    }

    /// Runs `op` until it succeeds or the policy's retries are spent, waiting as [`retrying`]
    /// does but without heeding a stop request (this is what a stop does last).
    ///
    /// [`retrying`]: Session::retrying
    fn persistently<T>(
        &self,
        op: impl Fn(&Self) -> Result<T, InstrumentError>,
    ) -> Result<T, InstrumentError> {
        let mut attempt = 0u32;
        loop {
            match op(self) {
                Ok(v) => return Ok(v),
                Err(e @ (InstrumentError::Gone { .. } | InstrumentError::Refused { .. })) => {
                    return Err(e)
                }
                Err(e) if attempt >= self.policy.retries => return Err(e),
                Err(e) => {
                    attempt += 1;
                    let wait_ms = self.policy.wait_before_ms(attempt);
                    tracing::warn!("safe state: {e}; retry {attempt} in {wait_ms} ms");
                    std::thread::sleep(self.clock.spend(BenchClock::ms_to_ps(wait_ms)));
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::clock::ClockMode;
    use crate::data::DeviceExchange;
    use crate::instrument::{Attenuator, BurstSpec, Owned, RangingDevice};
    use async_trait::async_trait;

    /// An attenuator whose first `failures` commands fail as a flaky link would.
    struct Flaky {
        failures: u32,
        db: f64,
    }

    #[async_trait]
    impl Attenuator for Flaky {
        async fn identify(&mut self) -> Result<String, InstrumentError> {
            Ok("flaky".into())
        }
        async fn set_atten_db(&mut self, db: f64) -> Result<(), InstrumentError> {
            if self.failures > 0 {
                self.failures -= 1;
                return Err(InstrumentError::Transient {
                    role: "attenuator".into(),
                    message: "no reply".into(),
                });
            }
            self.db = db;
            Ok(())
        }
        async fn atten_db(&mut self) -> Result<f64, InstrumentError> {
            Ok(self.db)
        }
        async fn safe_state(&mut self) -> Result<(), InstrumentError> {
            self.set_atten_db(95.0).await
        }
    }

    struct Idle;

    #[async_trait]
    impl RangingDevice for Idle {
        async fn identify(&mut self) -> Result<String, InstrumentError> {
            Ok("idle".into())
        }
        async fn burst(&mut self, _: &BurstSpec) -> Result<Vec<DeviceExchange>, InstrumentError> {
            Ok(Vec::new())
        }
        async fn safe_state(&mut self) -> Result<(), InstrumentError> {
            Ok(())
        }
    }

    /// An attenuator that logs every setting it receives; its safe state is `safe_db`.
    struct Logging {
        log: Arc<std::sync::Mutex<Vec<f64>>>,
        db: f64,
        safe_db: f64,
    }

    #[async_trait]
    impl Attenuator for Logging {
        async fn identify(&mut self) -> Result<String, InstrumentError> {
            Ok("logging".into())
        }
        async fn set_atten_db(&mut self, db: f64) -> Result<(), InstrumentError> {
            self.log.lock().expect("log").push(db);
            self.db = db;
            Ok(())
        }
        async fn atten_db(&mut self) -> Result<f64, InstrumentError> {
            Ok(self.db)
        }
        async fn safe_state(&mut self) -> Result<(), InstrumentError> {
            let db = self.safe_db;
            self.set_atten_db(db).await
        }
    }

    fn session(failures: u32) -> Session {
        session_with(Box::new(Flaky { failures, db: 10.0 }))
    }

    fn session_with(attenuator: Box<dyn Attenuator>) -> Session {
        Session::new(
            Arc::new(Bench::built_in().expect("demo bench")),
            Arc::new(BenchClock::new(ClockMode::Virtual)),
            AttenuatorHandle::new(
                Owned::<dyn Attenuator>::spawn("attenuator", attenuator).expect("runtime"),
            ),
            RangingHandle(
                Owned::<dyn RangingDevice>::spawn("dut", Box::new(Idle)).expect("runtime"),
            ),
            Box::new(Vec::<Exchange>::new()),
            "rows",
        )
    }

    #[test]
    fn the_safe_state_is_retried_as_the_policy_retries_commands() {
        // The default policy retries three times: three passing faults still end safe.
        let s = session(3);
        assert!(s.safe_state().is_empty());
        assert_eq!(s.atten.atten_db(), Ok(95.0));
        let s = session(4);
        let errs = s.safe_state();
        assert_eq!(errs.len(), 1, "{errs:?}");
        assert_eq!(s.atten.atten_db(), Ok(10.0));
    }

    fn logging(safe_db: f64) -> (Session, Arc<std::sync::Mutex<Vec<f64>>>) {
        let log = Arc::new(std::sync::Mutex::new(Vec::new()));
        let attenuator = Logging {
            log: log.clone(),
            db: 95.0,
            safe_db,
        };
        (session_with(Box::new(attenuator)), log)
    }

    #[test]
    fn a_refused_setting_never_reaches_the_attenuator() {
        // The demo bench needs at least 17 dB (15 dBm − 8 dB − A ≤ −10 dBm).
        let (mut s, log) = logging(95.0);
        for db in [16.75, 0.0, 17.1, 95.25, f64::NAN, f64::INFINITY] {
            let refused = s.set_atten(db);
            assert!(
                matches!(refused, Err(RunError::Refused { .. })),
                "{db}: {refused:?}"
            );
        }
        assert!(log.lock().expect("log").is_empty());
        s.set_atten(17.0).expect("the limit itself is allowed");
        s.set_atten(40.0).expect("allowed");
        assert_eq!(*log.lock().expect("log"), vec![17.0, 40.0]);
    }

    #[test]
    fn a_safe_state_that_leaves_a_receiver_exposed_is_reported() {
        let (s, _) = logging(10.0);
        let errs = s.safe_state();
        assert!(
            errs.iter().any(|e| matches!(e, RunError::Exposed { .. })),
            "{errs:?}"
        );
        let (s, log) = logging(95.0);
        assert!(s.safe_state().is_empty());
        assert_eq!(*log.lock().expect("log"), vec![95.0]);
    }

    /// An attenuator that refuses every setting, as an instrument reporting a SCPI error does,
    /// and counts how often it was asked.
    struct Refusing {
        asked: Arc<std::sync::Mutex<u32>>,
    }

    #[async_trait]
    impl Attenuator for Refusing {
        async fn identify(&mut self) -> Result<String, InstrumentError> {
            Ok("refusing".into())
        }
        async fn set_atten_db(&mut self, _: f64) -> Result<(), InstrumentError> {
            *self.asked.lock().expect("count") += 1;
            Err(InstrumentError::Refused {
                role: "attenuator".into(),
                message: "-222,\"Data out of range\"".into(),
            })
        }
        async fn atten_db(&mut self) -> Result<f64, InstrumentError> {
            Ok(95.0)
        }
        async fn safe_state(&mut self) -> Result<(), InstrumentError> {
            Ok(())
        }
    }

    #[test]
    fn a_refusal_is_not_retried() {
        // The default policy retries passing faults three times; a refusal would be refused
        // again, so it is asked once and counted as a fault without retries.
        let asked = Arc::new(std::sync::Mutex::new(0));
        let mut s = session_with(Box::new(Refusing {
            asked: asked.clone(),
        }));
        let e = s.set_atten(40.0).expect_err("refused");
        assert!(
            matches!(e, RunError::Instrument(InstrumentError::Refused { .. })),
            "{e:?}"
        );
        assert_eq!(*asked.lock().expect("count"), 1);
        let tally = &s.faults["attenuator"];
        assert_eq!((tally.faults, tally.retries), (1, 0));
    }
}
