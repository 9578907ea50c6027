//! `taucal run` and `taucal resume` on a slotted bench: every slot calibrated at once, each
//! into `slot-NAME/` of the station's run directory, whose own manifest lists the slots.

use super::args::{RunArgs, StoreArg};
use super::log;
use super::{bench_arg, table, Exit};
use crate::bench::Bench;
use crate::data::run_dir::{self, files};
use crate::data::station_manifest::{slot_dir_name, SlotEntry, StationManifest, KIND_STATION};
use crate::data::RunStatus;
use crate::diagnostic::Diagnostic;
use crate::runner::request::RunRequest;
use crate::runner::slots::{execute_slots, SlotOutcome, SlotRun};
use std::path::Path;
use std::sync::Arc;
use std::time::Instant;

/// Runs the recipe in every slot of `bench` at once.
pub fn run(args: RunArgs, bench: Bench) -> Result<Exit, Diagnostic> {
    if args.unit.is_some() {
        return Err(Diagnostic::plain(format!(
            "--unit names one unit, but bench `{}` holds {} slots",
            bench.name,
            bench.slots.len()
        ))
        .with_hint(
            "leave --unit out: each slot's unit is the serial its DUT reports (a simulated \
             slot's `serial` in [[sim.slot]])",
        ));
    }
    let mut runs = Vec::new();
    let base_seed = args
        .seed
        .or(bench.sim.as_ref().map(|s| s.seed))
        .unwrap_or(1);
    let station = super::store_ledger::station(args.station.as_deref(), &bench);
    for (i, slot) in bench.slots.iter().enumerate() {
        let Some(one) = bench.for_slot(i) else {
            continue;
        };
        let plan = crate::recipe::load(&args.recipe, &args.set, &one)?;
        for stage in &plan.stages {
            if let crate::recipe::Stage::Script(s) = stage {
                crate::script::check(&s.source)?;
            }
        }
        runs.push(SlotRun {
            name: slot.name.clone(),
            request: RunRequest {
                plan,
                bench: Arc::new(one),
                overrides: args.set.clone(),
                out: None,
                // Each slot's unit draws its own noise.
                seed: Some(base_seed.wrapping_add(i as u64)),
                realtime: args.realtime,
                resume: None,
                unit: None,
                station: station.clone(),
                seat: None,
                attenuator: None,
            },
        });
    }
    let recipe = runs
        .first()
        .map(|r| r.request.plan.name.clone())
        .unwrap_or_default();
    log::notice(&format!(
        "taucal: {}; {} slots side by side (slot i draws from seed {base_seed} + i)",
        bench_arg::describe(&bench, Some(base_seed)),
        runs.len()
    ));
    let mut ledger = super::store_ledger::StoreLedger::for_run(&args.store, &bench)?;
    let now = time::OffsetDateTime::now_utc();
    let (dir, _lock) = crate::runner::claim::fresh(args.out.as_deref(), &recipe, now)?;
    log::open_run_logs(&dir, files::LOG, files::JSON_LOG, false);
    log::notice(&format!("taucal: station run directory {}", dir.display()));
    for run in &mut runs {
        run.request.out = Some(dir.join(slot_dir_name(&run.name)));
    }
    let mut manifest = StationManifest {
        kind: KIND_STATION.to_string(),
        status: RunStatus::Running,
        bench_time_s: 0.0,
        wall_time_s: 0.0,
        units_per_hour: 0.0,
        started_utc: run_dir::rfc3339(now),
        finished_utc: None,
        recipe,
        bench_file: std::path::absolute(&bench.source.path)
            .map(|p| p.display().to_string())
            .unwrap_or_default(),
        taucal_version: env!("CARGO_PKG_VERSION").to_string(),
        slot: runs
            .iter()
            .map(|r| SlotEntry {
                name: r.name.clone(),
                dir: slot_dir_name(&r.name),
                status: RunStatus::Running,
                run_id: None,
                unit_serial: None,
                bench_time_s: 0.0,
                accepted: false,
                error: None,
            })
            .collect(),
    };
    write(&manifest, &dir)?;
    // The station's own run.log says what ran where; each slot's lines go to its own run.log.
    for run in &runs {
        tracing::info!(
            "slot {}: recipe `{}` into {}",
            run.name,
            manifest.recipe,
            slot_dir_name(&run.name)
        );
    }
    let wall = Instant::now();
    let outcomes = execute_slots(
        runs,
        &|_, d| log::open_thread_logs(d, files::LOG, files::JSON_LOG, false),
        ledger.as_mut(),
    );
    Ok(finish(
        &dir,
        &mut manifest,
        outcomes,
        wall.elapsed().as_secs_f64(),
    ))
}

/// Continues every slot of the station's run in `dir` that did not complete.
pub fn resume(dir: &Path, store: &StoreArg) -> Result<Exit, Diagnostic> {
    let _lock = crate::runner::claim::existing(dir)?;
    let path = dir.join(files::MANIFEST);
    let mut manifest = match StationManifest::read_if_station(&path) {
        Ok(Some(m)) => m,
        Ok(None) => return Err(Diagnostic::in_file(&path, "is not a station's manifest")),
        Err(e) => {
            return Err(Diagnostic::in_file(
                &path,
                format!("cannot read the station's manifest: {e}"),
            ))
        }
    };
    let mut runs = Vec::new();
    for entry in manifest
        .slot
        .iter()
        .filter(|e| e.status != RunStatus::Completed)
    {
        let slot_dir = dir.join(&entry.dir);
        let request = crate::runner::resume::prepare(&slot_dir).map_err(|mut d| {
            d.message = format!("slot {}: {}", entry.name, d.message);
            d
        })?;
        runs.push(SlotRun {
            name: entry.name.clone(),
            request,
        });
    }
    let Some(first) = runs.first() else {
        return Err(
            Diagnostic::plain(format!("{}: every slot already completed", dir.display()))
                .with_hint("start a new run with `taucal run`; `taucal fit` refits a slot's run"),
        );
    };
    let mut ledger = super::store_ledger::StoreLedger::for_run(store, &first.request.bench)?;
    log::open_run_logs(dir, files::LOG, files::JSON_LOG, true);
    log::notice(&format!(
        "taucal: resuming {} slots of {}",
        runs.len(),
        dir.display()
    ));
    for run in &runs {
        tracing::info!("slot {}: resumed", run.name);
    }
    let wall = Instant::now();
    let outcomes = execute_slots(
        runs,
        &|_, d| log::open_thread_logs(d, files::LOG, files::JSON_LOG, true),
        ledger.as_mut(),
    );
    let earlier = manifest.wall_time_s;
    Ok(finish(
        dir,
        &mut manifest,
        outcomes,
        earlier + wall.elapsed().as_secs_f64(),
    ))
}

fn write(manifest: &StationManifest, dir: &Path) -> Result<(), Diagnostic> {
    let path = dir.join(files::MANIFEST);
    manifest
        .write(&path)
        .map_err(|e| Diagnostic::plain(format!("cannot write {}: {e}", path.display())))
}

/// Records how each slot ended in the station's manifest, prints it, and returns the station's
/// exit status: stopped when any slot stopped, else a failed limit when any slot's failed.
fn finish(
    dir: &Path,
    manifest: &mut StationManifest,
    outcomes: Vec<SlotOutcome>,
    wall_time_s: f64,
) -> Exit {
    let mut exit = Exit::Ok;
    for outcome in outcomes {
        let Some(entry) = manifest.slot.iter_mut().find(|e| e.name == outcome.name) else {
            continue;
        };
        match &outcome.report {
            Ok(report) => {
                let m = &report.manifest;
                entry.status = m.status;
                entry.run_id = m.run_id.clone();
                entry.unit_serial = m.unit_serial.clone();
                entry.bench_time_s = m.bench_time_s;
                entry.accepted = report.failure.is_none() && report.accepted();
                entry.error = m.error.clone();
                println!(
                    "slot {}: {} — unit {}, {} exchanges ({} ok), bench time {:.1} s, in {}",
                    entry.name,
                    match (&report.failure, entry.accepted) {
                        (Some(_), _) => "STOPPED",
                        (None, true) => "completed, every acceptance limit met",
                        (None, false) => "completed, an acceptance limit NOT met",
                    },
                    entry.unit_serial.as_deref().unwrap_or("UNIDENTIFIED"),
                    m.counts.exchanges,
                    m.counts.exchanges_ok,
                    m.bench_time_s,
                    report.dir.display()
                );
                if let Some(fit) = &report.fit {
                    print!("{}", table::render(&fit.rows));
                }
                if let Some(f) = &report.failure {
                    eprintln!("slot {}: run stopped: {f}", entry.name);
                    exit = Exit::Stopped;
                } else if !entry.accepted && exit == Exit::Ok {
                    exit = Exit::LimitFailed;
                }
            }
            Err(d) => {
                entry.status = RunStatus::Failed;
                entry.error = Some(d.message.clone());
                eprint!("{d}");
                exit = Exit::Stopped;
            }
        }
        tracing::info!(
            "slot {}: {} — unit {}, bench time {:.1} s{}",
            entry.name,
            format!("{:?}", entry.status).to_lowercase(),
            entry.unit_serial.as_deref().unwrap_or("unidentified"),
            entry.bench_time_s,
            entry
                .error
                .as_deref()
                .map(|e| format!(", {e}"))
                .unwrap_or_default()
        );
    }
    manifest.wall_time_s = wall_time_s;
    manifest.finished_utc = Some(run_dir::rfc3339(time::OffsetDateTime::now_utc()));
    manifest.sum_up();
    if let Err(d) = write(manifest, dir) {
        eprint!("{d}");
    }
    let done = manifest
        .slot
        .iter()
        .filter(|s| s.status == RunStatus::Completed)
        .count();
    tracing::info!(
        "station: {done} of {} units completed, bench time {:.1} s, {:.1} units per hour",
        manifest.slot.len(),
        manifest.bench_time_s,
        manifest.units_per_hour
    );
    println!("run directory: {}", dir.display());
    println!(
        "station: {done} of {} units completed; bench time {:.1} s (the longest slot's), {:.1} units per hour; wall time {:.2} s",
        manifest.slot.len(),
        manifest.bench_time_s,
        manifest.units_per_hour,
        manifest.wall_time_s
    );
    if exit == Exit::Stopped {
        println!(
            "status: stopped — every slot's data are kept; continue the slots that did not \
             complete with: taucal resume {}",
            dir.display()
        );
    }
    exit
}
