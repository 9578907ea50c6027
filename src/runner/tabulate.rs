//! From an exchanges file to a calibration table (and verification inputs): the one path both
//! `taucal run` and `taucal fit` take, so they agree to the last digit.

use crate::bench::Bench;
use crate::data::manifest::write_atomic;
use crate::data::{read_exchanges, Exchange, ReadError};
use crate::fit::model::{fill_table, ModelOptions};
use crate::fit::verify::Checked;
use crate::fit::{burst_delays, caltable, Deembed, FitOptions, FitResult, Fitter};
use std::path::Path;

/// How the table is fitted.
#[derive(Debug, Clone, PartialEq)]
pub struct FitSettings {
    /// Rejection threshold, scaled MADs.
    pub reject_mad: f64,
    /// Stages whose exchanges verify the table instead of fitting it.
    pub verify_stages: Vec<String>,
    /// The DUT's number of gain states: unmeasured states get modelled rows.
    pub gain_states: Option<u32>,
}

/// The table, and the verification exchanges judged one by one.
pub struct Tabulated {
    /// The fitted table.
    pub fit: FitResult,
    /// Verification exchanges, de-embedded.
    pub checked: Vec<Checked>,
}

/// Streams `exchanges` through the fitter with the bench's path and reference delays; rows of
/// verification stages are set aside and de-embedded burst by burst instead.
pub fn fit_file(
    exchanges: &Path,
    bench: &Bench,
    settings: &FitSettings,
) -> Result<Tabulated, ReadError> {
    let deembed = Deembed::new(&bench.path, bench.reference.delay_ps.clone());
    let mut fitter = Fitter::new(
        deembed.clone(),
        FitOptions {
            reject_mad: settings.reject_mad,
        },
    );
    let mut bursts: Vec<Vec<Exchange>> = Vec::new();
    let mut rows = read_exchanges(exchanges)?;
    // One row reused for the whole file: no allocation per exchange.
    let mut row = Exchange::default();
    while rows.read_into(&mut row)? {
        if settings.verify_stages.contains(&row.stage) {
            match bursts.last_mut() {
                Some(b)
                    if b[0].stage == row.stage
                        && b[0].point == row.point
                        && b[0].burst == row.burst =>
                {
                    b.push(row.clone())
                }
                _ => bursts.push(vec![row.clone()]),
            }
        } else {
            fitter.push(&row);
        }
    }
    let mut fit = fitter.finish();
    if let Some(n) = settings.gain_states {
        let wanted: Vec<u32> = (0..n).collect();
        match fill_table(&fit.rows, &wanted, ModelOptions::default()) {
            Ok(rows) => fit.rows = rows,
            Err(e) => tracing::warn!("unmeasured gain states not modelled: {e}"),
        }
    }
    let fallback = 1.0 + fit.summary.median_clock_offset_ppm.unwrap_or(0.0) * 1e-6;
    let mut checked = Vec::new();
    for burst in &bursts {
        for (x, k) in burst.iter().zip(burst_delays(&deembed, burst, fallback)) {
            if let (Some(k_ps), Some(gain_index)) = (k, x.dut_gain) {
                checked.push(Checked {
                    center_mhz: x.center_mhz,
                    bw_mhz: x.bw_mhz,
                    atten_db: x.atten_db,
                    gain_index,
                    k_ps,
                });
            }
        }
    }
    Ok(Tabulated { fit, checked })
}

/// The table as `caltable.csv` text.
pub fn caltable_text(result: &FitResult) -> std::io::Result<Vec<u8>> {
    let mut out = Vec::new();
    caltable::write_caltable(&mut out, &result.rows).map_err(std::io::Error::other)?;
    Ok(out)
}

/// Writes `caltable.csv` atomically.
pub fn write_table(path: &Path, result: &FitResult) -> std::io::Result<()> {
    write_atomic(path, &caltable_text(result)?)
}
