//! `taucal export`: a run's calibration table as a C header, JSON, TOML or CSV.

use super::args::{ExportArgs, FormatArg};
use super::{log, Exit};
use crate::data::manifest::{write_atomic, Manifest};
use crate::data::run_dir::files;
use crate::diagnostic::Diagnostic;
use crate::export::{render, ExportTable, Format, RunFacts};
use crate::fit::read_caltable;

impl From<FormatArg> for Format {
    fn from(f: FormatArg) -> Self {
        match f {
            FormatArg::C => Format::C,
            FormatArg::Json => Format::Json,
            FormatArg::Toml => Format::Toml,
            FormatArg::Csv => Format::Csv,
        }
    }
}

/// Reads the run's table and manifest, renders, prints or writes.
pub fn run(args: ExportArgs) -> Result<Exit, Diagnostic> {
    let table_path = args.run_dir.join(files::CALTABLE);
    let manifest_path = args.run_dir.join(files::MANIFEST);
    let hint =
        "give a run directory written by `taucal run` (it holds caltable.csv and manifest.toml)";
    let file = std::fs::File::open(&table_path).map_err(|e| {
        Diagnostic::in_file(
            &table_path,
            format!("cannot read {}: {e}", table_path.display()),
        )
        .with_hint(hint)
    })?;
    let mut rows = read_caltable(std::io::BufReader::new(file))
        .map_err(|e| Diagnostic::in_file(&table_path, format!("{}: {e}", table_path.display())))?;
    // An export is what provisioning loads: the design §4 columns, as the results store keeps
    // them. The budget stays with the run (caltable.csv, budget.csv, the report).
    for row in &mut rows {
        row.budget = None;
    }
    let manifest = Manifest::read(&manifest_path).map_err(|e| {
        Diagnostic::in_file(
            &manifest_path,
            format!("cannot read {}: {e}", manifest_path.display()),
        )
        .with_hint(hint)
    })?;
    let table = ExportTable {
        run: RunFacts {
            recipe_name: manifest.recipe.name,
            recipe_sha256: manifest.recipe.sha256,
            bench_name: manifest.bench.name,
            started_utc: manifest.started_utc,
        },
        rows,
    };
    let text = render(&table, args.format.into())
        .map_err(|e| Diagnostic::in_file(&table_path, e.to_string()))?;
    match &args.out {
        Some(path) => {
            write_atomic(path, text.as_bytes())
                .map_err(|e| Diagnostic::plain(format!("cannot write {}: {e}", path.display())))?;
            log::notice(&format!(
                "taucal: {} rows written to {}",
                table.rows.len(),
                path.display()
            ));
        }
        None => print!("{text}"),
    }
    Ok(Exit::Ok)
}
