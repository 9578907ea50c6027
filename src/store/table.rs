//! A stored run's table as the exporters take it: what `store table` prints and the fleet
//! pages show, from one conversion.

use super::RunRecord;
use crate::export::{ExportTable, RunFacts};
use crate::fit::cal_row::RowSource;
use crate::fit::TableRow;

/// A stored cell whose source this taucal does not know (written by a newer one).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("run {run_id}: cell source `{source_name}` is one this taucal cannot export")]
pub struct UnknownSource {
    /// The run.
    pub run_id: String,
    /// The source as stored.
    pub source_name: String,
}

/// The table of run `rec`, its cells as `caltable.csv` rows.
pub fn export_table(rec: &RunRecord) -> Result<ExportTable, UnknownSource> {
    let mut rows = Vec::new();
    for c in &rec.cells {
        let source = RowSource::parse(&c.source).ok_or_else(|| UnknownSource {
            run_id: rec.run.run_id.clone(),
            source_name: c.source.clone(),
        })?;
        rows.push(TableRow {
            center_mhz: c.center_mhz as u32,
            bw_mhz: c.bw_mhz as u32,
            gain_index: c.gain_index as u32,
            delay_ps: c.delay_ps,
            ci95_ps: c.ci95_ps,
            n_used: c.n_used as u64,
            n_rejected: c.n_rejected as u64,
            source,
            // The store keeps the design §4 columns of a cell; its budget stays in the run.
            budget: None,
        });
    }
    Ok(ExportTable {
        run: RunFacts {
            recipe_name: rec.run.recipe_name.clone(),
            recipe_sha256: rec.run.recipe_sha256.clone(),
            bench_name: rec.run.bench_name.clone(),
            started_utc: rec.run.started_utc.clone(),
        },
        rows,
    })
}
