//! `taucal watch RUN_DIR`, and the live page `taucal run --watch` and `taucal resume --watch`
//! serve: starting it, and the words around it.

use super::args::WatchArgs;
use super::{bench_arg, Exit};
use crate::bench::Bench;
use crate::data::run_dir::files;
use crate::data::Manifest;
use crate::diagnostic::Diagnostic;
use crate::web::live::{LiveServer, PlanFacts, ProgressFrom};
use std::path::Path;
use std::sync::Arc;

/// Serves the live page of the run in `args.run_dir` until Ctrl-C.
pub fn run(args: WatchArgs) -> Result<Exit, Diagnostic> {
    let dir = &args.run_dir;
    let manifest_path = dir.join(files::MANIFEST);
    if let Ok(Some(_)) =
        crate::data::station_manifest::StationManifest::read_if_station(&manifest_path)
    {
        return Err(Diagnostic::plain(format!(
            "{} is a station's run directory: its slots are runs of their own",
            dir.display()
        ))
        .with_hint("watch one slot's run: taucal watch RUN_DIR/slot-NAME"));
    }
    if !manifest_path.is_file() {
        return Err(Diagnostic::plain(format!(
            "{} has no {}: it is not a run directory (or its run has not started yet)",
            dir.display(),
            files::MANIFEST
        ))
        .with_hint("give the directory a `taucal run` writes (runs/<UTC time>-<recipe name>)"));
    }
    let m = Manifest::read(&manifest_path).map_err(|e| {
        Diagnostic::in_file(
            &manifest_path,
            format!("cannot read the run's manifest: {e}"),
        )
    })?;
    let bench = bench_arg::of_run(args.bench.as_deref(), &m)?;
    // The plan gives the estimate, each stage's place and the verification stages; a run
    // whose recipe moved is still shown, without them.
    let plan = match crate::recipe::load(Path::new(&m.recipe.file), &m.recipe.overrides, &bench) {
        Ok(plan) => PlanFacts::of(&plan, &bench),
        Err(_) => {
            tracing::warn!(
                "the run's recipe {} cannot be read: the page shows no estimate",
                m.recipe.path
            );
            PlanFacts::default()
        }
    };
    let live = start(
        &args.listen,
        args.allow_remote,
        Arc::new(bench),
        plan,
        ProgressFrom::Files,
        Some(dir),
    )?;
    println!(
        "watching {} at {} (read-only; Ctrl-C stops)",
        dir.display(),
        live.url()
    );
    live.serve_until_interrupted()
        .map_err(|e| Diagnostic::plain(format!("the page server failed: {e}")))?;
    Ok(Exit::Ok)
}

/// Binds `addr` and starts the live page; a refused or busy address is an input error, given
/// before anything runs.
pub fn start(
    addr: &str,
    allow_remote: bool,
    bench: Arc<Bench>,
    plan: PlanFacts,
    from: ProgressFrom,
    dir: Option<&Path>,
) -> Result<LiveServer, Diagnostic> {
    let refused = |e: crate::web::WebError| Diagnostic::plain(e.to_string());
    let listener = crate::web::bind(addr, allow_remote).map_err(refused)?;
    LiveServer::start(listener, bench, plan, from, dir).map_err(refused)
}

/// Refuses `--watch` on a station's bench: each slot is a run of its own.
pub fn refuse_on_station(watch: &Option<String>, bench: &Bench) -> Result<(), Diagnostic> {
    if watch.is_some() && bench.is_slotted() {
        return Err(Diagnostic::plain(
            "--watch serves one run's page, and this bench's slots each run one",
        )
        .with_hint(
            "start the station without --watch and watch a slot: taucal watch RUN_DIR/slot-NAME",
        ));
    }
    Ok(())
}

/// Stops the live page after the run, saying so if it could not.
pub fn finish(live: Option<LiveServer>) {
    if let Some(live) = live {
        if let Err(e) = live.finish() {
            tracing::warn!("the live page did not stop cleanly: {e}");
        }
    }
}
