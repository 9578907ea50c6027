//! Models of the DUT's delay across cells: K against gain state (and temperature), to fill gain
//! states a run did not reach and to report how the delay drifts with temperature.
//!
//! The model is a polynomial in the gain index plus, when temperature varies, a linear
//! temperature term, fitted by weighted least squares ([`crate::fit::lsq`]) with weights `1/se²`
//! from the measured cells. Its order is chosen by AICc (Akaike's criterion with the small-sample
//! correction of Hurvich & Tsai, 1989; from memory) using the χ² of the fit as `−2 ln L`, which
//! is right because every measured cell brings its own standard error. AICc rather than
//! leave-one-out cross-validation: a table has 3–10 measured states, where leave-one-out scores
//! are dominated by the one or two end states (whose omission turns prediction into
//! extrapolation) and are undefined for the highest orders, while AICc's correction term grows
//! without bound as the parameter count nears the number of cells and so refuses to interpolate
//! noise.
//!
//! Uncertainty of a prediction: `xᵀ(XᵀWX)⁻¹x`, scaled by the Birge ratio χ²/ν when that exceeds
//! 1 (the cells scatter more than their own errors say, so the model is imperfect and the
//! scatter is believed) and then read with Student t on ν degrees of freedom; otherwise the
//! cells' own errors stand and the normal quantile applies (common practice).
//!
//! Pure: no I/O. Modelled rows are always flagged [`RowSource::Modelled`]; measured rows are never
//! altered.

use crate::fit::cal_row::{CalRow, RowSource};
use crate::fit::lsq::{self, LsqError, LsqFit};
use crate::fit::stats::t975;
use statrs::distribution::{ChiSquared, ContinuousCDF};
use std::collections::{BTreeMap, BTreeSet};
use thiserror::Error;

/// Highest polynomial order tried by default. Above a cubic, a polynomial in gain index follows
/// the noise of a few cells rather than the physics of a gain ladder.
pub const DEFAULT_MAX_ORDER: usize = 3;

/// Smallest `ci95_ps` taken from a table row: `caltable.csv` keeps 3 decimals, so a written
/// 0.000 means "below 0.0005", not zero (which would give an infinite weight).
const CI95_FLOOR_PS: f64 = 0.0005;

/// One measured value of K for the model.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Observation {
    /// DUT receive gain state.
    pub gain_index: u32,
    /// Temperature at which it was measured, when known.
    pub temp_c: Option<f64>,
    /// Measured K.
    pub delay_ps: f64,
    /// Its standard error (not the 95 % half-width).
    pub se_ps: f64,
}

/// Why a model could not be fitted.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ModelError {
    /// Too few observations to choose an order by AICc (it needs at least 3).
    #[error("{have} measured cells cannot choose and check a model; at least {need} are needed")]
    TooFew {
        /// Observations given.
        have: usize,
        /// Observations needed.
        need: usize,
    },
    /// An observation's delay or standard error is not a finite number, or the error is not
    /// positive.
    #[error("observation {index} (gain {gain_index}): {reason}")]
    BadObservation {
        /// 0-based position in the input.
        index: usize,
        /// Its gain state.
        gain_index: u32,
        /// What is wrong.
        reason: &'static str,
    },
    /// A measured table row's interval cannot be turned back into a standard error.
    #[error("center {center_mhz} MHz / {bw_mhz} MHz, gain {gain_index}: {reason}")]
    BadRow {
        /// Row's center frequency.
        center_mhz: u32,
        /// Row's bandwidth.
        bw_mhz: u32,
        /// Row's gain state.
        gain_index: u32,
        /// What is wrong.
        reason: &'static str,
    },
    /// A (center, bandwidth) group of the table needs a model that cannot be fitted.
    #[error("center {center_mhz} MHz / {bw_mhz} MHz: {source}")]
    Group {
        /// Group's center frequency.
        center_mhz: u32,
        /// Group's bandwidth.
        bw_mhz: u32,
        /// Why.
        source: Box<ModelError>,
    },
    /// The best model does not describe the measured cells: its χ² is improbably large for
    /// their own errors, so what it predicts for other states cannot be trusted.
    #[error(
        "the best model (order {order} in gain index) leaves χ² = {chi2:.1} on {dof} degrees of \
         freedom (p = {p:.1e}): it does not describe the measured states, so its predictions \
         cannot be trusted"
    )]
    Untrusted {
        /// Polynomial order chosen.
        order: usize,
        /// Its χ².
        chi2: f64,
        /// Residual degrees of freedom.
        dof: usize,
        /// Probability of a χ² at least this large were the model right.
        p: f64,
    },
    /// The solver refused the problem.
    #[error("least squares: {0}")]
    Lsq(#[from] LsqError),
}

/// Fewest measured states a (center, bandwidth) group needs before unmeasured states are
/// modelled. With three, AICc can only fit a constant (it needs n − k − 1 ≥ 1), which says K is
/// the same in every state — the very thing a per-gain table exists to doubt; with four, a
/// constant and a straight line compete and the loser's χ² is a check on the winner.
pub const MIN_STATES_TO_MODEL: usize = 4;

/// A model whose χ² has a smaller upper-tail probability than this does not describe its cells
/// (a 1 % test: common practice for a goodness-of-fit check).
pub const MIN_FIT_P: f64 = 0.01;

/// How a model is chosen.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ModelOptions {
    /// Highest polynomial order in gain index tried.
    pub max_order: usize,
}

impl Default for ModelOptions {
    fn default() -> Self {
        Self {
            max_order: DEFAULT_MAX_ORDER,
        }
    }
}

/// One candidate model and its score, kept so a report can show why an order won.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Candidate {
    /// Polynomial order in gain index.
    pub order: usize,
    /// Whether a linear temperature term was included.
    pub temperature: bool,
    /// χ² of the fit (weighted residual sum of squares with weights 1/se²).
    pub chi2: f64,
    /// Its AICc; the lowest wins.
    pub aicc: f64,
}

/// A predicted K with its uncertainty.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Prediction {
    /// Predicted K.
    pub delay_ps: f64,
    /// Standard error of the prediction (of the model's mean, not of a new measurement).
    pub se_ps: f64,
    /// Half-width of its two-sided 95 % interval.
    pub ci95_ps: f64,
    /// Degrees of freedom of that interval (infinite when it is a normal one).
    pub dof: f64,
}

/// A fitted K model: polynomial in gain index, optionally plus a linear temperature term.
#[derive(Debug, Clone, PartialEq)]
pub struct GainModel {
    /// The chosen candidate.
    pub chosen: Candidate,
    /// Every candidate tried, in the order tried.
    pub candidates: Vec<Candidate>,
    /// Temperature the temperature term is referred to (mean of the observations), when used.
    pub ref_temp_c: Option<f64>,
    /// Number of observations fitted.
    pub n: usize,
    fit: LsqFit,
    gain_center: f64,
    gain_half_range: f64,
    variance_scale: f64,
    quantile: f64,
    quantile_dof: f64,
}

impl GainModel {
    /// Predicted K at `gain_index` and temperature `temp_c` (the reference temperature when
    /// `None` or when the model has no temperature term).
    pub fn predict(&self, gain_index: u32, temp_c: Option<f64>) -> Prediction {
        let x = self.basis(gain_index, temp_c.or(self.ref_temp_c));
        let se_ps = (self.variance_scale * self.fit.variance_unscaled(&x)).sqrt();
        Prediction {
            delay_ps: self.fit.predict(&x),
            se_ps,
            ci95_ps: self.quantile * se_ps,
            dof: self.quantile_dof,
        }
    }

    /// Upper-tail probability of the chosen model's χ² on its residual degrees of freedom: how
    /// likely a scatter this large would be if the model were right and the cells' errors
    /// honest. `None` with no degrees of freedom left.
    pub fn fit_p_value(&self) -> Option<f64> {
        (self.fit.dof > 0).then(|| chi2_sf(self.fit.weighted_rss, self.fit.dof))
    }

    /// Temperature coefficient shared by every gain state, ps/°C, with its standard error;
    /// `None` when the chosen model has no temperature term.
    pub fn drift_ps_per_c(&self) -> Option<(f64, f64)> {
        let j = self.chosen.order + 1;
        self.chosen.temperature.then(|| {
            let var = self.variance_scale * self.fit.covariance_unscaled[j][j];
            (self.fit.coefficients[j], var.max(0.0).sqrt())
        })
    }

    fn basis(&self, gain_index: u32, temp_c: Option<f64>) -> Vec<f64> {
        basis(
            self.chosen.order,
            (f64::from(gain_index) - self.gain_center) / self.gain_half_range,
            self.ref_temp_c
                .map(|t0| temp_c.unwrap_or(t0) - t0)
                .filter(|_| self.chosen.temperature),
        )
    }
}

/// Upper-tail probability of `chi2` on `dof` (> 0) degrees of freedom.
fn chi2_sf(chi2: f64, dof: usize) -> f64 {
    ChiSquared::new(dof as f64).map_or(0.0, |d| d.sf(chi2))
}

/// `[1, u, u², …, u^order]` then the temperature offset when given.
fn basis(order: usize, u: f64, temp_offset_c: Option<f64>) -> Vec<f64> {
    let mut x: Vec<f64> = std::iter::successors(Some(1.0), |p| Some(p * u))
        .take(order + 1)
        .collect();
    x.extend(temp_offset_c);
    x
}

/// Fits K against gain index (and temperature when every observation has one and they differ),
/// choosing the polynomial order and the temperature term by AICc.
pub fn fit_gain_model(obs: &[Observation], options: ModelOptions) -> Result<GainModel, ModelError> {
    for (index, o) in obs.iter().enumerate() {
        let reason = if !o.delay_ps.is_finite() {
            Some("delay_ps is not finite")
        } else if !(o.se_ps.is_finite() && o.se_ps > 0.0) {
            Some("se_ps must be a positive finite number")
        } else if o.temp_c.is_some_and(|t| !t.is_finite()) {
            Some("temp_c is not finite")
        } else {
            None
        };
        if let Some(reason) = reason {
            return Err(ModelError::BadObservation {
                index,
                gain_index: o.gain_index,
                reason,
            });
        }
    }
    let n = obs.len();
    if n < 3 {
        return Err(ModelError::TooFew { have: n, need: 3 });
    }
    let gains: BTreeSet<u32> = obs.iter().map(|o| o.gain_index).collect();
    let (g_min, g_max) = match (gains.first(), gains.last()) {
        (Some(a), Some(b)) => (f64::from(*a), f64::from(*b)),
        _ => return Err(ModelError::TooFew { have: n, need: 3 }),
    };
    // Centre and scale the gain index to [−1, 1] so the powers stay comparable in size.
    let gain_center = (g_min + g_max) / 2.0;
    let gain_half_range = ((g_max - g_min) / 2.0).max(1.0);
    let temps: Option<Vec<f64>> = obs.iter().map(|o| o.temp_c).collect();
    let ref_temp_c = temps.as_ref().and_then(|t| {
        let mean = t.iter().sum::<f64>() / t.len() as f64;
        t.iter().any(|v| v != &mean).then_some(mean)
    });
    let y: Vec<f64> = obs.iter().map(|o| o.delay_ps).collect();
    let w: Vec<f64> = obs.iter().map(|o| o.se_ps.powi(-2)).collect();

    let mut candidates = Vec::new();
    let mut fitted: Vec<(Candidate, LsqFit)> = Vec::new();
    for k in 1..=n {
        for temperature in [false, true] {
            if temperature && ref_temp_c.is_none() {
                continue;
            }
            // One coefficient, taken by the temperature term, leaves no order at all.
            let Some(order) = (k - 1).checked_sub(usize::from(temperature)) else {
                continue;
            };
            // AICc needs n − k − 1 ≥ 1; an order needs that many distinct gain states.
            if k + 2 > n || order > options.max_order || order >= gains.len() {
                continue;
            }
            let design: Vec<Vec<f64>> = obs
                .iter()
                .map(|o| {
                    basis(
                        order,
                        (f64::from(o.gain_index) - gain_center) / gain_half_range,
                        ref_temp_c
                            .filter(|_| temperature)
                            .map(|t0| o.temp_c.unwrap_or(t0) - t0),
                    )
                })
                .collect();
            let fit = match lsq::solve(&design, &y, Some(&w)) {
                Ok(fit) => fit,
                // A temperature column that follows the gain index exactly adds nothing.
                Err(LsqError::RankDeficient { .. }) => continue,
                Err(e) => return Err(e.into()),
            };
            let kf = k as f64;
            let chi2 = fit.weighted_rss;
            let aicc = chi2 + 2.0 * kf + 2.0 * kf * (kf + 1.0) / (n as f64 - kf - 1.0);
            let c = Candidate {
                order,
                temperature,
                chi2,
                aicc,
            };
            candidates.push(c);
            fitted.push((c, fit));
        }
    }
    // The lowest AICc among the candidates that describe the cells (χ² check at MIN_FIT_P);
    // when none does, the lowest AICc all the same, and `fit_p_value` tells. With few cells
    // AICc's penalty can prefer a line that misses a clear curvature over the curve that
    // fits; a model the data reject is no basis for prediction, however parsimonious.
    let adequate = |f: &LsqFit| f.dof == 0 || chi2_sf(f.weighted_rss, f.dof) >= MIN_FIT_P;
    let lowest = |only_adequate: bool| {
        fitted
            .iter()
            .filter(|(_, f)| !only_adequate || adequate(f))
            .min_by(|a, b| a.0.aicc.total_cmp(&b.0.aicc))
            .cloned()
    };
    let Some((chosen, fit)) = lowest(true).or_else(|| lowest(false)) else {
        return Err(ModelError::TooFew { have: n, need: 3 });
    };
    let birge = if fit.dof > 0 {
        fit.weighted_rss / fit.dof as f64
    } else {
        0.0
    };
    let (variance_scale, quantile_dof) = if birge > 1.0 {
        (birge, fit.dof as f64)
    } else {
        (1.0, f64::INFINITY)
    };
    let quantile = t975(quantile_dof).unwrap_or(f64::INFINITY);
    Ok(GainModel {
        chosen,
        candidates,
        ref_temp_c: ref_temp_c.filter(|_| chosen.temperature),
        n,
        fit,
        gain_center,
        gain_half_range,
        variance_scale,
        quantile,
        quantile_dof,
    })
}

/// Temperature coefficient of one gain state, fitted from that state's observations alone.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StateDrift {
    /// DUT receive gain state.
    pub gain_index: u32,
    /// Slope of K against temperature.
    pub drift_ps_per_c: f64,
    /// Its standard error (Birge-scaled as for the model).
    pub se_ps_per_c: f64,
    /// Observations of this state used.
    pub n: usize,
}

/// Per gain state, the straight-line slope of K against temperature (weighted by 1/se²), for
/// every state with at least three observations that carry a temperature and span more than one
/// temperature. States without enough temperature spread are left out.
pub fn drift_per_state(obs: &[Observation]) -> Vec<StateDrift> {
    let mut by_state: BTreeMap<u32, Vec<(f64, f64, f64)>> = BTreeMap::new();
    for o in obs {
        if let Some(t) = o.temp_c {
            if t.is_finite() && o.delay_ps.is_finite() && o.se_ps.is_finite() && o.se_ps > 0.0 {
                by_state
                    .entry(o.gain_index)
                    .or_default()
                    .push((t, o.delay_ps, o.se_ps));
            }
        }
    }
    by_state
        .into_iter()
        .filter(|(_, v)| v.len() >= 3)
        .filter_map(|(gain_index, v)| {
            let t0 = v.iter().map(|s| s.0).sum::<f64>() / v.len() as f64;
            let design: Vec<Vec<f64>> = v.iter().map(|s| vec![1.0, s.0 - t0]).collect();
            let y: Vec<f64> = v.iter().map(|s| s.1).collect();
            let w: Vec<f64> = v.iter().map(|s| s.2.powi(-2)).collect();
            let fit = lsq::solve(&design, &y, Some(&w)).ok()?;
            let birge = (fit.weighted_rss / fit.dof as f64).max(1.0);
            Some(StateDrift {
                gain_index,
                drift_ps_per_c: fit.coefficients[1],
                se_ps_per_c: (birge * fit.covariance_unscaled[1][1]).max(0.0).sqrt(),
                n: v.len(),
            })
        })
        .collect()
}

/// Standard error behind a measured row's 95 % half-width, inverting the fitter's rule: Student
/// t on `n_bursts − 1` degrees of freedom, or `n_used − 1` when every sample came from one burst.
fn row_se_ps(row: &CalRow) -> Result<f64, ModelError> {
    let bad = |reason| ModelError::BadRow {
        center_mhz: row.center_mhz,
        bw_mhz: row.bw_mhz,
        gain_index: row.gain_index,
        reason,
    };
    if !row.delay_ps.is_finite() {
        return Err(bad("delay_ps is not finite"));
    }
    if !(row.ci95_ps.is_finite() && row.ci95_ps >= 0.0) {
        return Err(bad("ci95_ps is not a finite non-negative number"));
    }
    let df = if row.n_bursts >= 2 {
        row.n_bursts - 1
    } else {
        row.n_used.saturating_sub(1)
    };
    let t = t975(df as f64).ok_or_else(|| bad("fewer than two samples behind the interval"))?;
    Ok(row.ci95_ps.max(CI95_FLOOR_PS) / t)
}

/// The table with a modelled row for every gain index in `wanted` that a (center, bandwidth)
/// group did not measure, each group modelled from its own measured rows.
///
/// A group with fewer than [`MIN_STATES_TO_MODEL`] measured states, or whose best model fails
/// the χ² check ([`MIN_FIT_P`]), gets no modelled rows: the error says why, so the caller can
/// tell the user which states stay unmeasured rather than give them a number that only looks
/// like one.
///
/// Measured (and inferred-state) rows pass through unchanged; modelled rows in the input are dropped and, when
/// wanted, modelled afresh. Modelled rows carry `n_used`, `n_rejected` and `n_bursts` of 0 and an
/// `sd_ps` of NaN (no samples stand behind them). Output is sorted by center, bandwidth, gain.
pub fn fill_table(
    rows: &[CalRow],
    wanted: &[u32],
    options: ModelOptions,
) -> Result<Vec<CalRow>, ModelError> {
    let mut groups: BTreeMap<(u32, u32), Vec<&CalRow>> = BTreeMap::new();
    for r in rows.iter().filter(|r| r.source.is_from_exchanges()) {
        groups.entry((r.center_mhz, r.bw_mhz)).or_default().push(r);
    }
    let mut out = Vec::new();
    for ((center_mhz, bw_mhz), measured) in groups {
        let have: BTreeSet<u32> = measured.iter().map(|r| r.gain_index).collect();
        let missing: BTreeSet<u32> = wanted
            .iter()
            .copied()
            .filter(|g| !have.contains(g))
            .collect();
        out.extend(measured.iter().map(|r| (*r).clone()));
        if missing.is_empty() {
            continue;
        }
        let in_group = |e: ModelError| ModelError::Group {
            center_mhz,
            bw_mhz,
            source: Box::new(e),
        };
        let obs = measured
            .iter()
            .map(|r| {
                Ok(Observation {
                    gain_index: r.gain_index,
                    temp_c: None,
                    delay_ps: r.delay_ps,
                    se_ps: row_se_ps(r)?,
                })
            })
            .collect::<Result<Vec<_>, ModelError>>()?;
        if obs.len() < MIN_STATES_TO_MODEL {
            return Err(in_group(ModelError::TooFew {
                have: obs.len(),
                need: MIN_STATES_TO_MODEL,
            }));
        }
        let model = fit_gain_model(&obs, options).map_err(in_group)?;
        if let Some(p) = model.fit_p_value().filter(|p| *p < MIN_FIT_P) {
            return Err(in_group(ModelError::Untrusted {
                order: model.chosen.order,
                chi2: model.fit.weighted_rss,
                dof: model.fit.dof,
                p,
            }));
        }
        out.extend(missing.into_iter().map(|gain_index| {
            let p = model.predict(gain_index, None);
            CalRow {
                center_mhz,
                bw_mhz,
                gain_index,
                delay_ps: p.delay_ps,
                ci95_ps: p.ci95_ps,
                stat_dof: p.dof,
                n_used: 0,
                n_rejected: 0,
                n_bursts: 0,
                sd_ps: f64::NAN,
                source: RowSource::Modelled,
            }
        }));
    }
    out.sort_by_key(|r| (r.center_mhz, r.bw_mhz, r.gain_index));
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;
    use rand_distr::{Distribution, Normal};

    fn obs(gain_index: u32, delay_ps: f64, se_ps: f64) -> Observation {
        Observation {
            gain_index,
            temp_c: None,
            delay_ps,
            se_ps,
        }
    }

    #[test]
    fn recovers_an_exact_quadratic_and_predicts_between_and_beyond() {
        // Computed from the definition: K = 2000 + 40 g + 3 g² at g = 0, 1, 3, 4, 6 with no
        // noise; orders 0 and 1 leave a large χ², order 2 none, and AICc's penalty stops there.
        let k = |g: u32| 2000.0 + 40.0 * f64::from(g) + 3.0 * f64::from(g * g);
        let data: Vec<Observation> = [0, 1, 3, 4, 6].iter().map(|&g| obs(g, k(g), 1.0)).collect();
        let m = fit_gain_model(&data, ModelOptions::default()).expect("fits");
        assert_eq!((m.chosen.order, m.chosen.temperature), (2, false));
        for g in [2, 5, 7] {
            let p = m.predict(g, None);
            assert!((p.delay_ps - k(g)).abs() < 1e-8, "g {g}: {p:?}");
            assert!(p.se_ps > 0.0 && p.ci95_ps > p.se_ps);
        }
        assert!(
            m.predict(7, None).se_ps > m.predict(2, None).se_ps,
            "extrapolation is less sure"
        );
        assert_eq!(m.drift_ps_per_c(), None);
    }

    #[test]
    fn a_constant_model_has_the_weighted_mean_and_its_error() {
        // From the definition: equal values fit order 0; the weighted mean's variance is 1/Σw,
        // here 1/(1/4 + 1/4 + 1) = 2/3, and χ² = 0 leaves the cells' own errors (normal quantile).
        let data = [obs(0, 500.0, 2.0), obs(1, 500.0, 2.0), obs(2, 500.0, 1.0)];
        let m = fit_gain_model(&data, ModelOptions::default()).expect("fits");
        assert_eq!(m.chosen.order, 0);
        let p = m.predict(1, None);
        assert!((p.delay_ps - 500.0).abs() < 1e-12);
        assert!((p.se_ps - (2.0_f64 / 3.0).sqrt()).abs() < 1e-12);
        assert!(
            (p.ci95_ps / p.se_ps - 1.959964).abs() < 1e-5,
            "normal quantile"
        );
    }

    #[test]
    fn recovers_a_temperature_coefficient() {
        // Computed from the definition: K = 1800 + 120 g − 2.5 (T − 30) at three temperatures,
        // no noise; the model and each state's own line both give −2.5 ps/°C.
        let mut data = Vec::new();
        for g in 0..4u32 {
            for t in [20.0, 30.0, 45.0] {
                data.push(Observation {
                    gain_index: g,
                    temp_c: Some(t),
                    delay_ps: 1800.0 + 120.0 * f64::from(g) - 2.5 * (t - 30.0),
                    se_ps: 1.0,
                });
            }
        }
        let m = fit_gain_model(&data, ModelOptions::default()).expect("fits");
        assert_eq!((m.chosen.order, m.chosen.temperature), (1, true));
        let (d, _) = m.drift_ps_per_c().expect("temperature term");
        assert!((d + 2.5).abs() < 1e-9, "{d}");
        let p = m.predict(5, Some(30.0));
        assert!((p.delay_ps - 2400.0).abs() < 1e-8, "{p:?}");
        let per = drift_per_state(&data);
        assert_eq!(per.len(), 4);
        for s in per {
            assert!((s.drift_ps_per_c + 2.5).abs() < 1e-9, "{s:?}");
            assert_eq!(s.n, 3);
        }
    }

    #[test]
    fn refuses_too_few_or_bad_observations() {
        let two = [obs(0, 1.0, 1.0), obs(1, 2.0, 1.0)];
        assert_eq!(
            fit_gain_model(&two, ModelOptions::default()),
            Err(ModelError::TooFew { have: 2, need: 3 })
        );
        let bad = [obs(0, 1.0, 1.0), obs(1, f64::NAN, 1.0), obs(2, 2.0, 1.0)];
        assert!(matches!(
            fit_gain_model(&bad, ModelOptions::default()),
            Err(ModelError::BadObservation { index: 1, .. })
        ));
        let zero_se = [obs(0, 1.0, 1.0), obs(1, 1.0, 0.0), obs(2, 2.0, 1.0)];
        assert!(matches!(
            fit_gain_model(&zero_se, ModelOptions::default()),
            Err(ModelError::BadObservation { index: 1, .. })
        ));
    }

    #[test]
    fn modelled_intervals_cover_the_truth_about_95_percent_of_the_time() {
        // Simulation: true K linear in gain (900 + 250 g ps, like the demo bench's RX ladder),
        // states 0,1,2,4,5 measured with se 3 ps; the interval of the modelled state 3 should
        // cover the truth in about 95 % of 1000 seeds (binomial sd ≈ 0.7 %).
        let truth = |g: u32| 900.0 + 250.0 * f64::from(g);
        let noise = Normal::new(0.0, 3.0).expect("normal");
        let mut covered = 0;
        let trials = 1000;
        for seed in 0..trials {
            let mut rng = ChaCha8Rng::seed_from_u64(seed);
            let data: Vec<Observation> = [0, 1, 2, 4, 5]
                .iter()
                .map(|&g| obs(g, truth(g) + noise.sample(&mut rng), 3.0))
                .collect();
            let m = fit_gain_model(&data, ModelOptions::default()).expect("fits");
            let p = m.predict(3, None);
            if (p.delay_ps - truth(3)).abs() <= p.ci95_ps {
                covered += 1;
            }
        }
        let rate = f64::from(covered) / trials as f64;
        assert!((0.92..=0.98).contains(&rate), "coverage {rate}");
    }

    fn row(gain_index: u32, delay_ps: f64, ci95_ps: f64) -> CalRow {
        CalRow {
            center_mhz: 5180,
            bw_mhz: 80,
            gain_index,
            delay_ps,
            ci95_ps,
            stat_dof: 3.0,
            n_used: 40,
            n_rejected: 1,
            n_bursts: 4,
            sd_ps: 10.0,
            source: RowSource::Measured,
        }
    }

    #[test]
    fn fill_table_adds_flagged_rows_and_keeps_measured_ones() {
        // A straight line 1000 + 100 g measured at 0, 1, 2, 4 (interval from 3 ps se on 3 df).
        let ci = 3.0 * t975(3.0).expect("t");
        let rows: Vec<CalRow> = [0, 1, 2, 4]
            .iter()
            .map(|&g| row(g, 1000.0 + 100.0 * f64::from(g), ci))
            .collect();
        let filled =
            fill_table(&rows, &[0, 1, 2, 3, 4, 5], ModelOptions::default()).expect("fills");
        let gains: Vec<u32> = filled.iter().map(|r| r.gain_index).collect();
        assert_eq!(gains, [0, 1, 2, 3, 4, 5]);
        for r in &filled {
            let measured = [0, 1, 2, 4].contains(&r.gain_index);
            assert_eq!(r.source == RowSource::Measured, measured, "{r:?}");
            if !measured {
                assert!((r.delay_ps - (1000.0 + 100.0 * f64::from(r.gain_index))).abs() < 1e-6);
                assert!(r.ci95_ps > 0.0 && r.ci95_ps.is_finite());
                assert_eq!((r.n_used, r.n_bursts), (0, 0));
            }
        }
        assert_eq!(filled[0], rows[0]);
        let nothing_missing =
            fill_table(&rows[..2], &[0, 1], ModelOptions::default()).expect("no model needed");
        assert_eq!(nothing_missing, rows[..2]);
        // Three measured states allow only a constant: no modelled row, and the reason.
        let too_few = fill_table(&rows[..3], &[0, 1, 2, 3], ModelOptions::default());
        assert!(
            matches!(
                too_few,
                Err(ModelError::Group {
                    center_mhz: 5180,
                    ..
                })
            ),
            "{too_few:?}"
        );
        let Err(ModelError::Group { source, .. }) = too_few else {
            unreachable!("matched above")
        };
        assert_eq!(*source, ModelError::TooFew { have: 3, need: 4 });
    }

    #[test]
    fn a_model_that_does_not_fit_its_states_gives_no_rows() {
        // Computed from the definition: K alternating 1000, 1100 over five states with 3 ps
        // errors; no polynomial up to order 2 follows it (χ² in the thousands on 2–4 degrees of
        // freedom), so the modelled state 5 is refused and the reason names the χ².
        let ci = 3.0 * t975(3.0).expect("t");
        let rows: Vec<CalRow> = (0..5)
            .map(|g| row(g, 1000.0 + 100.0 * f64::from(g % 2), ci))
            .collect();
        let refused = fill_table(&rows, &[0, 1, 2, 3, 4, 5], ModelOptions::default());
        let Err(ModelError::Group { source, .. }) = &refused else {
            panic!("{refused:?}")
        };
        assert!(
            matches!(**source, ModelError::Untrusted { p, .. } if p < MIN_FIT_P),
            "{source:?}"
        );
        assert!(source.to_string().contains("cannot be trusted"), "{source}");
        // The same states on a straight line pass the check and are modelled.
        let line: Vec<CalRow> = (0..5)
            .map(|g| row(g, 1000.0 + 100.0 * f64::from(g), ci))
            .collect();
        let filled = fill_table(&line, &[0, 1, 2, 3, 4, 5], ModelOptions::default());
        assert_eq!(filled.map(|r| r.len()), Ok(6));
    }
}
