//! One run from start to end: run directory, instruments, stages, safe state, fit, acceptance,
//! manifest. Whatever happens after the run directory exists, the data recorded so far stay on
//! disk, the instruments end in their safe state and the manifest says how the run ended.

use super::journal::Journal;
use super::tabulate::{FitSettings, Tabulated};
use super::{
    run_gain_map, run_soak, run_sweep, run_verify, tabulate, BenchClock, ClockMode, RunError,
    RunEvent, RunObserver, Session, StopFlag,
};
use crate::bench::Bench;
use crate::data::manifest::{
    sha256_hex, write_atomic, AcceptCheck, BenchInfo, FitInfo, RecipeInfo, SingleState,
};
use crate::data::run_dir::{self, files};
use crate::data::{ExchangeWriter, Manifest, RunStatus};
use crate::diagnostic::Diagnostic;
use crate::fit::gainmap::GainMap;
use crate::fit::verify::{self, VerifyRow};
use crate::fit::{FitResult, RowSource};
use crate::instrument::connect::connect;
use crate::recipe::{Acceptance, Channel, Plan, Stage};
use std::cell::RefCell;
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::rc::Rc;
use std::sync::Arc;
use std::time::Instant;

/// What to run, where, and how.
pub struct RunRequest {
    /// The validated recipe.
    pub plan: Plan,
    /// The bench it was validated against.
    pub bench: Arc<Bench>,
    /// `--set` overrides as typed (for the manifest).
    pub overrides: Vec<String>,
    /// `--out`: the run directory to use instead of `runs/<time>-<name>`.
    pub out: Option<PathBuf>,
    /// `--seed`: overrides a simulated bench's seed.
    pub seed: Option<u64>,
    /// `--realtime`: a simulated bench keeps wall-clock pace.
    pub realtime: bool,
    /// Continue an interrupted run instead of starting one.
    pub resume: Option<Resumption>,
}

/// What a resumed run starts from.
pub struct Resumption {
    /// The interrupted run's directory.
    pub dir: PathBuf,
    /// Its manifest.
    pub manifest: Manifest,
    /// Its exchanges up to the last checkpoint (the file is already cut there).
    pub replay: Vec<crate::data::Exchange>,
    /// The directory's lock, held from before the record was cut until the run ends.
    pub lock: crate::data::run_lock::RunLock,
}

/// How a run ended.
pub struct RunReport {
    /// The run directory.
    pub dir: PathBuf,
    /// The final manifest, as written.
    pub manifest: Manifest,
    /// The table fitted from what was recorded (absent if the exchanges could not be read).
    pub fit: Option<FitResult>,
    /// Verification rows, when the recipe verifies.
    pub verify: Vec<VerifyRow>,
    /// Why the run stopped early, if it did.
    pub failure: Option<RunError>,
    /// Why the final manifest could not be written, if it could not: the one on disk may
    /// still say `running`.
    pub manifest_unwritten: Option<String>,
}

impl RunReport {
    /// True when every acceptance limit was met.
    pub fn accepted(&self) -> bool {
        self.manifest.acceptance.iter().all(|c| c.passed)
    }
}

/// Runs `req`. `on_dir` is called once the run directory exists (to start its log); `observer`
/// hears of stages, points and bursts as they happen. Errors returned here happen before
/// anything runs; later failures are in the report.
pub fn execute(
    req: RunRequest,
    on_dir: impl FnOnce(&Path),
    observer: Box<dyn RunObserver>,
) -> Result<RunReport, Diagnostic> {
    let wall = Instant::now();
    let now = time::OffsetDateTime::now_utc();
    // A resumption holds its directory's lock already (it took it before cutting the record).
    let (dir, _lock) = match &req.resume {
        Some(r) => (r.dir.clone(), None),
        None => {
            let (dir, lock) = super::claim::fresh(req.out.as_deref(), &req.plan.name, now)?;
            (dir, Some(lock))
        }
    };
    on_dir(&dir);
    let bench = req.bench;
    let simulated = bench.is_simulated();
    let seed = req.seed.or(bench.sim.as_ref().map(|s| s.seed)).unwrap_or(1);
    let mut manifest = Manifest {
        status: RunStatus::Running,
        bench_time_s: 0.0,
        wall_time_s: 0.0,
        taucal_version: env!("CARGO_PKG_VERSION").to_string(),
        seed: simulated.then_some(seed),
        started_utc: run_dir::rfc3339(now),
        finished_utc: None,
        error: None,
        recipe: RecipeInfo {
            name: req.plan.name.clone(),
            path: req.plan.source.path.display().to_string(),
            file: absolute(&req.plan.source.path),
            sha256: sha256_hex(req.plan.source.text.as_bytes()),
            overrides: req.overrides.clone(),
        },
        bench: BenchInfo {
            name: bench.name.clone(),
            path: bench.source.path.display().to_string(),
            file: if bench.source.path.is_file() {
                absolute(&bench.source.path)
            } else {
                String::new()
            },
            sha256: sha256_hex(bench.source.text.as_bytes()),
            simulated,
        },
        inputs: super::inputs::input_files(&req.plan, &bench),
        instruments: BTreeMap::new(),
        counts: Default::default(),
        acceptance: Vec::new(),
        results: BTreeMap::new(),
        fit: FitInfo {
            reject_mad: req.plan.reject_mad,
            gain_states: req.plan.gain_states,
            ..FitInfo::default()
        },
        realtime: req.realtime,
        resumes: 0,
        faults: BTreeMap::new(),
        skipped_points: Vec::new(),
    };
    let earlier_wall_s = match &req.resume {
        Some(r) => {
            manifest.started_utc = r.manifest.started_utc.clone();
            manifest.resumes = r.manifest.resumes + 1;
            r.manifest.wall_time_s
        }
        None => 0.0,
    };
    let manifest_path = dir.join(files::MANIFEST);
    let io_err = |path: &Path, source: std::io::Error| RunError::Io {
        path: path.display().to_string(),
        source,
    };
    manifest
        .write(&manifest_path)
        .map_err(|e| Diagnostic::plain(format!("cannot write {}: {e}", manifest_path.display())))?;
    let mode = match (simulated, req.realtime) {
        (true, false) => ClockMode::Virtual,
        (true, true) => ClockMode::Paced,
        (false, _) => ClockMode::Wall,
    };
    let clock = Arc::new(BenchClock::new(mode));
    // Listens for Ctrl-C; the instruments run on runtimes of their own.
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(1)
        .enable_all()
        .build()
        .map_err(|e| Diagnostic::plain(format!("cannot start the signal runtime: {e}")))?;
    let instruments = connect(&bench, clock.clone(), seed)?;
    let exchanges_path = dir.join(files::EXCHANGES);
    let stop = StopFlag::default();
    stop.listen(rt.handle());

    let mut failure = None;
    let chamber_id = instruments
        .chamber
        .as_ref()
        .map(|c| ("chamber", c.identify()));
    let ids = [
        ("attenuator", instruments.attenuator.identify()),
        ("dut", instruments.dut.identify()),
    ];
    for (role, id) in ids.into_iter().chain(chamber_id) {
        match id {
            Ok(id) => {
                tracing::info!("{role}: {id}");
                manifest.instruments.insert(role.to_string(), id);
            }
            Err(e) => failure = failure.or(Some(e.into())),
        }
    }
    let writer = match &req.resume {
        Some(_) => ExchangeWriter::append(&exchanges_path),
        None => ExchangeWriter::create(&exchanges_path),
    };
    let journal_path = dir.join(files::JOURNAL);
    let session = match writer.and_then(|w| Journal::open(&journal_path).map(|j| (w, j))) {
        Ok((writer, journal)) => {
            let mut s = Session::new(
                bench.clone(),
                clock.clone(),
                instruments.attenuator,
                instruments.dut,
                Box::new(writer),
                &exchanges_path.display().to_string(),
            );
            s.reject_mad = req.plan.reject_mad;
            s.policy = req.plan.faults;
            s.set_chamber(instruments.chamber);
            s.set_stop(stop.clone());
            s.set_journal(journal);
            if let Some(r) = &req.resume {
                s.set_replay(r.replay.clone(), simulated);
            }
            s.set_observer(observer);
            Some(Rc::new(RefCell::new(s)))
        }
        Err(e) => {
            failure = failure.or(Some(io_err(&exchanges_path, e)));
            None
        }
    };
    if let Some(session) = &session {
        if failure.is_none() {
            failure = run_stages(&req.plan, session)
                .and_then(|()| session.borrow_mut().checkpoint())
                .err();
        }
        session.borrow_mut().notify(&RunEvent::StagesEnded);
        for e in session.borrow().safe_state() {
            tracing::error!("safe state: {e}");
            failure = failure.or(Some(e));
        }
        let s = session.borrow();
        manifest.counts = s.counts.clone();
        manifest.results = s.results.clone();
        manifest.faults = s.faults.clone();
        manifest.skipped_points = s.skipped_points.clone();
        manifest.fit.verify_stages = s.verify_stages.iter().map(|(n, _)| n.clone()).collect();
        if !s.gain_maps.is_empty() {
            let path = dir.join(files::GAINMAP);
            if let Err(e) = write_atomic(&path, gainmap_csv(&bench, &s.gain_maps).as_bytes()) {
                failure = failure.or(Some(io_err(&path, e)));
            }
        }
    }
    let verify_levels: Vec<(String, f64)> = session
        .as_ref()
        .map(|s| s.borrow().verify_stages.clone())
        .unwrap_or_default();
    drop(session);
    drop(rt);

    let settings = FitSettings {
        reject_mad: req.plan.reject_mad,
        verify_stages: manifest.fit.verify_stages.clone(),
        gain_states: req.plan.gain_states,
    };
    let (fit, verify_rows) = match tabulate::fit_file(&exchanges_path, &bench, &settings) {
        Ok(Tabulated { fit, checked }) => {
            let table_path = dir.join(files::CALTABLE);
            if let Err(e) = tabulate::write_table(&table_path, &fit) {
                failure = failure.or(Some(io_err(&table_path, e)));
            }
            if !fit.drift.is_empty() {
                let path = dir.join(files::DRIFT);
                if let Err(e) =
                    write_atomic(&path, crate::fit::drift::drift_csv(&fit.drift).as_bytes())
                {
                    failure = failure.or(Some(io_err(&path, e)));
                }
            }
            let (rows, single) = verification(&req.plan, &bench, &fit, &checked, &verify_levels);
            manifest.fit.single_state = single;
            if !verify_levels.is_empty() {
                let path = dir.join(files::VERIFY);
                if let Err(e) = write_atomic(&path, verify::verify_csv(&rows).as_bytes()) {
                    failure = failure.or(Some(io_err(&path, e)));
                }
            }
            (Some(fit), rows)
        }
        Err(e) => {
            tracing::error!("fit: {e}");
            (None, Vec::new())
        }
    };
    manifest.acceptance = fit
        .as_ref()
        .map_or_else(Vec::new, |f| acceptance(&req.plan.accept, f, &verify_rows));
    for c in &manifest.acceptance {
        tracing::info!("acceptance {}", c.summary(failure.is_none()));
    }
    manifest.status = match &failure {
        None => RunStatus::Completed,
        Some(RunError::Interrupted) => RunStatus::Stopped,
        Some(_) => RunStatus::Failed,
    };
    manifest.error = failure.as_ref().map(ToString::to_string);
    manifest.bench_time_s = clock.now_s();
    manifest.wall_time_s = earlier_wall_s + wall.elapsed().as_secs_f64();
    manifest.finished_utc = Some(run_dir::rfc3339(time::OffsetDateTime::now_utc()));
    let mut manifest_unwritten = None;
    if let Err(e) = manifest.write(&manifest_path) {
        manifest_unwritten = Some(e.to_string());
        failure = failure.or(Some(io_err(&manifest_path, e)));
    }
    // The report is read from the files just written, exactly as `taucal report` reads them; a
    // report that cannot be made loses no data, so it is a warning.
    if let Err(e) = crate::report::write(&dir, &bench) {
        tracing::warn!("report: {e}");
    }
    Ok(RunReport {
        dir,
        manifest,
        fit,
        verify: verify_rows,
        failure,
        manifest_unwritten,
    })
}

/// The absolute form of a path, for finding the file again from another working directory.
fn absolute(path: &Path) -> String {
    std::path::absolute(path)
        .unwrap_or_else(|_| path.to_path_buf())
        .display()
        .to_string()
}

fn run_stages(plan: &Plan, session: &Rc<RefCell<Session>>) -> Result<(), RunError> {
    for (index, stage) in plan.stages.iter().enumerate() {
        session.borrow_mut().notify(&RunEvent::StageBegins {
            index,
            count: plan.stages.len(),
            name: stage.name(),
        });
        tracing::info!("stage `{}` begins", stage.name());
        match stage {
            Stage::Sweep(sweep) => run_sweep(&mut session.borrow_mut(), sweep)?,
            Stage::GainMap(map) => run_gain_map(&mut session.borrow_mut(), map)?,
            Stage::Verify(v) => run_verify(&mut session.borrow_mut(), v)?,
            Stage::Soak(soak) => run_soak(&mut session.borrow_mut(), soak)?,
            Stage::Script(script) => {
                crate::script::run_script(session.clone(), script, &plan.vars)?
            }
        }
    }
    Ok(())
}

/// `gainmap.csv`: each mapped state's plateau as attenuation and as DUT receive level.
fn gainmap_csv(bench: &Bench, maps: &BTreeMap<String, (Channel, GainMap)>) -> String {
    let mut out =
        String::from("center_mhz,bw_mhz,gain_index,atten_min_db,atten_max_db,rx_power_min_dbm,rx_power_max_dbm\n");
    for (channel, map) in maps.values() {
        for p in &map.plateaus {
            out.push_str(&format!(
                "{},{},{},{:.2},{:.2},{:.2},{:.2}\n",
                channel.center_mhz,
                channel.bw_mhz,
                p.gain_index,
                p.atten_min_db,
                p.atten_max_db,
                bench.dut_rx_dbm(p.atten_max_db),
                bench.dut_rx_dbm(p.atten_min_db)
            ));
        }
    }
    out
}

/// Verification rows and the single-state calibrations they compare against.
fn verification(
    plan: &Plan,
    bench: &Bench,
    fit: &FitResult,
    checked: &[verify::Checked],
    levels: &[(String, f64)],
) -> (Vec<VerifyRow>, Vec<SingleState>) {
    let table: BTreeMap<(u32, u32, u32), f64> = fit
        .rows
        .iter()
        .map(|r| ((r.center_mhz, r.bw_mhz, r.gain_index), r.delay_ps))
        .collect();
    let mut single = BTreeMap::new();
    let mut states = Vec::new();
    for (name, rx_dbm) in levels {
        let Some(Stage::Verify(v)) = plan.stages.iter().find(|s| s.name() == name) else {
            continue;
        };
        let ch = v.sweep.channel;
        let atten_db = bench.reference.tx_power_dbm - bench.path.fixed_loss_db - rx_dbm;
        let gain = verify::single_state_gain(checked, ch.center_mhz, ch.bw_mhz, atten_db);
        match gain.and_then(|g| table.get(&(ch.center_mhz, ch.bw_mhz, g)).map(|k| (g, *k))) {
            Some((gain_index, delay_ps)) => {
                tracing::info!(
                    "verify `{name}`: single-state calibration is gain state {gain_index} (at {rx_dbm} dBm), K = {delay_ps:.1} ps"
                );
                single.insert((ch.center_mhz, ch.bw_mhz), delay_ps);
                states.push(SingleState {
                    center_mhz: ch.center_mhz,
                    bw_mhz: ch.bw_mhz,
                    rx_dbm: *rx_dbm,
                    gain_index,
                    delay_ps,
                });
            }
            None => {
                tracing::warn!("verify `{name}`: no table row for the gain state at {rx_dbm} dBm")
            }
        }
    }
    let level = |a: f64| {
        (
            bench.dut_rx_dbm(a),
            bench.reference.tx_power_dbm - bench.dut_rx_dbm(a),
        )
    };
    let (rows, skipped) = verify::verify(checked, &table, &single, level);
    if skipped > 0 {
        tracing::warn!(
            "verification: {skipped} exchanges in gain states the table lacks were skipped"
        );
    }
    (rows, states)
}

/// Evaluates the recipe's acceptance limits on a fitted table and its verification.
pub fn acceptance(accept: &Acceptance, fit: &FitResult, verify: &[VerifyRow]) -> Vec<AcceptCheck> {
    let mut checks = Vec::new();
    if let Some(limit) = accept.max_ci95_ps {
        let worst = fit.rows.iter().map(|r| r.ci95_ps).fold(f64::NAN, f64::max);
        checks.push(AcceptCheck {
            name: "max_ci95_ps".into(),
            limit,
            value: worst,
            passed: worst <= limit,
        });
    }
    if let Some(limit) = accept.min_gain_states {
        // Modelled rows fill in states the run did not reach: they measure nothing.
        let gains: BTreeSet<u32> = fit
            .rows
            .iter()
            .filter(|r| r.source == RowSource::Measured)
            .map(|r| r.gain_index)
            .collect();
        checks.push(AcceptCheck {
            name: "min_gain_states".into(),
            limit: f64::from(limit),
            value: gains.len() as f64,
            passed: gains.len() >= limit as usize,
        });
    }
    if let Some(limit) = accept.max_range_error_m {
        let worst = verify
            .iter()
            .map(|r| r.range_error_table_m.abs())
            .fold(f64::NAN, f64::max);
        checks.push(AcceptCheck {
            name: "max_range_error_m".into(),
            limit,
            value: worst,
            passed: worst <= limit,
        });
    }
    checks
}
