//! A run's third phase: the plan's stages on the instruments, into the run's exchanges and
//! journal; then every instrument in its safe state, however the stages ended.

use super::connect::Connected;
use super::journal::Journal;
use super::prepare::Prepared;
use super::report_watch::ReportWatch;
use super::request::RunRequest;
use super::{
    run_cells, run_gain_map, run_soak, run_sweep, run_verify, RunError, RunEvent, RunObserver,
    Session,
};
use crate::data::manifest::{Counts, FaultTally};
use crate::data::run_dir::files;
use crate::data::{Exchange, ExchangeWriter, RecordSink};
use crate::fit::gainmap::GainMap;
use crate::recipe::{Channel, Plan, Stage};
use std::cell::RefCell;
use std::collections::BTreeMap;
use std::rc::Rc;

/// What the stages left for the fit and the manifest.
#[derive(Default)]
pub struct Recorded {
    /// Exchanges, bursts and points recorded.
    pub counts: Counts,
    /// Values recorded by scripts.
    pub results: BTreeMap<String, toml::Value>,
    /// Faults and retries per role.
    pub faults: BTreeMap<String, FaultTally>,
    /// Points skipped after their retries ran out.
    pub skipped_points: Vec<String>,
    /// Verification stages run: name and single-state reference level (dBm).
    pub verify_stages: Vec<(String, f64)>,
    /// Gain maps found, by stage name.
    pub gain_maps: BTreeMap<String, (Channel, GainMap)>,
    /// The K the device said it removes from the ranges it reports.
    pub applied_k_ps: Option<f64>,
}

/// Runs the plan's stages on the connected instruments (none when `identified` is an error or
/// the run's files cannot be opened), then puts every instrument in its safe state. Returns what was recorded and the first
/// failure: identifying, opening the run's files, a stage, or the safe state.
pub fn record(
    req: &RunRequest,
    prepared: &Prepared,
    connected: Connected,
    identified: Result<(), RunError>,
    observer: Box<dyn RunObserver>,
) -> (Recorded, Result<(), RunError>) {
    let Connected {
        instruments,
        stop,
        signals,
    } = connected;
    let exchanges_path = prepared.dir.join(files::EXCHANGES);
    let writer = match &req.resume {
        Some(_) => ExchangeWriter::append(&exchanges_path),
        None => ExchangeWriter::create(&exchanges_path),
    };
    let journal_path = prepared.dir.join(files::JOURNAL);
    let opened = writer.and_then(|w| Journal::open(&journal_path).map(|j| (w, j)));
    // Without its files the run records nothing and runs no stage, but its instruments, which
    // may have powered up anywhere, still end in their safe state.
    let (sink, journal, ready): (Box<dyn RecordSink>, _, _) = match opened {
        Ok((writer, journal)) => (Box::new(writer), Some(journal), identified),
        Err(e) => (
            Box::new(Vec::<Exchange>::new()),
            None,
            identified.and(Err(RunError::io(&exchanges_path, e))),
        ),
    };
    let mut s = Session::new(
        req.bench.clone(),
        prepared.clock.clone(),
        instruments.attenuator,
        instruments.dut,
        sink,
        &exchanges_path.display().to_string(),
    );
    s.reject_mad = req.plan.reject_mad;
    s.policy = req.plan.faults;
    s.set_chamber(instruments.chamber);
    s.set_stop(stop);
    if let Some(journal) = journal {
        s.set_journal(journal);
    }
    if let Some(r) = &req.resume {
        // A slot's exchanges depended on its neighbours' use of the shared reference, which a
        // resumption does not repeat: its record is taken as it stands, as a real bench's is.
        s.set_replay(
            r.replay.clone(),
            prepared.simulated && req.bench.slot.is_none(),
        );
        s.report_watch = ReportWatch::knowing_applied_k(r.manifest.fit.applied_k_ps);
    }
    s.set_observer(observer);
    let session = Rc::new(RefCell::new(s));
    let ended = stages_then_safe_state(&req.plan, &session, ready);
    let mut s = session.borrow_mut();
    let recorded = Recorded {
        counts: std::mem::take(&mut s.counts),
        results: std::mem::take(&mut s.results),
        faults: std::mem::take(&mut s.faults),
        skipped_points: std::mem::take(&mut s.skipped_points),
        verify_stages: std::mem::take(&mut s.verify_stages),
        gain_maps: std::mem::take(&mut s.gain_maps),
        applied_k_ps: s.report_watch.applied_k_ps(),
    };
    drop(s);
    drop(session);
    drop(signals);
    (recorded, ended)
}

/// The stages (when `ready`), then the safe state whatever they returned. The first failure
/// wins; every safe-state failure is logged.
fn stages_then_safe_state(
    plan: &Plan,
    session: &Rc<RefCell<Session>>,
    ready: Result<(), RunError>,
) -> Result<(), RunError> {
    let ran = ready
        .and_then(|()| run_stages(plan, session))
        .and_then(|()| session.borrow_mut().checkpoint());
    session.borrow_mut().notify(&RunEvent::StagesEnded);
    let mut safe = Ok(());
    for e in session.borrow().safe_state() {
        tracing::error!("safe state: {e}");
        safe = safe.and(Err(e));
    }
    ran.and(safe)
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
            Stage::Cells(cells) => run_cells(&mut session.borrow_mut(), cells)?,
            Stage::Script(script) => {
                crate::script::run_script(session.clone(), script, &plan.vars)?
            }
        }
    }
    Ok(())
}
