//! A run's last phase: the manifest records what was done and how the run ended, and the
//! report is made from the files written.

use super::outputs::Outputs;
use super::prepare::Prepared;
use super::record::Recorded;
use super::RunError;
use crate::bench::Bench;
use crate::data::manifest::AcceptCheck;
use crate::data::{run_dir, Manifest, RunStatus};
use crate::fit::verify::VerifyRow;
use crate::fit::FitResult;
use std::path::PathBuf;

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

/// Writes the final manifest and the report. `ended` is the run's first failure, if any; a
/// manifest that cannot be written fails the run too (after the fact, so only the returned
/// report says so).
pub fn finalise(
    prepared: Prepared,
    bench: &Bench,
    recorded: Recorded,
    outputs: Outputs,
    acceptance: Vec<AcceptCheck>,
    ended: Result<(), RunError>,
) -> RunReport {
    let Prepared {
        wall,
        dir,
        mut manifest,
        manifest_path,
        earlier_wall_s,
        clock,
        lock: _lock,
        ..
    } = prepared;
    manifest.counts = recorded.counts;
    manifest.results = recorded.results;
    manifest.faults = recorded.faults;
    manifest.skipped_points = recorded.skipped_points;
    manifest.fit.verify_stages = recorded.verify_stages.into_iter().map(|(n, _)| n).collect();
    manifest.fit.single_state = outputs.single_state;
    manifest.fit.applied_k_ps = recorded.applied_k_ps;
    manifest.acceptance = acceptance;
    manifest.status = match &ended {
        Ok(()) => RunStatus::Completed,
        Err(RunError::Interrupted) => RunStatus::Stopped,
        Err(_) => RunStatus::Failed,
    };
    manifest.error = ended.as_ref().err().map(ToString::to_string);
    manifest.bench_time_s = clock.now_s();
    manifest.wall_time_s = earlier_wall_s + wall.elapsed().as_secs_f64();
    manifest.finished_utc = Some(run_dir::rfc3339(time::OffsetDateTime::now_utc()));
    let mut manifest_unwritten = None;
    let written = manifest.write(&manifest_path).map_err(|e| {
        manifest_unwritten = Some(e.to_string());
        RunError::io(&manifest_path, e)
    });
    // The report is read from the files just written, exactly as `taucal report` reads them; a
    // report that cannot be made loses no data, so it is a warning.
    if let Err(e) = crate::report::write(&dir, bench) {
        tracing::warn!("report: {e}");
    }
    RunReport {
        dir,
        manifest,
        fit: outputs.fit,
        verify: outputs.verify,
        failure: ended.and(written).err(),
        manifest_unwritten,
    }
}
