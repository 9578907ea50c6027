//! What the live page shows under its status strip: the report's sections drawn from the
//! exchanges recorded so far (table fitted from them, plots), and once the run has ended the
//! report itself. Pure functions of the data; the builder decides when to call them.

use crate::bench::Bench;
use crate::data::{Exchange, Manifest, RunStatus};
use crate::fit::{Deembed, FitOptions, TableRow};
use crate::report::load::{assemble, Written};
use crate::report::{html, ReportError};
use serde::Serialize;
use std::path::Path;

/// The page's sections at one moment; sent to viewers as JSON.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct Content {
    /// The page's title (the recipe's name).
    pub title: String,
    /// The line under it: bench, unit, start.
    pub sub: String,
    /// The sections' HTML (the report's markup).
    pub html: String,
    /// True once it is the finished run's report.
    pub ended: bool,
    /// Rows the sections were drawn from.
    pub rows: u64,
}

/// The sections of a run under way: the table fitted from the rows so far (measured cells;
/// the plan's verification stages left out, as the run's fit does) and the report's plots.
pub fn live(
    manifest: &Manifest,
    rows: &[Exchange],
    bench: &Bench,
    verify_stages: &[String],
) -> Result<Content, ReportError> {
    // A running run's manifest names its verification stages only at the end.
    let mut manifest = manifest.clone();
    if manifest.fit.verify_stages.is_empty() {
        manifest.fit.verify_stages = verify_stages.to_vec();
    }
    let verify = &manifest.fit.verify_stages;
    let deembed = Deembed::new(&bench.path, bench.reference.delay_ps.clone())
        .with_measured(bench.measured_path.clone())
        .with_applied_k(manifest.fit.applied_k_ps.or(bench.applied_k_ps()));
    let options = FitOptions {
        reject_mad: manifest.fit.reject_mad,
    };
    let fit = crate::fit::fit(
        deembed,
        options,
        rows.iter().filter(|x| !verify.contains(&x.stage)),
    );
    let table: Vec<TableRow> = fit.rows.iter().map(TableRow::from).collect();
    let data = assemble(
        Written {
            manifest: manifest.clone(),
            table,
            budget: Vec::new(),
            gainmap: Vec::new(),
            verify: Vec::new(),
            absent: Vec::new(),
        },
        rows.to_vec(),
        bench,
    );
    Ok(Content {
        title: manifest.recipe.name.clone(),
        sub: sub_line(&manifest),
        html: html::live_body(&data)?,
        ended: false,
        rows: rows.len() as u64,
    })
}

/// The finished run's report sections, from its files as `taucal report` reads them.
pub fn ended(dir: &Path, bench: &Bench) -> Result<Content, ReportError> {
    let data = crate::report::load::load(dir, bench)?;
    Ok(Content {
        title: data.manifest.recipe.name.clone(),
        sub: sub_line(&data.manifest),
        html: html::body(&data)?,
        ended: true,
        rows: data.manifest.counts.exchanges,
    })
}

/// The line under the title: bench, unit, station, start to the second.
pub fn sub_line(m: &Manifest) -> String {
    let mut parts = vec![m.bench.name.clone()];
    if let Some(u) = &m.unit_serial {
        parts.push(format!("unit {u}"));
    }
    if let Some(s) = &m.station {
        parts.push(format!("station {s}"));
    }
    parts.push(format!("started {}", html::to_the_second(&m.started_utc)));
    parts.join(" · ")
}

/// The word a status goes by on the page.
pub fn status_word(status: RunStatus) -> &'static str {
    match status {
        RunStatus::Running => "running",
        RunStatus::Completed => "completed",
        RunStatus::Stopped => "stopped",
        RunStatus::Failed => "failed",
    }
}
