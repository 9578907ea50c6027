//! A reduced calibration plan: from the fleet's units (each unit's latest accepted table), a
//! population model over cells — mean vector and Ledoit–Wolf covariance — and the N cells to
//! measure that keep the worst prediction SD of the rest smallest.
//!
//! The choice is greedy: one cell at a time, each the one that most lowers the worst remaining
//! SD given those already chosen. Exhaustive search over all N-subsets is exact but grows
//! combinatorially; greedy is the usual practice for such sensor-selection problems and is not
//! guaranteed optimal.

use super::centred::key;
use super::shrinkage::ledoit_wolf;
use crate::fit::predict::{Cell, PredictError, PredictModel, Prediction, Z95};
use crate::store::FleetCell;
use std::collections::{BTreeMap, BTreeSet};

/// Fewest complete units a model is built from.
pub const MIN_UNITS: usize = 3;

/// One unit with every cell of the population.
#[derive(Debug, Clone, PartialEq)]
pub struct UnitCells {
    /// The unit.
    pub serial: String,
    /// K per cell, in the population's cell order, ps.
    pub delay_ps: Vec<f64>,
    /// Each cell's standard uncertainty (ci95 / 1.96), ps.
    pub noise_sd_ps: Vec<f64>,
    /// Exchanges each cell cost.
    pub exchanges: Vec<f64>,
}

/// The units that have every cell.
#[derive(Debug, Clone, PartialEq)]
pub struct Population {
    /// The cells, sorted.
    pub cells: Vec<Cell>,
    /// Units with all of them.
    pub units: Vec<UnitCells>,
    /// Units left out because they lack a cell.
    pub incomplete: usize,
}

/// Why no plan could be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum PlanError {
    /// Too few units hold every cell.
    #[error(
        "{complete} units hold every one of the {cells} cells; a model needs at least {MIN_UNITS}"
    )]
    TooFewUnits {
        /// Units with every cell.
        complete: usize,
        /// Cells in the fleet.
        cells: usize,
    },
    /// `--measure` is not between 1 and one less than the cells.
    #[error("--measure {measure}: the fleet has {cells} cells; measure from 1 to {} of them", .cells.saturating_sub(1))]
    Measure {
        /// Asked for.
        measure: usize,
        /// Cells in the fleet.
        cells: usize,
    },
    /// A cell key does not fit the table's types.
    #[error("cell {0:?} is not a valid cell (negative or too large)")]
    BadCell((i64, i64, i64)),
    /// The covariance could not be used.
    #[error(transparent)]
    Predict(#[from] PredictError),
}

/// The units of `cells` that hold every cell of the fleet.
pub fn population(cells: &[FleetCell]) -> Result<Population, PlanError> {
    let mut keys = BTreeSet::new();
    let mut by_unit: BTreeMap<&str, BTreeMap<Cell, &FleetCell>> = BTreeMap::new();
    for c in cells {
        let k = key(c);
        let cell = match (u32::try_from(k.0), u32::try_from(k.1), u32::try_from(k.2)) {
            (Ok(a), Ok(b), Ok(g)) => (a, b, g),
            _ => return Err(PlanError::BadCell(k)),
        };
        keys.insert(cell);
        by_unit.entry(&c.serial).or_default().insert(cell, c);
    }
    let cells: Vec<Cell> = keys.into_iter().collect();
    let mut units = Vec::new();
    let mut incomplete = 0;
    for (serial, have) in by_unit {
        if have.len() != cells.len() {
            incomplete += 1;
            continue;
        }
        let row = |f: &dyn Fn(&FleetCell) -> f64| cells.iter().map(|c| f(have[c])).collect();
        units.push(UnitCells {
            serial: serial.to_string(),
            delay_ps: row(&|c| c.delay_ps),
            noise_sd_ps: row(&|c| c.ci95_ps / Z95),
            exchanges: row(&|c| c.exchanges as f64),
        });
    }
    if units.len() < MIN_UNITS {
        return Err(PlanError::TooFewUnits {
            complete: units.len(),
            cells: cells.len(),
        });
    }
    Ok(Population {
        cells,
        units,
        incomplete,
    })
}

/// The population model of `units` over `cells` (no cells chosen yet), and the shrinkage.
pub fn model_of(cells: &[Cell], units: &[&UnitCells]) -> Result<(PredictModel, f64), PlanError> {
    let rows: Vec<Vec<f64>> = units.iter().map(|u| u.delay_ps.clone()).collect();
    let shrunk = ledoit_wolf(&rows).ok_or(PlanError::TooFewUnits {
        complete: units.len(),
        cells: cells.len(),
    })?;
    let n = units.len() as f64;
    let noise_sd_ps = (0..cells.len())
        .map(|j| (units.iter().map(|u| u.noise_sd_ps[j].powi(2)).sum::<f64>() / n).sqrt())
        .collect();
    Ok((
        PredictModel {
            cells: cells.to_vec(),
            mean_ps: shrunk.mean,
            cov_ps2: shrunk.cov,
            noise_sd_ps,
            measured: Vec::new(),
        },
        shrunk.shrinkage,
    ))
}

/// The worst expected SD of the cells left when `measured` are measured.
fn worst_sd(model: &PredictModel, measured: &[usize]) -> Result<f64, PredictError> {
    Ok(model
        .expected_sd(measured)?
        .iter()
        .map(|p| p.sd_ps)
        .fold(0.0, f64::max))
}

/// Greedy choice of `n` cells (see the module's note), in the order chosen.
pub fn choose(model: &PredictModel, n: usize) -> Result<Vec<usize>, PlanError> {
    let p = model.cells.len();
    if n == 0 || n >= p {
        return Err(PlanError::Measure {
            measure: n,
            cells: p,
        });
    }
    let mut chosen: Vec<usize> = Vec::new();
    while chosen.len() < n {
        let mut best: Option<(f64, usize)> = None;
        for c in (0..p).filter(|c| !chosen.contains(c)) {
            let mut trial = chosen.clone();
            trial.push(c);
            let w = worst_sd(model, &trial)?;
            if best.is_none_or(|(bw, _)| w < bw) {
                best = Some((w, c));
            }
        }
        // The loop ran at least once: fewer than p cells are chosen.
        if let Some((_, c)) = best {
            chosen.push(c);
        }
    }
    Ok(chosen)
}

/// A plan: the model with its measured cells, and what it expects of the rest.
#[derive(Debug, Clone, PartialEq)]
pub struct FleetPlan {
    /// The predictor.
    pub model: PredictModel,
    /// Ledoit–Wolf shrinkage intensity used.
    pub shrinkage: f64,
    /// Expected SD of each cell not measured.
    pub expected: Vec<Prediction>,
}

/// The plan measuring `n` cells of `pop`.
pub fn plan(pop: &Population, n: usize) -> Result<FleetPlan, PlanError> {
    let units: Vec<&UnitCells> = pop.units.iter().collect();
    let (mut model, shrinkage) = model_of(&pop.cells, &units)?;
    let mut measured = choose(&model, n)?;
    measured.sort_unstable();
    let expected = model.expected_sd(&measured)?;
    model.measured = measured;
    Ok(FleetPlan {
        model,
        shrinkage,
        expected,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn fleet_cell(serial: &str, g: i64, k: f64) -> FleetCell {
        FleetCell {
            serial: serial.into(),
            station: "a".into(),
            center_mhz: 5180,
            bw_mhz: 80,
            gain_index: g,
            delay_ps: k,
            ci95_ps: 1.96,
            exchanges: 100,
        }
    }

    #[test]
    fn the_cell_that_explains_the_others_is_chosen_first() {
        // Three cells: 0 and 2 each equal 1 plus an independent part (SD 10 and 3 ps), so
        // measuring 1 leaves those parts; measuring 0 or 2 leaves both cells' parts in the
        // third cell. 300 units drawn from a seeded normal stream.
        use rand::SeedableRng;
        use rand_distr::{Distribution, StandardNormal};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        let mut z = || -> f64 { StandardNormal.sample(&mut rng) };
        let mut cells = Vec::new();
        for u in 0..300 {
            let a = 40.0 * z();
            let s = format!("U{u}");
            cells.push(fleet_cell(&s, 0, 1000.0 + a + 10.0 * z()));
            cells.push(fleet_cell(&s, 1, 2000.0 + a));
            cells.push(fleet_cell(&s, 2, 3000.0 + a + 3.0 * z()));
        }
        cells.push(fleet_cell("partial", 0, 1000.0));
        let pop = population(&cells).unwrap();
        assert_eq!(pop.units.len(), 300);
        assert_eq!(pop.incomplete, 1);
        let p = plan(&pop, 1).unwrap();
        assert_eq!(p.model.measured, vec![1]);
        assert_eq!(p.expected.len(), 2);
        assert!(matches!(
            plan(&pop, 3),
            Err(PlanError::Measure {
                measure: 3,
                cells: 3
            })
        ));
    }
}
