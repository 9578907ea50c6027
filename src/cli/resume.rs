//! `taucal resume`: continue a run whose process died or was stopped.

use super::log::{self, Verbosity};
use super::progress::Progress;
use super::{bench_arg, run, Exit};
use crate::data::run_dir::files;
use crate::diagnostic::Diagnostic;
use crate::runner::run::execute;
use crate::web::live::{PlanFacts, ProgressFrom};

/// Prepares the interrupted run, replays it to its last checkpoint and carries on.
pub fn run(args: super::args::ResumeArgs, verbosity: Verbosity) -> Result<Exit, Diagnostic> {
    let top = args.run_dir.join(files::MANIFEST);
    if let Ok(Some(_)) = crate::data::station_manifest::StationManifest::read_if_station(&top) {
        if args.watch.is_some() {
            return Err(Diagnostic::plain(
                "--watch serves one run's page, and this station's slots each run one",
            )
            .with_hint(
                "resume the station without --watch and watch a slot: taucal watch RUN_DIR/slot-NAME",
            ));
        }
        return super::run_station::resume(&args.run_dir, &args.store);
    }
    let mut request = crate::runner::resume::prepare(&args.run_dir)?;
    let mut ledger = super::store_ledger::StoreLedger::for_run(&args.store, &request.bench)?;
    if request.station.is_empty() {
        request.station = super::store_ledger::station(None, &request.bench);
    }
    log::notice(&format!(
        "taucal: {}",
        bench_arg::describe(&request.bench, request.seed)
    ));
    let estimate = crate::runner::estimate::estimate(&request.plan, &request.bench);
    let live = match &args.watch {
        Some(addr) => Some(super::watch::start(
            addr,
            args.allow_remote,
            request.bench.clone(),
            PlanFacts::of(&request.plan, &request.bench),
            ProgressFrom::Events,
            None,
        )?),
        None => None,
    };
    let observer = run::observers(Progress::start(verbosity, &estimate), live.as_ref());
    let report = execute(
        request,
        |dir| {
            log::open_run_logs(dir, files::LOG, files::JSON_LOG, true);
            log::notice(&format!("taucal: resuming {}", dir.display()));
            if let Some(live) = &live {
                log::notice(&format!("taucal: watch the run at {}", live.url()));
                live.follow(dir);
            }
        },
        observer,
        ledger.as_mut(),
    );
    super::watch::finish(live);
    Ok(run::outcome(&report?))
}
