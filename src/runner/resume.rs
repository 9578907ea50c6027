//! Preparing `taucal resume`: the interrupted run's manifest, recipe and bench (unchanged since,
//! or nothing resumes), and its exchanges cut back to the last checkpoint: a half-done point is
//! redone from its start, so nothing is lost and nothing is recorded twice. The record goes on
//! in the version its header has (an older run's stays version 1), which the manifest states.

use super::journal::last_checkpoint;
use super::request::{Resumption, RunRequest};
use crate::bench::Bench;
use crate::data::manifest::sha256_hex;
use crate::data::run_dir::files;
use crate::data::{
    read_exchanges, Exchange, ExchangeWriter, Manifest, RecordSink, RecordVersion, RunStatus,
};
use crate::diagnostic::Diagnostic;
use std::path::Path;
use std::sync::Arc;

/// Everything `execute` needs to continue the run in `dir`.
pub fn prepare(dir: &Path) -> Result<RunRequest, Diagnostic> {
    let manifest_path = dir.join(files::MANIFEST);
    let read = || {
        Manifest::read(&manifest_path).map_err(|e| {
            Diagnostic::in_file(
                &manifest_path,
                format!("cannot read the run's manifest: {e}"),
            )
            .with_hint("give the directory of a run that taucal started")
        })
    };
    // Not a run directory: say so before touching it. A run still going must not have its
    // record cut under it, so the lock comes before anything else is read, and the manifest
    // is read again under it (the other process may have finished meanwhile).
    read()?;
    let lock = super::claim::existing(dir)?;
    let manifest = read()?;
    if manifest.status == RunStatus::Completed {
        return Err(
            Diagnostic::plain(format!("{} already completed", dir.display()))
                .with_hint("start a new run with `taucal run`; `taucal fit` refits this one"),
        );
    }
    let bench = if manifest.bench.file.is_empty() {
        Bench::built_in()?
    } else {
        Bench::load(Path::new(&manifest.bench.file))?
    };
    unchanged(
        "bench",
        &bench.source.path,
        &bench.source.text,
        &manifest.bench.sha256,
    )?;
    // A slot's run continues on its slot of the bench.
    let bench = match &manifest.slot {
        Some(name) => bench
            .slots
            .iter()
            .position(|s| &s.name == name)
            .and_then(|i| bench.for_slot(i))
            .ok_or_else(|| {
                Diagnostic::in_file(
                    &bench.source.path,
                    format!("the bench has no slot `{name}`, which this run calibrated"),
                )
                .with_hint("restore the bench the run used, or start a new run")
            })?,
        None => bench,
    };
    let plan = crate::recipe::load(
        Path::new(&manifest.recipe.file),
        &manifest.recipe.overrides,
        &bench,
    )?;
    unchanged(
        "recipe",
        &plan.source.path,
        &plan.source.text,
        &manifest.recipe.sha256,
    )?;
    super::inputs::unchanged(&manifest.inputs, &super::inputs::input_files(&plan, &bench))?;
    for stage in &plan.stages {
        if let crate::recipe::Stage::Script(s) = stage {
            crate::script::check(&s.source)?;
        }
    }
    let journal = dir.join(files::JOURNAL);
    let keep = last_checkpoint(&journal)
        .map_err(|e| Diagnostic::in_file(&journal, format!("cannot read the journal: {e}")))?
        .map_or(0, |c| c.rows);
    let exchanges = dir.join(files::EXCHANGES);
    let version = record_version(&exchanges, &manifest)?;
    let replay = cut_exchanges(&exchanges, version, keep)?;
    tracing::info!(
        "resuming {}: {} exchanges kept up to the last checkpoint",
        dir.display(),
        replay.len()
    );
    Ok(RunRequest {
        plan,
        bench: Arc::new(bench),
        overrides: manifest.recipe.overrides.clone(),
        out: None,
        seed: manifest.seed,
        realtime: manifest.realtime,
        unit: manifest.unit_serial.clone(),
        station: manifest.station.clone().unwrap_or_default(),
        seat: None,
        attenuator: None,
        resume: Some(Resumption {
            dir: dir.to_path_buf(),
            manifest,
            replay,
            lock,
        }),
    })
}

fn unchanged(what: &str, path: &Path, text: &str, sha256: &str) -> Result<(), Diagnostic> {
    if sha256_hex(text.as_bytes()) == sha256 {
        Ok(())
    } else {
        Err(
            Diagnostic::in_file(path, format!("the {what} changed since the run began")).with_hint(
                format!("restore the {what} the run used (SHA-256 {sha256}), or start a new run"),
            ),
        )
    }
}

/// The record version of the run's exchanges file, from its header; refused where it is not
/// one taucal writes or not the one the manifest states (the file was replaced).
fn record_version(path: &Path, manifest: &Manifest) -> Result<RecordVersion, Diagnostic> {
    let version = RecordVersion::of_file(path).map_err(|e| {
        Diagnostic::in_file(path, format!("cannot continue this record: {e}"))
            .with_hint("restore the exchanges.csv the run wrote, or start a new run")
    })?;
    if version.number() != manifest.record_version {
        return Err(Diagnostic::in_file(
            path,
            format!(
                "the header is record version {}, but the manifest says the run records \
                 version {}",
                version.number(),
                manifest.record_version
            ),
        )
        .with_hint("restore the exchanges.csv the run wrote, or start a new run"));
    }
    Ok(version)
}

/// Keeps the first `keep` exchanges of the file (rewritten through a temporary file, in its
/// own record `version`) and returns them.
fn cut_exchanges(
    path: &Path,
    version: RecordVersion,
    keep: u64,
) -> Result<Vec<Exchange>, Diagnostic> {
    let bad = |e: String| Diagnostic::in_file(path, e);
    let mut rows = Vec::new();
    for row in read_exchanges(path).map_err(|e| bad(e.to_string()))? {
        if rows.len() as u64 == keep {
            break;
        }
        rows.push(row.map_err(|e| bad(e.to_string()))?);
    }
    if (rows.len() as u64) < keep {
        return Err(bad(format!(
            "holds {} exchanges, but the journal says {keep} were recorded",
            rows.len()
        ))
        .with_hint("the run directory is damaged; start a new run"));
    }
    let tmp = path.with_extension("csv.tmp");
    let write = || -> std::io::Result<()> {
        let mut w = ExchangeWriter::create_version(&tmp, version)?;
        w.write_burst(&rows)?;
        w.sync()?;
        std::fs::rename(&tmp, path)
    };
    write().map_err(|e| bad(format!("cannot cut back to the last checkpoint: {e}")))?;
    Ok(rows)
}
