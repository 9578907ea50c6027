//! Exports of a run's calibration table for firmware and other tools: a C header, JSON, TOML and
//! CSV, one file per format.
//!
//! Writers are pure (table and run facts in, text out) so every format is tested without a disk;
//! the command in `src/cli/export.rs` does the reading and writing. JSON and TOML share one serde
//! document so they cannot drift apart.

pub mod c_header;
pub mod csv_table;
pub mod document;
pub mod json;
pub mod toml_file;

use crate::fit::TableRow;
use thiserror::Error;

pub use document::{Document, Entry};

/// What a run directory says about the table being exported.
#[derive(Debug, Clone, PartialEq)]
pub struct RunFacts {
    /// Recipe name.
    pub recipe_name: String,
    /// SHA-256 of the recipe file, hex.
    pub recipe_sha256: String,
    /// Bench name.
    pub bench_name: String,
    /// When the run started, UTC, RFC 3339.
    pub started_utc: String,
}

/// A calibration table with the facts of the run it came from.
#[derive(Debug, Clone, PartialEq)]
pub struct ExportTable {
    /// Where the table came from.
    pub run: RunFacts,
    /// Its rows, as `caltable.csv` holds them.
    pub rows: Vec<TableRow>,
}

/// Why a table could not be exported.
#[derive(Debug, Error)]
pub enum ExportError {
    /// The table has no rows (C forbids an empty array initialiser, and an empty table helps no
    /// firmware).
    #[error("the calibration table has no rows")]
    Empty,
    /// A value does not fit the C header's integer type.
    #[error("row {index} (center {center_mhz} MHz, gain {gain_index}): {column} {value} ps does not fit a 32-bit integer")]
    OutOfRange {
        /// 0-based row.
        index: usize,
        /// Its center frequency.
        center_mhz: u32,
        /// Its gain state.
        gain_index: u32,
        /// `delay_ps` or `ci95_ps`.
        column: &'static str,
        /// The value.
        value: f64,
    },
    /// Serialisation failed.
    #[error("cannot serialise the table: {0}")]
    Serialise(String),
}

/// Formats taucal exports to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    /// C99 header with integer picoseconds.
    C,
    /// JSON document.
    Json,
    /// TOML document.
    Toml,
    /// The `caltable.csv` columns.
    Csv,
}

/// Renders `table` in `format`.
pub fn render(table: &ExportTable, format: Format) -> Result<String, ExportError> {
    match format {
        Format::C => c_header::render(table),
        Format::Json => json::render(table),
        Format::Toml => toml_file::render(table),
        Format::Csv => csv_table::render(table),
    }
}

/// `value` rounded to the nearest integer picosecond (halves away from zero), when it fits `i32`.
pub fn integer_ps(value: f64) -> Option<i32> {
    let r = value.round();
    (r.is_finite() && r >= f64::from(i32::MIN) && r <= f64::from(i32::MAX)).then_some(r as i32)
}

#[cfg(test)]
pub(crate) mod test_table {
    use super::*;
    use crate::fit::RowSource;

    /// Invented table: two gain states measured, one modelled, values chosen to exercise rounding.
    pub fn table() -> ExportTable {
        let row = |gain_index, delay_ps, ci95_ps, source| TableRow {
            center_mhz: 5180,
            bw_mhz: 80,
            gain_index,
            delay_ps,
            ci95_ps,
            n_used: 40,
            n_rejected: 1,
            source,
            budget: None,
        };
        ExportTable {
            run: RunFacts {
                recipe_name: "rx-gain-sweep".into(),
                recipe_sha256: "ab".repeat(32),
                bench_name: "bench */ one".into(),
                started_utc: "2026-01-02T03:04:05Z".into(),
            },
            rows: vec![
                row(0, 2400.5, 1.499, RowSource::Measured),
                row(1, -2650.5, 0.5, RowSource::Measured),
                row(2, 2900.499, 12.0, RowSource::Modelled),
            ],
        }
    }
}
