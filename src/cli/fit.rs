//! `taucal fit`: the fitter on an exchanges file, offline.
//!
//! When the file sits in a run directory, the run's manifest says how its table was fitted
//! (rejection threshold, verification stages kept out of the fit) and which bench it ran on, so
//! the refit reproduces it.

use super::args::{BenchArg, FitArgs};
use super::{bench_arg, log, table, Exit};
use crate::data::run_dir::files;
use crate::data::Manifest;
use crate::diagnostic::Diagnostic;
use crate::recipe::plan::{DEFAULT_REJECT_MAD, MIN_REJECT_MAD, REJECT_MAD_HINT};
use crate::runner::tabulate::{self, FitSettings};

/// Fits and prints (or writes) the table.
pub fn run(args: FitArgs) -> Result<Exit, Diagnostic> {
    let manifest_path = args
        .exchanges
        .parent()
        .map(|d| d.join(files::MANIFEST))
        .filter(|p| p.is_file());
    let mut settings = FitSettings {
        reject_mad: DEFAULT_REJECT_MAD,
        verify_stages: Vec::new(),
        gain_states: None,
        applied_k_ps: None,
        predict: None,
    };
    let mut from = "default";
    let manifest = match &manifest_path {
        Some(path) => Some(Manifest::read(path).map_err(|e| {
            Diagnostic::in_file(path, format!("cannot read the run's manifest: {e}"))
        })?),
        None => None,
    };
    if let Some(m) = &manifest {
        settings.reject_mad = m.fit.reject_mad;
        settings.verify_stages = m.fit.verify_stages.clone();
        settings.gain_states = m.fit.gain_states;
        settings.applied_k_ps = m.fit.applied_k_ps;
        // The run predicted its unmeasured cells: the offline fit does the same, from the
        // same model file.
        if let Some(model) = &m.fit.predict {
            settings.predict = Some(crate::fit::predict_file::read_model(std::path::Path::new(
                model,
            ))?);
        }
        from = "the run's manifest";
    }
    let mut reject_from = from;
    if let Some(k) = args.reject_mad {
        if !k.is_finite() {
            return Err(
                Diagnostic::plain(format!("--reject-mad {k} is not a finite number"))
                    .with_hint(REJECT_MAD_HINT),
            );
        }
        if k < MIN_REJECT_MAD {
            return Err(Diagnostic::plain(format!(
                "--reject-mad {k} would reject much of a clean normal sample"
            ))
            .with_hint(REJECT_MAD_HINT));
        }
        settings.reject_mad = k;
        reject_from = "--reject-mad";
    }
    let mut stages_from = from;
    if !args.verify_stage.is_empty() {
        settings.verify_stages = args.verify_stage.clone();
        stages_from = "--verify-stage";
    }
    if let Some(path) = &manifest_path {
        log::notice(&format!("taucal: manifest {}", path.display()));
    }
    log::notice(&format!(
        "taucal: fit settings: reject_mad {} ({reject_from}); verification stages left out: {} ({stages_from})",
        settings.reject_mad,
        if settings.verify_stages.is_empty() {
            "none".to_string()
        } else {
            settings.verify_stages.join(", ")
        }
    ));
    if let Some(k) = args.applied_k_ps {
        if !k.is_finite() {
            return Err(
                Diagnostic::plain(format!("--applied-k-ps {k} is not a finite number")).with_hint(
                    "give the device's factory K in picoseconds, e.g. --applied-k-ps 2650",
                ),
            );
        }
        settings.applied_k_ps = Some(k);
    }
    // A recorded run is de-embedded with the bench it ran on, not the demo's.
    let bench = match &manifest {
        Some(m) => {
            if args.bench.is_none() {
                log::notice(&format!(
                    "taucal: bench {}, the one the run's manifest names",
                    m.bench.path
                ));
            }
            bench_arg::of_run(args.bench.as_deref(), m)?
        }
        None => bench_arg::load(&BenchArg {
            bench: args.bench.clone(),
        })?,
    };
    let fit = tabulate::fit_file(&args.exchanges, &bench, &settings)
        .map_err(|e| {
            Diagnostic::plain(e.to_string()).with_hint(format!(
                "an exchanges file has the header {} and one row per exchange",
                crate::data::EXCHANGES_HEADER.join(",")
            ))
        })?
        .fit;
    // Exchanges on a channel the measured path does not cover could not be de-embedded.
    if let Some(e) = bench.measured_path.as_ref().and_then(|m| m.refused()) {
        return Err(bench.source.key_error(e));
    }
    let s = &fit.summary;
    if s.rows_without_applied_k > 0 {
        return Err(Diagnostic::plain(format!(
            "{}: {} rows report a range, but the K the device removed from its ranges is not known, \
             so they say nothing about its delay",
            args.exchanges.display(),
            s.rows_without_applied_k
        ))
        .with_hint(
            "give it with --applied-k-ps PS, or declare `applied_k_ps` under `[dut]` in the bench \
             file (the device's factory K, from its maker)",
        ));
    }
    if manifest_path.is_none() && args.verify_stage.is_empty() {
        // Nothing in the rows says which stage verified: a stage name is only a name.
        tracing::warn!(
            "no manifest.toml beside {}: verification stages cannot be told from the others, \
             so every stage was fitted: {}; name the ones that only verify with --verify-stage",
            args.exchanges.display(),
            s.stages.join(", ")
        );
    }
    let ppm = s
        .median_clock_offset_ppm
        .map_or_else(|| "unknown".to_string(), |p| format!("{p:+.2} ppm"));
    log::notice(&format!(
        "taucal: {} rows, {} usable, {} bursts, {} judged late; median DUT clock offset {ppm}",
        s.rows_pushed,
        s.rows_pushed - s.rows_unusable,
        s.bursts,
        s.rows_judged_late,
    ));
    match &args.out {
        Some(dir) => {
            std::fs::create_dir_all(dir)
                .map_err(|e| Diagnostic::plain(format!("cannot create {}: {e}", dir.display())))?;
            let path = dir.join(files::CALTABLE);
            tabulate::write_table(&path, &fit, &bench.uncertainty)
                .map_err(|e| Diagnostic::plain(format!("cannot write {}: {e}", path.display())))?;
            log::notice(&table::render(&fit.rows));
            println!("{}", path.display());
            let budget = dir.join(files::BUDGET);
            let text = crate::runner::outputs::budget_text(&fit, &bench);
            crate::data::manifest::write_atomic(&budget, text.as_bytes()).map_err(|e| {
                Diagnostic::plain(format!("cannot write {}: {e}", budget.display()))
            })?;
            println!("{}", budget.display());
            if !fit.drift.is_empty() {
                let drift = dir.join(files::DRIFT);
                let text = crate::fit::drift::drift_csv(&fit.drift);
                crate::data::manifest::write_atomic(&drift, text.as_bytes()).map_err(|e| {
                    Diagnostic::plain(format!("cannot write {}: {e}", drift.display()))
                })?;
                println!("{}", drift.display());
            }
        }
        None => {
            let text = tabulate::caltable_text(&fit, &bench.uncertainty)
                .map_err(|e| Diagnostic::plain(e.to_string()))?;
            print!("{}", String::from_utf8_lossy(&text));
        }
    }
    Ok(Exit::Ok)
}
