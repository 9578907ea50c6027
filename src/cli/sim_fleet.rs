//! `taucal sim fleet`: calibrate N simulated units, each a real run in virtual time recorded
//! into the store, on two or more worker threads. Unit `i`'s truth, seed, serial and station
//! depend on `i` and the fleet's seed alone, so the fleet is the same however it is scheduled.

use super::args::{SimFleetArgs, StoreArg};
use super::store::{fail, read_url};
use super::{bench_arg, Exit};
use crate::bench::Bench;
use crate::diagnostic::Diagnostic;
use crate::runner::request::RunRequest;
use crate::runner::run::execute;
use crate::sim::population::on_station;
use crate::sim::SimTruth;
use crate::store::url::URL_HINT;
use crate::store::StoreUrl;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};

/// One unit's planned calibration.
struct Unit {
    serial: String,
    station: String,
    truth: SimTruth,
    seed: u64,
}

/// What one unit's run left: whether it was accepted and its true K per measured cell.
struct Outcome {
    accepted: bool,
    truth_rows: Vec<[String; 6]>,
}

/// Most worker threads a fleet uses: runs are CPU-bound, and SQLite takes one writer at a time.
const MAX_WORKERS: usize = 4;

/// Runs the fleet.
pub fn run(args: SimFleetArgs) -> Result<Exit, Diagnostic> {
    let bench = bench_arg::for_recipe(&args.bench, &args.recipe)?;
    let Some(base) = bench.sim.clone() else {
        return Err(Diagnostic::plain(format!(
            "bench `{}` has no [sim] table: a fleet is simulated",
            bench.name
        ))
        .with_hint("give a simulated bench with [sim.population], e.g. recipes/benches/sim-fleet-line.toml"));
    };
    if args.units == 0 {
        return Err(
            Diagnostic::plain("--units 0: a fleet needs at least one unit")
                .with_hint("e.g. --units 200"),
        );
    }
    let plan = crate::recipe::load(&args.recipe, &[], &bench)?;
    let url = read_url(&args.store)?;
    if url == StoreUrl::Off {
        return Err(
            Diagnostic::plain("--store none: a fleet is recorded into a store").with_hint(URL_HINT),
        );
    }
    // Opened once here so the schema exists before the workers connect, and a bad URL stops
    // the fleet before any unit runs.
    drop(crate::store::open(&url).map_err(fail)?);
    let seed = args.seed.unwrap_or(base.seed);
    let stations = station_names(&args.stations, &bench, &base);
    for s in stations.iter().filter(|s| !base.stations.contains_key(*s)) {
        if !base.stations.is_empty() {
            eprintln!(
                "taucal: station `{s}` is not in the bench's [sim.stations]: its true path is the \
                 declared one"
            );
        }
    }
    let units = plan_units(&bench, &base, seed, args.units, &stations)?;
    let out = args
        .out
        .clone()
        .unwrap_or_else(|| PathBuf::from(format!("runs/fleet-{seed}")));
    // Straight to stderr: the runs' own news is silenced (warnings only) for a fleet, the
    // fleet's is not.
    eprintln!(
        "taucal: fleet of {} units (seed {seed}) on stations {} into {}; run directories in {}",
        units.len(),
        stations.join(", "),
        url.redacted(),
        out.display()
    );
    let started = std::time::Instant::now();
    let outcomes = run_units(&units, &plan, &bench, &url, &out)?;
    let accepted = outcomes.iter().filter(|o| o.accepted).count();
    if let Some(path) = &args.truth_out {
        write_truth(path, &outcomes)?;
    }
    println!(
        "calibrated {} units ({} accepted) on {} stations in {:.1} s wall; recorded in {}",
        units.len(),
        accepted,
        stations.len(),
        started.elapsed().as_secs_f64(),
        url.redacted()
    );
    Ok(Exit::Ok)
}

/// `--stations`, else the bench's `[sim.stations]`, else its own station.
fn station_names(flag: &[String], bench: &Bench, truth: &SimTruth) -> Vec<String> {
    let named: Vec<String> = flag
        .iter()
        .map(|s| s.trim().to_string())
        .filter(|s| !s.is_empty())
        .collect();
    if !named.is_empty() {
        return named;
    }
    if !truth.stations.is_empty() {
        return truth.stations.keys().cloned().collect();
    }
    vec![bench
        .station
        .clone()
        .unwrap_or_else(|| "station-1".to_string())]
}

/// Every unit's serial, station, truth and run seed.
fn plan_units(
    bench: &Bench,
    base: &SimTruth,
    seed: u64,
    count: u32,
    stations: &[String],
) -> Result<Vec<Unit>, Diagnostic> {
    let prefix = base.dut.serial.clone().unwrap_or_else(|| "SIM".to_string());
    let population = base.population.clone().unwrap_or_default();
    (0..u64::from(count))
        .map(|i| {
            let station = stations[i as usize % stations.len()].clone();
            let error_ps = base.stations.get(&station).map_or(0.0, |s| s.path_error_ps);
            let drawn = population.draw(base, seed, i);
            let mut truth = on_station(&drawn, &bench.path, error_ps);
            truth.dut.serial = Some(format!("{prefix}-F{seed}-{i:05}"));
            truth
                .validate()
                .map_err(|e| bench.source.key_error(e))
                .map(|()| Unit {
                    serial: truth.dut.serial.clone().unwrap_or_default(),
                    station,
                    truth,
                    seed: unit_seed(seed, i),
                })
        })
        .collect()
}

/// A run seed per unit (SplitMix64 of the fleet's seed and the unit's index), so neighbouring
/// units' noise streams are unrelated.
fn unit_seed(seed: u64, index: u64) -> u64 {
    let mut z = seed ^ index.wrapping_add(1).wrapping_mul(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Runs the units on worker threads, each with its own store connection; the first error
/// that stops a run before it starts stops the fleet.
fn run_units(
    units: &[Unit],
    plan: &crate::recipe::Plan,
    bench: &Bench,
    url: &StoreUrl,
    out: &Path,
) -> Result<Vec<Outcome>, Diagnostic> {
    let next = AtomicUsize::new(0);
    let done = AtomicUsize::new(0);
    let stop = AtomicBool::new(false);
    let outcomes: Mutex<Vec<Option<Outcome>>> =
        Mutex::new((0..units.len()).map(|_| None).collect());
    let first_error: Mutex<Option<Diagnostic>> = Mutex::new(None);
    let workers = std::thread::available_parallelism()
        .map_or(2, |n| n.get())
        .clamp(1, MAX_WORKERS)
        .min(units.len());
    let store_arg = StoreArg {
        url: Some(match url {
            StoreUrl::Sqlite(p) => format!("sqlite:{}", p.display()),
            StoreUrl::Postgres(u) => u.clone(),
            StoreUrl::Off => "none".to_string(),
        }),
    };
    std::thread::scope(|scope| {
        for _ in 0..workers {
            scope.spawn(|| {
                let mut ledger = match super::store_ledger::StoreLedger::for_run(&store_arg, bench)
                {
                    Ok(l) => l,
                    Err(d) => {
                        stop.store(true, Ordering::SeqCst);
                        first_error.lock().expect("not poisoned").get_or_insert(d);
                        return;
                    }
                };
                while !stop.load(Ordering::SeqCst) {
                    let i = next.fetch_add(1, Ordering::SeqCst);
                    let Some(unit) = units.get(i) else { break };
                    match run_one(unit, plan, bench, out, ledger.as_mut()) {
                        Ok(o) => {
                            outcomes.lock().expect("not poisoned")[i] = Some(o);
                            let n = done.fetch_add(1, Ordering::SeqCst) + 1;
                            if n % 100 == 0 {
                                eprintln!("taucal: {n} of {} units", units.len());
                            }
                        }
                        Err(d) => {
                            stop.store(true, Ordering::SeqCst);
                            first_error.lock().expect("not poisoned").get_or_insert(d);
                        }
                    }
                }
            });
        }
    });
    if let Some(d) = first_error.into_inner().expect("not poisoned") {
        return Err(d);
    }
    Ok(outcomes
        .into_inner()
        .expect("not poisoned")
        .into_iter()
        .flatten()
        .collect())
}

/// One unit's run, in virtual time, quietly.
fn run_one(
    unit: &Unit,
    plan: &crate::recipe::Plan,
    bench: &Bench,
    out: &Path,
    ledger: &mut dyn crate::runner::ledger::RunLedger,
) -> Result<Outcome, Diagnostic> {
    let mut unit_bench = bench.clone();
    unit_bench.sim = Some(unit.truth.clone());
    unit_bench.station = Some(unit.station.clone());
    let request = RunRequest {
        plan: plan.clone(),
        bench: Arc::new(unit_bench),
        overrides: Vec::new(),
        out: Some(out.join(&unit.serial)),
        seed: Some(unit.seed),
        realtime: false,
        resume: None,
        unit: Some(unit.serial.clone()),
        station: unit.station.clone(),
        seat: None,
        attenuator: None,
    };
    let report = execute(request, |_| {}, Box::new(crate::runner::Unobserved), ledger)?;
    let mut channels: Vec<(u32, u32)> = report
        .fit
        .as_ref()
        .map(|f| f.rows.iter().map(|r| (r.center_mhz, r.bw_mhz)).collect())
        .unwrap_or_default();
    channels.sort_unstable();
    channels.dedup();
    let mut truth_rows = Vec::new();
    for (center, bw) in channels {
        for g in 0..unit.truth.dut.rx_delay_ps.len() as u32 {
            let k = unit.truth.dut_k_ps(g).unwrap_or(f64::NAN);
            truth_rows.push([
                unit.serial.clone(),
                unit.station.clone(),
                center.to_string(),
                bw.to_string(),
                g.to_string(),
                format!("{k:.3}"),
            ]);
        }
    }
    Ok(Outcome {
        accepted: report.failure.is_none() && report.accepted(),
        truth_rows,
    })
}

/// Writes `serial,station,center_mhz,bw_mhz,gain_index,k_true_ps`.
fn write_truth(path: &Path, outcomes: &[Outcome]) -> Result<(), Diagnostic> {
    let err = |e: String| {
        Diagnostic::in_file(path, format!("cannot write the fleet's truth: {e}"))
            .with_hint("give --truth-out a path in a writable folder")
    };
    let mut w = csv::Writer::from_path(path).map_err(|e| err(e.to_string()))?;
    w.write_record([
        "serial",
        "station",
        "center_mhz",
        "bw_mhz",
        "gain_index",
        "k_true_ps",
    ])
    .map_err(|e| err(e.to_string()))?;
    for row in outcomes.iter().flat_map(|o| &o.truth_rows) {
        w.write_record(row).map_err(|e| err(e.to_string()))?;
    }
    w.flush().map_err(|e| err(e.to_string()))
}
