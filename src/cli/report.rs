//! `taucal report`: writes a run directory's `report.html` again from its files.
//!
//! The report de-embeds exchanges, so it needs the bench the run used: `--bench`, else the
//! built-in bench when the run used it, else the bench file the manifest names — and only if its
//! SHA-256 still matches, since a changed bench would silently change every K shown.

use super::args::ReportArgs;
use super::{bench_arg, Exit};
use crate::bench::Bench;
use crate::data::run_dir::files;
use crate::data::Manifest;
use crate::diagnostic::Diagnostic;

/// Rebuilds the report.
pub fn run(args: ReportArgs) -> Result<Exit, Diagnostic> {
    let bench = bench_for(&args)?;
    let path = crate::report::write(&args.run_dir, &bench)
        .map_err(|e| Diagnostic::plain(format!("cannot make the report: {e}")))?;
    println!("{}", path.display());
    Ok(Exit::Ok)
}

fn bench_for(args: &ReportArgs) -> Result<Bench, Diagnostic> {
    if let Some(path) = &args.bench {
        return Bench::load(path);
    }
    let manifest_path = args.run_dir.join(files::MANIFEST);
    if !manifest_path.is_file() {
        return Err(Diagnostic::plain(format!(
            "{} has no {}: it is not a run directory",
            args.run_dir.display(),
            files::MANIFEST
        ))
        .with_hint("give the directory a `taucal run` wrote (runs/<UTC time>-<recipe name>)"));
    }
    let m = Manifest::read(&manifest_path).map_err(|e| {
        Diagnostic::in_file(
            &manifest_path,
            format!("cannot read the run's manifest: {e}"),
        )
    })?;
    bench_arg::of_run(None, &m)
}
