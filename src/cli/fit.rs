//! `taucal fit`: the fitter on an exchanges file, offline.
//!
//! When the file sits in a run directory, the run's manifest says how its table was fitted
//! (rejection threshold, verification stages kept out of the fit), so the refit reproduces it.

use super::args::FitArgs;
use super::{bench_arg, table, Exit};
use crate::data::run_dir::files;
use crate::data::Manifest;
use crate::diagnostic::Diagnostic;
use crate::runner::tabulate::{self, FitSettings};

/// Fits and prints (or writes) the table.
pub fn run(args: FitArgs) -> Result<Exit, Diagnostic> {
    let manifest_path = args
        .exchanges
        .parent()
        .map(|d| d.join(files::MANIFEST))
        .filter(|p| p.is_file());
    let mut settings = FitSettings {
        reject_mad: crate::recipe::plan::DEFAULT_REJECT_MAD,
        verify_stages: Vec::new(),
        gain_states: None,
    };
    if let Some(path) = manifest_path {
        let m = Manifest::read(&path).map_err(|e| {
            Diagnostic::in_file(&path, format!("cannot read the run's manifest: {e}"))
        })?;
        eprintln!(
            "taucal: fit settings from {}: reject_mad {}, verification stages left out: {}",
            path.display(),
            m.fit.reject_mad,
            if m.fit.verify_stages.is_empty() {
                "none".to_string()
            } else {
                m.fit.verify_stages.join(", ")
            }
        );
        settings.reject_mad = m.fit.reject_mad;
        settings.verify_stages = m.fit.verify_stages;
        settings.gain_states = m.fit.gain_states;
    }
    if let Some(k) = args.reject_mad {
        if !(k.is_finite() && k >= 2.0) {
            return Err(Diagnostic::plain(format!("--reject-mad {k} is too small"))
                .with_hint("use 3.0 or more (5.0 is the default)"));
        }
        settings.reject_mad = k;
    }
    let bench = bench_arg::load(&args.bench)?;
    let fit = tabulate::fit_file(&args.exchanges, &bench, &settings)
        .map_err(|e| {
            Diagnostic::plain(e.to_string()).with_hint(format!(
                "an exchanges file has the header {} and one row per exchange",
                crate::data::EXCHANGES_HEADER.join(",")
            ))
        })?
        .fit;
    let s = &fit.summary;
    let ppm = s
        .median_clock_offset_ppm
        .map_or_else(|| "unknown".to_string(), |p| format!("{p:+.2} ppm"));
    eprintln!(
        "taucal: {} rows, {} usable, {} bursts; median DUT clock offset {ppm}",
        s.rows_pushed,
        s.rows_pushed - s.rows_unusable,
        s.bursts,
    );
    match &args.out {
        Some(dir) => {
            std::fs::create_dir_all(dir)
                .map_err(|e| Diagnostic::plain(format!("cannot create {}: {e}", dir.display())))?;
            let path = dir.join(files::CALTABLE);
            tabulate::write_table(&path, &fit)
                .map_err(|e| Diagnostic::plain(format!("cannot write {}: {e}", path.display())))?;
            eprint!("{}", table::render(&fit.rows));
            println!("{}", path.display());
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
            let text =
                tabulate::caltable_text(&fit).map_err(|e| Diagnostic::plain(e.to_string()))?;
            print!("{}", String::from_utf8_lossy(&text));
        }
    }
    Ok(Exit::Ok)
}
