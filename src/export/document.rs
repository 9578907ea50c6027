//! The serde document behind the JSON and TOML exports.

use super::ExportTable;
use crate::fit::{RowSource, TableRow};
use serde::{Deserialize, Serialize};

/// Identifies the document kind, for readers that sniff files.
pub const FORMAT_NAME: &str = "taucal-k-table";

/// Version of the document layout.
pub const FORMAT_VERSION: u32 = 1;

/// A calibration table as JSON and TOML hold it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Document {
    /// Always [`FORMAT_NAME`].
    pub format: String,
    /// Layout version, [`FORMAT_VERSION`].
    pub version: u32,
    /// Units of the entries' numbers.
    pub units: Units,
    /// The run the table came from.
    pub run: RunMeta,
    /// One entry per cell.
    pub entries: Vec<Entry>,
}

/// Units, spelled out for readers that do not know the field-name convention.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Units {
    /// Unit of `delay_ps` and `ci95_ps`.
    pub delay: String,
    /// Unit of `center_mhz` and `bw_mhz`.
    pub frequency: String,
    /// What `delay_ps` is.
    pub quantity: String,
}

/// Where the table came from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunMeta {
    /// Recipe name.
    pub recipe: String,
    /// SHA-256 of the recipe file, hex.
    pub recipe_sha256: String,
    /// Bench name.
    pub bench: String,
    /// Run start, UTC, RFC 3339.
    pub started_utc: String,
}

/// One cell of the table.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Entry {
    /// Channel center frequency.
    pub center_mhz: u32,
    /// Channel bandwidth.
    pub bw_mhz: u32,
    /// DUT receive gain state.
    pub gain_index: u32,
    /// The DUT's K.
    pub delay_ps: f64,
    /// Half-width of its 95 % interval.
    pub ci95_ps: f64,
    /// Samples kept (0 for modelled rows).
    pub n_used: u64,
    /// Samples rejected.
    pub n_rejected: u64,
    /// `measured`, `modelled`, `inferred` or `predicted`.
    pub source: String,
}

impl From<&TableRow> for Entry {
    fn from(r: &TableRow) -> Self {
        Entry {
            center_mhz: r.center_mhz,
            bw_mhz: r.bw_mhz,
            gain_index: r.gain_index,
            delay_ps: r.delay_ps,
            ci95_ps: r.ci95_ps,
            n_used: r.n_used,
            n_rejected: r.n_rejected,
            source: RowSource::as_str(r.source).to_string(),
        }
    }
}

impl From<&ExportTable> for Document {
    fn from(t: &ExportTable) -> Self {
        Document {
            format: FORMAT_NAME.into(),
            version: FORMAT_VERSION,
            units: Units {
                delay: "ps".into(),
                frequency: "MHz".into(),
                quantity: "DUT group delay K = TX + RX per receive gain state".into(),
            },
            run: RunMeta {
                recipe: t.run.recipe_name.clone(),
                recipe_sha256: t.run.recipe_sha256.clone(),
                bench: t.run.bench_name.clone(),
                started_utc: t.run.started_utc.clone(),
            },
            entries: t.rows.iter().map(Entry::from).collect(),
        }
    }
}
