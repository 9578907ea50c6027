//! One run from start to end, as a pipeline of phases each in a file of its own (`prepare`,
//! `connect`, `record`, `outputs`, `accept`, `finalise`). Whatever happens after the run
//! directory exists, the data recorded so far stay on disk, the instruments end in their safe
//! state and the manifest says how the run ended.

use super::accept::accept;
use super::connect::{connect, identify};
use super::finalise::finalise;
use super::finalise::RunReport;
use super::outputs::fit_and_write;
use super::prepare::prepare;
use super::record::record;
use super::request::RunRequest;
use super::RunObserver;
use crate::diagnostic::Diagnostic;
use std::path::Path;

/// Runs `req`, phase by phase: prepare (run directory, manifest, clock) → connect (instruments,
/// stop flag) → record (stages, then the safe state however they ended) → fit and write the
/// outputs → accept → finalise (manifest, report). `on_dir` is called once the run directory
/// exists (to start its log); `observer` hears of stages, points and bursts as they happen.
/// Errors returned here happen before anything runs; later failures are in the report.
pub fn execute(
    req: RunRequest,
    on_dir: impl FnOnce(&Path),
    observer: Box<dyn RunObserver>,
) -> Result<RunReport, Diagnostic> {
    let mut prepared = prepare(&req, on_dir)?;
    let connected = connect(&req.bench, prepared.clock.clone(), prepared.seed)?;
    let identified = identify(&connected.instruments, &mut prepared.manifest);
    let (recorded, stages_ended) = record(&req, &prepared, connected, identified, observer);
    let (outputs, written) = fit_and_write(&req.plan, &req.bench, &prepared, &recorded);
    // The first failure is the one the run reports; later ones are often its consequences.
    let ended = stages_ended.and(written);
    let checks = accept(
        &req.plan.accept,
        outputs.fit.as_ref(),
        &outputs.verify,
        ended.is_ok(),
    );
    Ok(finalise(
        prepared, &req.bench, recorded, outputs, checks, ended,
    ))
}
