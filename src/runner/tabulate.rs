//! From an exchanges file to a calibration table on disk: the one path both `taucal run` and
//! `taucal fit` take, so they agree to the last digit.

use crate::bench::Bench;
use crate::data::manifest::write_atomic;
use crate::data::{read_exchanges, ReadError};
use crate::fit::{caltable, Deembed, FitOptions, FitResult, Fitter};
use std::path::Path;

/// Streams `exchanges` through the fitter with the bench's path and reference delays.
pub fn fit_file(exchanges: &Path, bench: &Bench, reject_mad: f64) -> Result<FitResult, ReadError> {
    let deembed = Deembed::new(&bench.path, bench.reference.delay_ps.clone());
    let mut fitter = Fitter::new(deembed, FitOptions { reject_mad });
    for row in read_exchanges(exchanges)? {
        fitter.push(&row?);
    }
    Ok(fitter.finish())
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
