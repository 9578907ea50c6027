//! `taucal resume`: continue a run whose process died or was stopped.

use super::log::{self, Verbosity};
use super::progress::Progress;
use super::{bench_arg, run, Exit};
use crate::data::run_dir::files;
use crate::diagnostic::Diagnostic;
use crate::runner::run::execute;
use crate::runner::{RunObserver, Unobserved};

/// Prepares the interrupted run, replays it to its last checkpoint and carries on.
pub fn run(args: super::args::ResumeArgs, verbosity: Verbosity) -> Result<Exit, Diagnostic> {
    let top = args.run_dir.join(files::MANIFEST);
    if let Ok(Some(_)) = crate::data::station_manifest::StationManifest::read_if_station(&top) {
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
    let observer: Box<dyn RunObserver> = match Progress::start(verbosity, &estimate) {
        Some(p) => Box::new(p),
        None => Box::new(Unobserved),
    };
    let report = execute(
        request,
        |dir| {
            log::open_run_logs(dir, files::LOG, files::JSON_LOG, true);
            log::notice(&format!("taucal: resuming {}", dir.display()));
        },
        observer,
        ledger.as_mut(),
    )?;
    Ok(run::outcome(&report))
}
