//! A run's first phase: its directory, a manifest there saying the run is under way, and the
//! bench clock. No instrument is touched yet, so a failure here is a [`Diagnostic`].

use super::request::RunRequest;
use crate::clock::{BenchClock, ClockMode};
use crate::data::manifest::{sha256_hex, BenchInfo, FitInfo, RecipeInfo};
use crate::data::run_dir::{self, files};
use crate::data::run_lock::RunLock;
use crate::data::{Manifest, RecordVersion, RunStatus};
use crate::diagnostic::Diagnostic;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Instant;

/// A run with its directory and first manifest written.
pub struct Prepared {
    /// When this process began the run (for the manifest's wall time).
    pub wall: Instant,
    /// The run directory.
    pub dir: PathBuf,
    /// The manifest as it stands; the later phases fill it in.
    pub manifest: Manifest,
    /// Where the manifest is written.
    pub manifest_path: PathBuf,
    /// Wall time spent by the runs this one resumes, seconds.
    pub earlier_wall_s: f64,
    /// The simulated bench's seed (`--seed` or the bench's own).
    pub seed: u64,
    /// True when the bench is simulated.
    pub simulated: bool,
    /// The run's one clock.
    pub clock: Arc<BenchClock>,
    /// The run directory's lock when this run took it (a resumption holds its own), held until
    /// the run ends.
    pub lock: Option<RunLock>,
}

/// Creates (or, resuming, reopens) the run directory, calls `on_dir` with it, and writes the
/// manifest of a run under way.
pub fn prepare(req: &RunRequest, on_dir: impl FnOnce(&Path)) -> Result<Prepared, Diagnostic> {
    let wall = Instant::now();
    let now = time::OffsetDateTime::now_utc();
    // A resumption holds its directory's lock already (it took it before cutting the record).
    let (dir, lock) = match &req.resume {
        Some(r) => (r.dir.clone(), None),
        None => {
            let (dir, lock) = super::claim::fresh(req.out.as_deref(), &req.plan.name, now)?;
            (dir, Some(lock))
        }
    };
    on_dir(&dir);
    let bench = &req.bench;
    let simulated = bench.is_simulated();
    let seed = req.seed.or(bench.sim.as_ref().map(|s| s.seed)).unwrap_or(1);
    let mut manifest = Manifest {
        status: RunStatus::Running,
        bench_time_s: 0.0,
        wall_time_s: 0.0,
        taucal_version: env!("CARGO_PKG_VERSION").to_string(),
        seed: simulated.then_some(seed),
        run_id: Some(uuid::Uuid::new_v4().to_string()),
        unit_serial: req.unit.clone(),
        station: Some(req.station.clone()).filter(|s| !s.is_empty()),
        store_pending: false,
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
        inputs: super::inputs::input_files(&req.plan, bench),
        instruments: BTreeMap::new(),
        counts: Default::default(),
        acceptance: Vec::new(),
        results: BTreeMap::new(),
        fit: FitInfo {
            reject_mad: req.plan.reject_mad,
            gain_states: req.plan.gain_states,
            predict: req.plan.predict.as_ref().map(|p| absolute(&p.path)),
            ..FitInfo::default()
        },
        realtime: req.realtime,
        resumes: 0,
        faults: BTreeMap::new(),
        skipped_points: Vec::new(),
        record_version: RecordVersion::CURRENT.number(),
        caltable_version: crate::fit::caltable::CALTABLE_VERSION,
        reference_certificate: bench.reference.certificate.as_ref().map(|c| {
            crate::data::manifest::CertificateRecord {
                id: c.id.clone(),
                lab: c.lab.clone(),
                issued: c.issued.to_string(),
                due: c.due.to_string(),
                overdue: c
                    .overdue_on(crate::bench::certificate::run_date(now).unwrap_or(now.date())),
            }
        }),
        slot: bench.slot.as_ref().map(|s| s.name.clone()),
    };
    let earlier_wall_s = match &req.resume {
        Some(r) => {
            manifest.started_utc = r.manifest.started_utc.clone();
            // The same run, so the same row in a results store (a run from before run ids
            // keeps the id `store import` derives for it).
            manifest.run_id = r.manifest.run_id.clone();
            manifest.store_pending = r.manifest.store_pending;
            manifest.resumes = r.manifest.resumes + 1;
            // Judged once, on the day the run started.
            if r.manifest.reference_certificate.is_some() {
                manifest.reference_certificate = r.manifest.reference_certificate.clone();
            }
            // Its record goes on in the version it began in.
            manifest.record_version = r.manifest.record_version;
            r.manifest.wall_time_s
        }
        None => 0.0,
    };
    let manifest_path = dir.join(files::MANIFEST);
    manifest
        .write(&manifest_path)
        .map_err(|e| Diagnostic::plain(format!("cannot write {}: {e}", manifest_path.display())))?;
    let mode = match (simulated, req.realtime) {
        (true, false) => ClockMode::Virtual,
        (true, true) => ClockMode::Paced,
        (false, _) => ClockMode::Wall,
    };
    Ok(Prepared {
        wall,
        dir,
        manifest,
        manifest_path,
        earlier_wall_s,
        seed,
        simulated,
        clock: Arc::new(BenchClock::new(mode)),
        lock,
    })
}

/// The absolute form of a path, for finding the file again from another working directory.
fn absolute(path: &Path) -> String {
    std::path::absolute(path)
        .unwrap_or_else(|_| path.to_path_buf())
        .display()
        .to_string()
}
