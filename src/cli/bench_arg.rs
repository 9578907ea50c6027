//! Loading the bench a command names, or the built-in simulated one.

use super::args::BenchArg;
use crate::bench::file::BUILT_IN_LABEL;
use crate::bench::Bench;
use crate::data::manifest::sha256_hex;
use crate::data::Manifest;
use crate::diagnostic::Diagnostic;
use std::path::Path;

/// Loads `--bench`, or the built-in demo bench with a note on stderr saying so.
pub fn load(arg: &BenchArg) -> Result<Bench, Diagnostic> {
    match &arg.bench {
        Some(path) => Bench::load(path),
        None => {
            super::log::notice(&format!(
                "taucal: no --bench given: using {BUILT_IN_LABEL} (same as recipes/benches/sim-demo.toml)"
            ));
            Bench::built_in()
        }
    }
}

/// The bench for a recipe: `--bench`, else the bench the recipe names (`[recipe] bench`), else
/// the built-in demo bench; stderr says which when the command line named none.
pub fn for_recipe(arg: &BenchArg, recipe: &Path) -> Result<Bench, Diagnostic> {
    if arg.bench.is_none() {
        if let Some(path) = crate::recipe::default_bench(recipe)? {
            eprintln!(
                "taucal: no --bench given: using {}, the bench the recipe names",
                path.display()
            );
            return Bench::load(&path);
        }
    }
    load(arg)
}

/// The bench a recorded run used, for commands that de-embed its exchanges again: `explicit`
/// (`--bench`), else the built-in bench when the run used it, else the bench file its manifest
/// names — and only if its SHA-256 still matches, since a changed bench would silently change
/// every K.
pub fn of_run(explicit: Option<&Path>, m: &Manifest) -> Result<Bench, Diagnostic> {
    if let Some(path) = explicit {
        return Bench::load(path);
    }
    let bench = if m.bench.path == BUILT_IN_LABEL {
        Bench::built_in()?
    } else {
        // The absolute path, so the run's files work from any directory; older manifests
        // have only the path as given.
        let file = if m.bench.file.is_empty() {
            &m.bench.path
        } else {
            &m.bench.file
        };
        Bench::load(Path::new(file)).map_err(|d| {
            d.with_hint("the run's bench file is gone or moved: give it with --bench FILE")
        })?
    };
    if sha256_hex(bench.source.text.as_bytes()) != m.bench.sha256 {
        return Err(Diagnostic::plain(format!(
            "the bench file {} has changed since the run (its SHA-256 differs from the manifest's)",
            m.bench.path
        ))
        .with_hint("give the bench as it was with --bench FILE"));
    }
    // The files the bench names, as the run read them (a manifest from before they were
    // recorded has none to compare).
    let now = crate::runner::inputs::bench_files(&bench);
    let recorded: std::collections::BTreeMap<_, _> = now
        .keys()
        .filter_map(|k| m.inputs.get(k).map(|f| (k.clone(), f.clone())))
        .collect();
    if !recorded.is_empty() {
        crate::runner::inputs::unchanged(&recorded, &now)?;
    }
    Ok(bench)
}

/// One line saying whether the bench is simulated, for every command that uses one.
pub fn describe(bench: &Bench, seed: Option<u64>) -> String {
    if bench.is_simulated() {
        let seed = seed.or(bench.sim.as_ref().map(|s| s.seed)).unwrap_or(1);
        format!(
            "bench `{}` is SIMULATED: every instrument is simulated (virtual time unless --realtime, seed {seed}); nothing is transmitted",
            bench.name
        )
    } else {
        format!("bench `{}` drives real instruments", bench.name)
    }
}
