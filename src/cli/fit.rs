//! `taucal fit`: the fitter on an exchanges file, offline.

use super::args::FitArgs;
use super::{bench_arg, table, Exit};
use crate::data::run_dir::files;
use crate::diagnostic::Diagnostic;
use crate::runner::tabulate;

/// Fits and prints (or writes) the table.
pub fn run(args: FitArgs) -> Result<Exit, Diagnostic> {
    if !(args.reject_mad.is_finite() && args.reject_mad >= 2.0) {
        return Err(
            Diagnostic::plain(format!("--reject-mad {} is too small", args.reject_mad))
                .with_hint("use 3.0 or more (5.0 is the default)"),
        );
    }
    let bench = bench_arg::load(&args.bench)?;
    let fit = tabulate::fit_file(&args.exchanges, &bench, args.reject_mad).map_err(|e| {
        Diagnostic::plain(e.to_string()).with_hint(format!(
            "an exchanges file has the header {} and one row per exchange",
            crate::data::EXCHANGES_HEADER.join(",")
        ))
    })?;
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
        }
        None => {
            let text =
                tabulate::caltable_text(&fit).map_err(|e| Diagnostic::plain(e.to_string()))?;
            print!("{}", String::from_utf8_lossy(&text));
        }
    }
    Ok(Exit::Ok)
}
