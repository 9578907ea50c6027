//! A run of the demo recipe on a bench whose roles are served instruments.

use super::{repo, Outcome, Taucal};

/// Runs the demo recipe in `taucal`'s directory on `bench` (the bench's text, written as
/// `served.toml`), recording into `run`, with `extra` arguments after; the outcome, unchecked.
pub fn run_demo_on(taucal: Taucal, bench: &str, extra: &[&str]) -> Outcome {
    let recipe = repo("recipes/rx-gain-sweep.toml");
    let mut args = vec!["run", &recipe, "--bench", "served.toml", "--out", "run"];
    args.extend_from_slice(extra);
    taucal.file("served.toml", bench).args(args).run()
}
