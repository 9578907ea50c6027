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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fleet::centred::deviations;
    use crate::store::FleetCell;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;
    use rand_distr::{Distribution, StandardNormal};

    fn cell(serial: &str, g: i64, k: f64) -> FleetCell {
        FleetCell {
            serial: serial.into(),
            station: "a".into(),
            center_mhz: 5180,
            bw_mhz: 80,
            gain_index: g,
            delay_ps: k,
            ci95_ps: 40.0,
            exchanges: 160,
        }
    }

    #[test]
    fn a_shifted_unit_and_a_unit_with_one_bad_cell_are_listed_and_few_others() {
        // 300 ordinary units (unit spread 30 ps, cell noise 20 ps) over several seeds, plus one
        // unit 250 ps high in every cell and one with a single cell 400 ps high. Under
        // normality a robust z beyond 3.5 has probability about 5e-4 per score.
        for seed in 1..=5 {
            let mut rng = ChaCha8Rng::seed_from_u64(seed);
            let mut normal = || -> f64 { StandardNormal.sample(&mut rng) };
            let mut cells = Vec::new();
            for u in 0..300 {
                let unit = 30.0 * normal();
                for g in 0..3 {
                    let k = 2400.0 + 250.0 * g as f64 + unit + 20.0 * normal();
                    cells.push(cell(&format!("U{u:03}"), g, k));
                }
            }
            for g in 0..3 {
                cells.push(cell("SHIFTED", g, 2650.0 + 250.0 * g as f64));
                let one = if g == 1 { 400.0 } else { 0.0 };
                cells.push(cell("ONE-BAD", g, 2400.0 + 250.0 * g as f64 + one));
            }
            let listed = outliers(&deviations(&cells));
            let names: Vec<&str> = listed.iter().map(|o| o.unit.serial.as_str()).collect();
            assert!(names.contains(&"SHIFTED"), "seed {seed}: {names:?}");
            assert!(names.contains(&"ONE-BAD"), "seed {seed}: {names:?}");
            assert!(names.len() <= 5, "seed {seed}: too many listed: {names:?}");
            let one = listed
                .iter()
                .find(|o| o.unit.serial == "ONE-BAD")
                .expect("listed");
            assert_eq!(one.unit.worst_cell, (5180, 80, 1));
        }
    }
}
