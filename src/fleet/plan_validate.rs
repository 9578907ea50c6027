//! Leave-one-unit-out check of a plan: each unit in turn is left out, the model is rebuilt from
//! the others, the unit's unmeasured cells are predicted from its measured ones, and each
//! prediction interval is checked against what the unit's full calibration measured there.
//! Also the exchanges the plan spends per unit against the full recipe's.
//!
//! The measured value carries its own noise, so the interval checked is the prediction's
//! widened by that cell's measurement uncertainty: √(sd² + u²). The cells stay those the plan
//! chose from all units (the choice is not repeated per fold).

use super::plan::{model_of, PlanError, Population, UnitCells};
use crate::fit::predict::{Given, Z95};

/// What leaving each unit out showed.
#[derive(Debug, Clone, PartialEq)]
pub struct Validation {
    /// Units left out in turn.
    pub units: usize,
    /// Prediction intervals checked.
    pub intervals: usize,
    /// Those that held the measured value.
    pub covered: usize,
    /// Mean exchanges per unit of the full calibration (all cells).
    pub full_exchanges: f64,
    /// Mean exchanges per unit of the plan's cells only.
    pub plan_exchanges: f64,
}

impl Validation {
    /// Fraction of intervals that held the measured value.
    pub fn coverage(&self) -> f64 {
        self.covered as f64 / self.intervals as f64
    }

    /// The plan's exchanges as a fraction of the full recipe's.
    pub fn exchange_ratio(&self) -> f64 {
        self.plan_exchanges / self.full_exchanges
    }
}

/// Leave-one-out over `pop` for the plan measuring `measured`.
pub fn leave_one_out(pop: &Population, measured: &[usize]) -> Result<Validation, PlanError> {
    let mut intervals = 0;
    let mut covered = 0;
    for (i, unit) in pop.units.iter().enumerate() {
        let others: Vec<&UnitCells> = pop
            .units
            .iter()
            .enumerate()
            .filter(|&(k, _)| k != i)
            .map(|(_, u)| u)
            .collect();
        let (model, _) = model_of(&pop.cells, &others)?;
        let given: Vec<Given> = measured
            .iter()
            .map(|&j| Given {
                index: j,
                delay_ps: unit.delay_ps[j],
                noise_sd_ps: unit.noise_sd_ps[j],
            })
            .collect();
        for p in model.predict(&given)? {
            let half = Z95 * (p.sd_ps.powi(2) + unit.noise_sd_ps[p.index].powi(2)).sqrt();
            intervals += 1;
            if (unit.delay_ps[p.index] - p.delay_ps).abs() <= half {
                covered += 1;
            }
        }
    }
    let n = pop.units.len() as f64;
    let full_exchanges = pop
        .units
        .iter()
        .map(|u| u.exchanges.iter().sum::<f64>())
        .sum::<f64>()
        / n;
    let plan_exchanges = pop
        .units
        .iter()
        .map(|u| measured.iter().map(|&j| u.exchanges[j]).sum::<f64>())
        .sum::<f64>()
        / n;
    Ok(Validation {
        units: pop.units.len(),
        intervals,
        covered,
        full_exchanges,
        plan_exchanges,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;
    use rand_distr::{Distribution, StandardNormal};

    #[test]
    fn gaussian_fleets_are_covered_about_95_percent() {
        // Units K = 2000 + a (shared, SD 30) + b_g (each cell, SD 10) per cell, measured with
        // noise SD 8: a Gaussian population, so the conditional intervals should hold about
        // 95 % of left-out values. 30 fleets of 60 units, 4 cells, 1 measured: 5400 intervals,
        // binomial SE 0.3 %.
        let (mut intervals, mut covered) = (0, 0);
        for seed in 0..30u64 {
            let mut rng = ChaCha8Rng::seed_from_u64(900 + seed);
            let mut z = || -> f64 { StandardNormal.sample(&mut rng) };
            let units: Vec<UnitCells> = (0..60)
                .map(|u| {
                    let a = 30.0 * z();
                    UnitCells {
                        serial: format!("U{u}"),
                        delay_ps: (0..4)
                            .map(|g| 2000.0 + 100.0 * g as f64 + a + 10.0 * z() + 8.0 * z())
                            .collect(),
                        noise_sd_ps: vec![8.0; 4],
                        exchanges: vec![160.0; 4],
                    }
                })
                .collect();
            let pop = Population {
                cells: (0..4).map(|g| (5180, 80, g)).collect(),
                units,
                incomplete: 0,
            };
            let v = leave_one_out(&pop, &[1]).unwrap();
            assert_eq!(v.exchange_ratio(), 0.25);
            intervals += v.intervals;
            covered += v.covered;
        }
        let c = covered as f64 / intervals as f64;
        assert!((0.93..=0.97).contains(&c), "coverage {c}");
    }
}
