//! Recipes: TOML files that say what to measure. Raw structs are parsed first, then an analysis
//! pass checks every value against the bench and builds a typed [`Plan`]; `taucal check` is that
//! pass alone.

pub mod plan;
pub mod raw;
pub mod script_source;
pub mod vars;

pub use plan::{
    Acceptance, Adaptive, Channel, FaultPolicy, Plan, Points, Script, Soak, Stage, Sweep, Verify,
};
pub use script_source::ScriptSource;
pub use vars::Vars;

use crate::bench::Bench;
use crate::diagnostic::{self, Diagnostic, SourceFile};
use std::path::Path;

/// Reads a recipe, applies `--set` overrides and validates it against `bench`.
pub fn load(path: &Path, overrides: &[String], bench: &Bench) -> Result<Plan, Diagnostic> {
    let text = std::fs::read_to_string(path).map_err(|e| {
        Diagnostic::in_file(path, format!("cannot read recipe: {e}"))
            .with_hint("give the path of a recipe TOML file, e.g. recipes/rx-gain-sweep.toml")
    })?;
    let source = SourceFile::new(path, text);
    let base = path.parent().unwrap_or(Path::new("."));
    parse(source, overrides, bench, base)
}

/// Parses and validates recipe text; `base_dir` resolves script files.
pub fn parse(
    source: SourceFile,
    overrides: &[String],
    bench: &Bench,
    base_dir: &Path,
) -> Result<Plan, Diagnostic> {
    let raw: raw::RawRecipe = crate::toml_input::parse(&source)?;
    let mut vars = Vars(raw.vars.clone());
    for (name, value) in &vars.0 {
        if !matches!(
            value,
            toml::Value::Integer(_)
                | toml::Value::Float(_)
                | toml::Value::Boolean(_)
                | toml::Value::String(_)
        ) {
            return Err(source.key_error(diagnostic::KeyError::new(
                format!("vars.{name}"),
                format!("is a {}", value.type_str()),
                "variables hold a number, a boolean or a string",
            )));
        }
    }
    for o in overrides {
        vars.set(o)?;
    }
    plan::build(raw, vars, bench, &source, base_dir)
}
