//! One run from start to end, as a pipeline of phases each in a file of its own (`prepare`,
//! `connect`, `record`, `outputs`, `accept`, `finalise`). Whatever happens after the run
//! directory exists, the data recorded so far stay on disk, the instruments end in their safe
//! state and the manifest says how the run ended.

use super::accept::accept;
use super::connect::{connect, identify};
use super::finalise::finalise;
use super::outputs::fit_and_write;
use super::prepare::prepare;
use super::record::record;
use super::{RunError, RunObserver};
use crate::bench::Bench;
use crate::data::Manifest;
use crate::diagnostic::Diagnostic;
use crate::fit::verify::VerifyRow;
use crate::fit::FitResult;
use crate::recipe::Plan;
use std::path::{Path, PathBuf};
use std::sync::Arc;

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
