//! Outlier units by a robust score: the modified z-score of Iglewicz & Hoaglin (*How to Detect
//! and Handle Outliers*, ASQC 1993), (x − median)/(1.4826·MAD), with their cut-off of 3.5, on
//! each unit's cell-centred deviation and on its worst single cell. Median and MAD are not
//! moved by the outliers they look for, as a mean and SD would be.

use super::centred::UnitDeviation;
use crate::fit::stats::{mad_scaled, median};

/// The modified z-score beyond which a unit is listed (Iglewicz & Hoaglin 1993).
pub const CUTOFF_Z: f64 = 3.5;

/// A unit listed as outside the population.
#[derive(Debug, Clone, PartialEq)]
pub struct Outlier {
    /// The unit, with its deviation and worst cell.
    pub unit: UnitDeviation,
    /// Robust z of its deviation across the fleet's units.
    pub score: f64,
}

/// The units whose deviation, or whose worst cell, scores beyond [`CUTOFF_Z`]; the worst
/// first.
pub fn outliers(units: &[UnitDeviation]) -> Vec<Outlier> {
    let mut d: Vec<f64> = units.iter().map(|u| u.deviation_ps).collect();
    let Some(centre) = median(&mut d) else {
        return Vec::new();
    };
    let spread = mad_scaled(&mut d, centre).unwrap_or(0.0);
    let mut out: Vec<Outlier> = units
        .iter()
        .map(|u| Outlier {
            unit: u.clone(),
            score: if spread > 0.0 {
                (u.deviation_ps - centre) / spread
            } else {
                0.0
            },
        })
        .filter(|o| o.score.abs() > CUTOFF_Z || o.unit.worst_z.abs() > CUTOFF_Z)
        .collect();
    out.sort_by(|a, b| {
        let m = |o: &Outlier| o.score.abs().max(o.unit.worst_z.abs());
        m(b).total_cmp(&m(a))
            .then_with(|| a.unit.serial.cmp(&b.unit.serial))
    });
    out
}
