//! Loading the bench a command names, or the built-in simulated one.

use super::args::BenchArg;
use crate::bench::file::BUILT_IN_LABEL;
use crate::bench::Bench;
use crate::diagnostic::Diagnostic;

/// Loads `--bench`, or the built-in demo bench with a note on stderr saying so.
pub fn load(arg: &BenchArg) -> Result<Bench, Diagnostic> {
    match &arg.bench {
        Some(path) => Bench::load(path),
        None => {
            eprintln!(
                "taucal: no --bench given: using {BUILT_IN_LABEL} (same as recipes/benches/sim-demo.toml)"
            );
            Bench::built_in()
        }
    }
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
