//! `taucal resume`: continue a run whose process died or was stopped.

use super::args::ResumeArgs;
use super::{bench_arg, log, run, Exit};
use crate::data::run_dir::files;
use crate::diagnostic::Diagnostic;
use crate::runner::run::execute;

/// Prepares the interrupted run, replays it to its last checkpoint and carries on.
pub fn run(args: ResumeArgs) -> Result<Exit, Diagnostic> {
    let request = crate::runner::resume::prepare(&args.run_dir)?;
    eprintln!(
        "taucal: {}",
        bench_arg::describe(&request.bench, request.seed)
    );
    let report = execute(request, |dir| {
        log::append_run_log(&dir.join(files::LOG));
        eprintln!("taucal: resuming {}", dir.display());
    })?;
    Ok(run::outcome(&report))
}
