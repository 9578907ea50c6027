//! Recipes: TOML files that say what to measure. Raw structs are parsed first, then an analysis
//! pass checks every value against the bench and builds a typed [`Plan`]; `taucal check` is that
//! pass alone.

pub mod cells;
pub mod plan;
pub mod raw;
pub mod script_source;
pub mod vars;

pub use cells::Cells;
pub use plan::{
    Acceptance, Adaptive, Channel, FaultPolicy, Plan, Points, Script, Soak, Stage, Sweep, Verify,
};
pub use script_source::ScriptSource;
pub use vars::Vars;

use crate::bench::Bench;
use crate::diagnostic::{self, Diagnostic, SourceFile};
use std::path::{Path, PathBuf};

/// Reads a recipe, applies `--set` overrides and validates it against `bench`.
pub fn load(path: &Path, overrides: &[String], bench: &Bench) -> Result<Plan, Diagnostic> {
    let text = crate::text_file::read(path).map_err(|e| {
        Diagnostic::in_file(path, format!("cannot read recipe: {e}"))
            .with_hint("give the path of a recipe TOML file, e.g. recipes/rx-gain-sweep.toml")
    })?;
    let source = SourceFile::new(path, text);
    let base = path.parent().unwrap_or(Path::new("."));
    let plan = parse(source, overrides, bench, base)?;
    // A measured path must cover every channel the stages name (a script's own channel changes
    // are checked when its exchanges are fitted).
    bench.channel_paths(&channels(&plan))?;
    Ok(plan)
}

/// The channels (center, bandwidth, MHz) the plan's stages start on, each once, in order.
pub fn channels(plan: &Plan) -> Vec<(u32, u32)> {
    let mut out: Vec<(u32, u32)> = Vec::new();
    for stage in &plan.stages {
        let channel = match stage {
            Stage::Sweep(s) | Stage::GainMap(s) => s.channel,
            Stage::Verify(v) => v.sweep.channel,
            Stage::Script(s) => s.channel,
            Stage::Cells(c) => c.channel,
            Stage::Soak(_) => continue,
        };
        let key = (channel.center_mhz, channel.bw_mhz);
        if !out.contains(&key) {
            out.push(key);
        }
    }
    out
}

/// The bench a recipe names as its own (`[recipe] bench`, relative to the recipe's folder), for
/// a run or check without `--bench`. Read ahead of the recipe proper, which is validated against
/// the bench; a recipe that cannot be read or parsed gives `None` here and its error in [`load`].
pub fn default_bench(path: &Path) -> Result<Option<PathBuf>, Diagnostic> {
    let Ok(text) = crate::text_file::read(path) else {
        return Ok(None);
    };
    let Ok(doc) = text.parse::<toml::Table>() else {
        return Ok(None);
    };
    let Some(value) = doc
        .get("recipe")
        .and_then(toml::Value::as_table)
        .and_then(|t| t.get("bench"))
    else {
        return Ok(None);
    };
    let source = SourceFile::new(path, text.clone());
    let Some(rel) = value.as_str() else {
        return Err(source.key_error(diagnostic::KeyError::new(
            "recipe.bench",
            format!("is not a string (found {})", value.type_str()),
            "give the bench file's path as a string, relative to the recipe's folder",
        )));
    };
    let bench = path.parent().unwrap_or(Path::new(".")).join(rel);
    if !bench.is_file() {
        return Err(source.key_error(diagnostic::KeyError::new(
            "recipe.bench",
            format!("names {}, which is not a file", bench.display()),
            "give a bench file's path relative to the recipe's folder, or pass --bench",
        )));
    }
    Ok(Some(bench))
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
