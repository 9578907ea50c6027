//! Loading the bench a command names, or the built-in simulated one.

use super::args::BenchArg;
use crate::bench::file::BUILT_IN_LABEL;
use crate::bench::Bench;
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
