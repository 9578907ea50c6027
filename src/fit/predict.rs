//! Prediction of a unit's unmeasured cells from its measured ones through a population model:
//! the fleet's mean vector and covariance over cells, and the conditional Gaussian. The
//! model's covariance is that of measured K across units, so it holds each cell's measurement
//! noise; the noise is taken off where the truth is predicted and the unit's own noise put on
//! where its measurements condition the prediction.
//!
//! Pure: the model comes in as numbers ([`crate::fit::predict_file`] reads and writes it).

use super::cal_row::{CalRow, RowSource};

/// A cell: center frequency and bandwidth in MHz, gain state.
pub type Cell = (u32, u32, u32);

/// The normal quantile of a two-sided 95 % interval.
pub const Z95: f64 = 1.959_964;

/// A population model over cells.
#[derive(Debug, Clone, PartialEq)]
pub struct PredictModel {
    /// The cells, in a fixed order every other field follows.
    pub cells: Vec<Cell>,
    /// Mean measured K per cell, ps.
    pub mean_ps: Vec<f64>,
    /// Covariance of measured K across units (measurement noise included), ps².
    pub cov_ps2: Vec<Vec<f64>>,
    /// The population's measurement noise per cell (RMS of ci95 / 1.96), ps.
    pub noise_sd_ps: Vec<f64>,
    /// Indices of the cells the plan measures.
    pub measured: Vec<usize>,
}

/// One measured cell of the unit being predicted.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Given {
    /// Index into the model's cells.
    pub index: usize,
    /// Measured K, ps.
    pub delay_ps: f64,
    /// Its measurement's standard uncertainty, ps.
    pub noise_sd_ps: f64,
}

/// A predicted cell.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Prediction {
    /// Index into the model's cells.
    pub index: usize,
    /// Conditional mean of the cell's true K, ps.
    pub delay_ps: f64,
    /// Conditional SD of the cell's true K, ps.
    pub sd_ps: f64,
}

/// Why a prediction could not be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum PredictError {
    /// The measured cells' covariance is not positive definite.
    #[error("the measured cells' covariance is not positive definite")]
    NotPositiveDefinite,
}

impl PredictModel {
    /// The index of `cell`, if the model has it.
    pub fn index_of(&self, cell: Cell) -> Option<usize> {
        self.cells.iter().position(|&c| c == cell)
    }

    /// Every cell not in `given`, predicted from `given` (conditional Gaussian).
    pub fn predict(&self, given: &[Given]) -> Result<Vec<Prediction>, PredictError> {
        let s: Vec<usize> = given.iter().map(|g| g.index).collect();
        let chol = self.cholesky_of_given(given)?;
        let resid: Vec<f64> = given
            .iter()
            .map(|g| g.delay_ps - self.mean_ps[g.index])
            .collect();
        let alpha = chol.solve(&resid);
        Ok((0..self.cells.len())
            .filter(|j| !s.contains(j))
            .map(|j| {
                let c: Vec<f64> = s.iter().map(|&i| self.cov_ps2[j][i]).collect();
                let w = chol.solve(&c);
                let explained: f64 = c.iter().zip(&w).map(|(a, b)| a * b).sum();
                let var = self.true_var(j) - explained;
                Prediction {
                    index: j,
                    delay_ps: self.mean_ps[j]
                        + c.iter().zip(&alpha).map(|(a, b)| a * b).sum::<f64>(),
                    sd_ps: var.max(0.0).sqrt(),
                }
            })
            .collect())
    }

    /// The conditional SD of every cell not in `measured` when those are measured with the
    /// population's own noise (what a plan expects; no values needed).
    pub fn expected_sd(&self, measured: &[usize]) -> Result<Vec<Prediction>, PredictError> {
        let given: Vec<Given> = measured
            .iter()
            .map(|&i| Given {
                index: i,
                delay_ps: self.mean_ps[i],
                noise_sd_ps: self.noise_sd_ps[i],
            })
            .collect();
        self.predict(&given)
    }

    /// Variance of a cell's true K across units: the measured variance less its noise.
    fn true_var(&self, j: usize) -> f64 {
        (self.cov_ps2[j][j] - self.noise_sd_ps[j].powi(2)).max(0.0)
    }

    /// Cholesky factor of the given cells' covariance with the unit's own noise in place of
    /// the population's.
    fn cholesky_of_given(&self, given: &[Given]) -> Result<Cholesky, PredictError> {
        let a: Vec<Vec<f64>> = given
            .iter()
            .map(|gi| {
                given
                    .iter()
                    .map(|gj| {
                        let c = self.cov_ps2[gi.index][gj.index];
                        if gi.index == gj.index {
                            self.true_var(gi.index) + gi.noise_sd_ps.powi(2)
                        } else {
                            c
                        }
                    })
                    .collect()
            })
            .collect();
        Cholesky::new(&a).ok_or(PredictError::NotPositiveDefinite)
    }
}

/// `rows` with a `predicted` row for every model cell the table has not measured, predicted
/// from every model cell it has (each with its own ci95 as its noise); rows of those cells that
/// a model across gain states filled in are replaced, measured rows never altered. A table
/// with none of the model's cells is returned as it is: there is nothing to predict from.
pub fn with_predicted_rows(
    model: &PredictModel,
    rows: &[CalRow],
) -> Result<Vec<CalRow>, PredictError> {
    let given: Vec<Given> = rows
        .iter()
        .filter(|r| r.source.is_from_exchanges())
        .filter_map(|r| {
            model
                .index_of((r.center_mhz, r.bw_mhz, r.gain_index))
                .map(|index| Given {
                    index,
                    delay_ps: r.delay_ps,
                    noise_sd_ps: r.ci95_ps / Z95,
                })
        })
        .collect();
    if given.is_empty() {
        return Ok(rows.to_vec());
    }
    let predicted = model.predict(&given)?;
    let replaced = |r: &CalRow| {
        !r.source.is_from_exchanges()
            && predicted
                .iter()
                .any(|p| model.cells[p.index] == (r.center_mhz, r.bw_mhz, r.gain_index))
    };
    let mut out: Vec<CalRow> = rows.iter().filter(|r| !replaced(r)).cloned().collect();
    out.extend(predicted.iter().map(|p| {
        let (center_mhz, bw_mhz, gain_index) = model.cells[p.index];
        CalRow {
            center_mhz,
            bw_mhz,
            gain_index,
            delay_ps: p.delay_ps,
            ci95_ps: Z95 * p.sd_ps,
            n_used: 0,
            n_rejected: 0,
            n_bursts: 0,
            sd_ps: f64::NAN,
            // A normal prediction interval: its "degrees of freedom" are unlimited.
            stat_dof: f64::INFINITY,
            source: RowSource::Predicted,
        }
    }));
    out.sort_by_key(|r| (r.center_mhz, r.bw_mhz, r.gain_index));
    Ok(out)
}

/// Lower-triangular L with L·Lᵀ = A.
struct Cholesky {
    l: Vec<Vec<f64>>,
}

impl Cholesky {
    fn new(a: &[Vec<f64>]) -> Option<Cholesky> {
        let n = a.len();
        let mut l = vec![vec![0.0; n]; n];
        for i in 0..n {
            for j in 0..=i {
                let s: f64 = (0..j).map(|k| l[i][k] * l[j][k]).sum();
                if i == j {
                    let d = a[i][i] - s;
                    if !(d > 0.0 && d.is_finite()) {
                        return None;
                    }
                    l[i][i] = d.sqrt();
                } else {
                    l[i][j] = (a[i][j] - s) / l[j][j];
                }
            }
        }
        Some(Cholesky { l })
    }

    /// x with A·x = b.
    fn solve(&self, b: &[f64]) -> Vec<f64> {
        let n = b.len();
        let mut y = vec![0.0; n];
        for i in 0..n {
            y[i] = (b[i] - (0..i).map(|k| self.l[i][k] * y[k]).sum::<f64>()) / self.l[i][i];
        }
        let mut x = vec![0.0; n];
        for i in (0..n).rev() {
            x[i] = (y[i] - (i + 1..n).map(|k| self.l[k][i] * x[k]).sum::<f64>()) / self.l[i][i];
        }
        x
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn model(rho: f64) -> PredictModel {
        // Two cells, SD 30 ps each, correlation `rho`, no measurement noise.
        PredictModel {
            cells: vec![(5180, 80, 0), (5180, 80, 1)],
            mean_ps: vec![2400.0, 2600.0],
            cov_ps2: vec![vec![900.0, rho * 900.0], vec![rho * 900.0, 900.0]],
            noise_sd_ps: vec![0.0, 0.0],
            measured: vec![0],
        }
    }

    #[test]
    fn two_cells_follow_the_bivariate_normal_textbook_formula() {
        // Bivariate normal: E[Y | X = x] = μy + ρ σy/σx (x − μx), Var = σy² (1 − ρ²)
        // (e.g. Papoulis & Pillai, Probability, Random Variables and Stochastic Processes,
        // 4th ed., §6-4). ρ = 0.8, σ = 30, x 50 ps above its mean: 2640 ± 18 ps.
        let p = model(0.8)
            .predict(&[Given {
                index: 0,
                delay_ps: 2450.0,
                noise_sd_ps: 0.0,
            }])
            .unwrap();
        assert_eq!(p.len(), 1);
        assert_eq!(p[0].index, 1);
        assert!((p[0].delay_ps - 2640.0).abs() < 1e-9, "{p:?}");
        assert!((p[0].sd_ps - 18.0).abs() < 1e-9, "{p:?}");
    }

    #[test]
    fn measurement_noise_weakens_the_measured_cell() {
        // Noise σn on X: X's variance becomes σ² + σn², so the slope is ρσ²/(σ² + σn²) and
        // the variance σ² − (ρσ²)²/(σ² + σn²). σn = 30: slope 0.4, variance 900 − 288 = 612.
        let p = model(0.8)
            .predict(&[Given {
                index: 0,
                delay_ps: 2450.0,
                noise_sd_ps: 30.0,
            }])
            .unwrap();
        assert!((p[0].delay_ps - 2620.0).abs() < 1e-9, "{p:?}");
        assert!((p[0].sd_ps - 612f64.sqrt()).abs() < 1e-9, "{p:?}");
        let exact = model(1.0).predict(&[Given {
            index: 0,
            delay_ps: 2450.0,
            noise_sd_ps: 0.0,
        }]);
        // ρ = 1 and no noise: the given block is 900, still positive definite; SD 0.
        assert_eq!(exact.unwrap()[0].sd_ps, 0.0);
    }

    #[test]
    fn a_table_gains_predicted_rows_and_keeps_its_measured_ones() {
        let measured = CalRow {
            center_mhz: 5180,
            bw_mhz: 80,
            gain_index: 0,
            delay_ps: 2450.0,
            ci95_ps: 0.0,
            n_used: 160,
            n_rejected: 0,
            n_bursts: 10,
            sd_ps: 300.0,
            stat_dof: 9.0,
            source: RowSource::Measured,
        };
        let modelled = CalRow {
            gain_index: 1,
            source: RowSource::Modelled,
            ..measured.clone()
        };
        let rows = with_predicted_rows(&model(0.8), &[measured.clone(), modelled]).unwrap();
        assert_eq!(rows.len(), 2);
        assert_eq!(rows[0], measured);
        assert_eq!(rows[1].source, RowSource::Predicted);
        assert!((rows[1].delay_ps - 2640.0).abs() < 1e-9);
        assert!((rows[1].ci95_ps - Z95 * 18.0).abs() < 1e-9);
        let elsewhere = CalRow {
            center_mhz: 2412,
            bw_mhz: 20,
            ..measured
        };
        assert_eq!(
            with_predicted_rows(&model(0.8), std::slice::from_ref(&elsewhere)).unwrap(),
            vec![elsewhere]
        );
    }
}
