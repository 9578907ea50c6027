//! One run from start to end, as a pipeline of phases each in a file of its own (`prepare`,
//! `connect`, `record`, `outputs`, `accept`, `finalise`). Whatever happens after the run
//! directory exists, the data recorded so far stay on disk, the instruments end in their safe
//! state and the manifest says how the run ended.

use super::accept::accept;
use super::connect::{connect, identify};
use super::finalise::finalise;
use super::finalise::RunReport;
use super::ledger::RunLedger;
use super::outputs::fit_and_write;
use super::prepare::prepare;
use super::record::record;
use super::request::RunRequest;
use super::RunObserver;
use crate::data::Manifest;
use crate::diagnostic::Diagnostic;
use std::path::Path;

/// Runs `req`, phase by phase: prepare (run directory, manifest, clock) → connect (instruments,
/// stop flag) → record (stages, then the safe state however they ended) → fit and write the
/// outputs → accept → finalise (manifest, report). `on_dir` is called once the run directory
/// exists (to start its log); `observer` hears of stages, points and bursts as they happen;
/// `ledger` records the run once its unit is known and again when it has ended.
/// Errors returned here happen before anything runs; later failures are in the report.
pub fn execute(
    mut req: RunRequest,
    on_dir: impl FnOnce(&Path),
    observer: Box<dyn RunObserver>,
    ledger: &mut dyn RunLedger,
) -> Result<RunReport, Diagnostic> {
    let mut prepared = prepare(&req, on_dir)?;
    let seat = req.seat.take();
    let attenuator = req.attenuator.take();
    let connected = connect(
        &req.bench,
        prepared.clock.clone(),
        prepared.seed,
        seat,
        attenuator,
    )?;
    let identified = identify(&connected.instruments, &mut prepared.manifest);
    let m = &mut prepared.manifest;
    if m.unit_serial.is_none() {
        // The serial the DUT reports (its driver's `serial` capture), else a simulated one's.
        m.unit_serial = connected
            .instruments
            .dut
            .serial()
            .ok()
            .flatten()
            .or_else(|| simulated_serial(&req, prepared.simulated, prepared.seed));
        if m.unit_serial.is_none() {
            tracing::warn!(
                "the DUT reports no serial number (its driver's identify reply captures no \
                 `serial`): the run is filed as an UNIDENTIFIED unit; give --unit SERIAL"
            );
        }
    }
    if let Err(e) = m.write(&prepared.manifest_path) {
        tracing::warn!("cannot write {}: {e}", prepared.manifest_path.display());
    }
    tell(
        ledger,
        &prepared.dir,
        &mut prepared.manifest,
        &prepared.manifest_path,
    );
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
    let (dir, manifest_path) = (prepared.dir.clone(), prepared.manifest_path.clone());
    let mut report = finalise(prepared, &req.bench, recorded, outputs, checks, ended);
    tell(ledger, &dir, &mut report.manifest, &manifest_path);
    Ok(report)
}

/// A simulated DUT's serial: its bench's `[sim.dut] serial`, else `SIM-<seed>`.
fn simulated_serial(req: &RunRequest, simulated: bool, seed: u64) -> Option<String> {
    simulated.then(|| {
        req.bench
            .sim
            .as_ref()
            .and_then(|s| s.dut.serial.clone())
            .unwrap_or_else(|| format!("SIM-{seed}"))
    })
}

/// Records the run in the ledger; whether the ledger now lacks it goes into the manifest
/// (`store_pending`), rewritten when that changes.
fn tell(ledger: &mut dyn RunLedger, dir: &Path, manifest: &mut Manifest, path: &Path) {
    let pending = match ledger.record(dir) {
        Ok(()) => false,
        Err(e) => {
            tracing::warn!(
                "results store {}: cannot record this run ({e}). The run goes on and its \
                 directory keeps everything; `taucal store import {}` adds it later",
                ledger.describe(),
                dir.display()
            );
            true
        }
    };
    if pending != manifest.store_pending {
        manifest.store_pending = pending;
        if let Err(e) = manifest.write(path) {
            tracing::warn!("cannot write {}: {e}", path.display());
        }
    }
}
