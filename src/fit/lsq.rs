//! Weighted linear least squares by Householder QR.
//!
//! Every model taucal fits across cells (delay against gain state and temperature, unit delays
//! from pairwise sums) is linear in its parameters, so one solver serves them all. It never forms
//! the normal equations `XᵀWX`: squaring the design squares its condition number, and a
//! polynomial in a raw predictor (NIST StRD Pontius, x up to 3·10⁶) then loses most of its
//! digits. Householder QR on the column-equilibrated design keeps them, and the equilibration
//! makes the rank test relative to each column's own size.
//!
//! Pure: no I/O; every bad input (shape, non-finite values, non-positive weights, rank
//! deficiency) is a typed [`LsqError`], never a panic or a NaN result.

use thiserror::Error;

/// Why a least-squares problem has no unique solution, or was malformed.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum LsqError {
    /// No parameters or no observations.
    #[error("least squares needs at least one parameter and one observation")]
    Empty,
    /// A design row has a different length from the first one, or `y`/weights differ in length.
    #[error("design row {row} has {found} values, expected {expected}")]
    Shape {
        /// 0-based observation index.
        row: usize,
        /// Values found.
        found: usize,
        /// Values expected.
        expected: usize,
    },
    /// Fewer observations than parameters.
    #[error("{rows} observations cannot determine {params} parameters")]
    TooFewRows {
        /// Observations given.
        rows: usize,
        /// Parameters to fit.
        params: usize,
    },
    /// A predictor, response or weight is NaN or infinite.
    #[error("observation {row}: a value is not finite")]
    NotFinite {
        /// 0-based observation index.
        row: usize,
    },
    /// A weight is zero or negative.
    #[error("observation {row}: weight {weight} is not positive")]
    BadWeight {
        /// 0-based observation index.
        row: usize,
        /// The weight given.
        weight: f64,
    },
    /// The columns are linearly dependent (to working precision): parameter `column` cannot be
    /// told apart from the ones before it.
    #[error("parameter {column} is not determined by the data (the design is rank deficient)")]
    RankDeficient {
        /// 0-based parameter index.
        column: usize,
    },
}

/// A solved weighted least-squares problem `y ≈ Xβ`, minimising `Σ wᵢ (yᵢ − xᵢᵀβ)²`.
#[derive(Debug, Clone, PartialEq)]
pub struct LsqFit {
    /// Estimated parameters β, in the order of the design's columns.
    pub coefficients: Vec<f64>,
    /// `(XᵀWX)⁻¹`, row-major `p × p`: the covariance of β when the weights are exact inverse
    /// variances. Multiply by the residual variance when they are only relative.
    pub covariance_unscaled: Vec<Vec<f64>>,
    /// Residual degrees of freedom, `n − p`.
    pub dof: usize,
    /// `Σ wᵢ rᵢ²`: the weighted residual sum of squares (χ² when the weights are inverse
    /// variances).
    pub weighted_rss: f64,
    /// `√(weighted_rss / dof)`; `None` when `dof` is 0.
    pub residual_sd: Option<f64>,
    /// `1 − RSS_w / TSS_w` about the weighted mean of `y`; meaningful for designs with a
    /// constant column. `None` when every `y` is the same.
    pub r_squared: Option<f64>,
}

impl LsqFit {
    /// Standard errors of the coefficients from the residual variance (`residual_sd² ·
    /// (XᵀWX)⁻¹`), as NIST StRD certifies them. `None` when `dof` is 0.
    pub fn std_errors(&self) -> Option<Vec<f64>> {
        let s = self.residual_sd?;
        Some(
            self.covariance_unscaled
                .iter()
                .enumerate()
                .map(|(j, row)| s * row[j].max(0.0).sqrt())
                .collect(),
        )
    }

    /// `xᵀβ`, the fitted value at predictor row `x` (missing trailing values count as 0).
    pub fn predict(&self, x: &[f64]) -> f64 {
        self.coefficients.iter().zip(x).map(|(b, v)| b * v).sum()
    }

    /// `xᵀ(XᵀWX)⁻¹x`: the variance of [`LsqFit::predict`] at `x` in units of the weights'
    /// variance scale.
    pub fn variance_unscaled(&self, x: &[f64]) -> f64 {
        let v: f64 = self
            .covariance_unscaled
            .iter()
            .zip(x)
            .map(|(row, xi)| xi * row.iter().zip(x).map(|(c, xj)| c * xj).sum::<f64>())
            .sum();
        v.max(0.0)
    }
}

/// Solves the weighted least-squares problem with design rows `design` (each of the same length
/// p), responses `y` and optional positive weights (all 1 when `None`).
pub fn solve(design: &[Vec<f64>], y: &[f64], weights: Option<&[f64]>) -> Result<LsqFit, LsqError> {
    let n = design.len();
    let p = design.first().map_or(0, Vec::len);
    if n == 0 || p == 0 {
        return Err(LsqError::Empty);
    }
    check_inputs(design, y, weights, p)?;
    if n < p {
        return Err(LsqError::TooFewRows { rows: n, params: p });
    }
    let weight = |i: usize| weights.map_or(1.0, |w| w[i]);

    // Column-major copy of √W·X, then each column scaled to unit length.
    let mut a: Vec<Vec<f64>> = (0..p)
        .map(|j| (0..n).map(|i| weight(i).sqrt() * design[i][j]).collect())
        .collect();
    let mut b: Vec<f64> = (0..n).map(|i| weight(i).sqrt() * y[i]).collect();
    let mut scale = vec![0.0; p];
    for (j, col) in a.iter_mut().enumerate() {
        let norm = euclidean_norm(col);
        if norm == 0.0 || !norm.is_finite() {
            return Err(LsqError::RankDeficient { column: j });
        }
        col.iter_mut().for_each(|v| *v /= norm);
        scale[j] = norm;
    }

    householder_qr(&mut a, &mut b);

    // With unit columns |R_jj| ≤ 1; a diagonal this small relative to the largest means the
    // column lies (to rounding) in the span of the earlier ones.
    let r_max = (0..p).map(|j| a[j][j].abs()).fold(0.0, f64::max);
    let tol = r_max * f64::EPSILON * n.max(p) as f64;
    if let Some(column) = (0..p).find(|&j| a[j][j].is_nan() || a[j][j].abs() <= tol) {
        return Err(LsqError::RankDeficient { column });
    }

    // Back substitution R z = Qᵀb; β = S⁻¹ z.
    let mut z = vec![0.0; p];
    for j in (0..p).rev() {
        let tail: f64 = (j + 1..p).map(|k| a[k][j] * z[k]).sum();
        z[j] = (b[j] - tail) / a[j][j];
    }
    let coefficients: Vec<f64> = z.iter().zip(&scale).map(|(zj, s)| zj / s).collect();

    // (XᵀWX)⁻¹ = S⁻¹ R⁻¹ R⁻ᵀ S⁻¹.
    let r_inv = upper_triangular_inverse(&a, p);
    let covariance_unscaled: Vec<Vec<f64>> = (0..p)
        .map(|i| {
            (0..p)
                .map(|j| {
                    let dot: f64 = (i.max(j)..p).map(|k| r_inv[i][k] * r_inv[j][k]).sum();
                    dot / (scale[i] * scale[j])
                })
                .collect()
        })
        .collect();

    // Residuals from the original data: more accurate than the tail of Qᵀb for small residuals.
    let residual = |i: usize| {
        y[i] - design[i]
            .iter()
            .zip(&coefficients)
            .map(|(x, c)| x * c)
            .sum::<f64>()
    };
    let weighted_rss: f64 = (0..n).map(|i| weight(i) * residual(i).powi(2)).sum();
    let dof = n - p;
    let residual_sd = (dof > 0).then(|| (weighted_rss / dof as f64).sqrt());
    let w_sum: f64 = (0..n).map(weight).sum();
    let y_mean = (0..n).map(|i| weight(i) * y[i]).sum::<f64>() / w_sum;
    let tss: f64 = (0..n).map(|i| weight(i) * (y[i] - y_mean).powi(2)).sum();
    let r_squared = (tss > 0.0).then(|| 1.0 - weighted_rss / tss);

    Ok(LsqFit {
        coefficients,
        covariance_unscaled,
        dof,
        weighted_rss,
        residual_sd,
        r_squared,
    })
}

fn check_inputs(
    design: &[Vec<f64>],
    y: &[f64],
    weights: Option<&[f64]>,
    p: usize,
) -> Result<(), LsqError> {
    let n = design.len();
    for (other, len) in [(y.len(), n), (weights.map_or(n, <[f64]>::len), n)] {
        if other != len {
            return Err(LsqError::Shape {
                row: other.min(len),
                found: other,
                expected: len,
            });
        }
    }
    for (row, x) in design.iter().enumerate() {
        if x.len() != p {
            return Err(LsqError::Shape {
                row,
                found: x.len(),
                expected: p,
            });
        }
        if !(x.iter().all(|v| v.is_finite()) && y[row].is_finite()) {
            return Err(LsqError::NotFinite { row });
        }
        if let Some(w) = weights {
            let weight = w[row];
            if !weight.is_finite() {
                return Err(LsqError::NotFinite { row });
            }
            if weight <= 0.0 {
                return Err(LsqError::BadWeight { row, weight });
            }
        }
    }
    Ok(())
}

/// Euclidean norm, scaled by the largest magnitude so squares neither overflow nor underflow.
fn euclidean_norm(v: &[f64]) -> f64 {
    let big = v.iter().fold(0.0_f64, |m, x| m.max(x.abs()));
    if big == 0.0 || !big.is_finite() {
        return big;
    }
    big * v.iter().map(|x| (x / big).powi(2)).sum::<f64>().sqrt()
}

/// In-place Householder QR of the column-major `n × p` matrix `a` (R left in its upper triangle),
/// applying the same reflections to `b` so that `b[..p]` becomes `(Qᵀb)[..p]`.
fn householder_qr(a: &mut [Vec<f64>], b: &mut [f64]) {
    let p = a.len();
    for k in 0..p {
        let norm = euclidean_norm(&a[k][k..]);
        if norm == 0.0 {
            continue;
        }
        // Reflect onto −sign(a_kk)·‖x‖ so v_k = a_kk + sign·‖x‖ never cancels.
        let alpha = if a[k][k] >= 0.0 { -norm } else { norm };
        let mut v: Vec<f64> = a[k][k..].to_vec();
        v[0] -= alpha;
        let v_sq: f64 = v.iter().map(|x| x * x).sum();
        if v_sq == 0.0 {
            continue;
        }
        for col in a.iter_mut().skip(k) {
            reflect(&v, v_sq, &mut col[k..]);
        }
        reflect(&v, v_sq, &mut b[k..]);
        a[k][k] = alpha;
        a[k][k + 1..].iter_mut().for_each(|x| *x = 0.0);
    }
}

/// `x ← (I − 2vvᵀ/vᵀv) x`.
fn reflect(v: &[f64], v_sq: f64, x: &mut [f64]) {
    let f = 2.0 * v.iter().zip(x.iter()).map(|(a, b)| a * b).sum::<f64>() / v_sq;
    x.iter_mut().zip(v).for_each(|(xi, vi)| *xi -= f * vi);
}

/// Inverse of the upper-triangular `R` held in the column-major `a` (`a[j][i]` = R_ij), row-major.
fn upper_triangular_inverse(a: &[Vec<f64>], p: usize) -> Vec<Vec<f64>> {
    let mut inv = vec![vec![0.0; p]; p];
    for j in 0..p {
        inv[j][j] = 1.0 / a[j][j];
        for i in (0..j).rev() {
            let s: f64 = (i + 1..=j).map(|k| a[k][i] * inv[k][j]).sum();
            inv[i][j] = -s / a[i][i];
        }
    }
    inv
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Rows of a NIST StRD regression file (verbatim copy in tests/data/nist): data from line 61,
    /// `y` in the first column, predictors after it.
    fn nist_rows(name: &str) -> Vec<Vec<f64>> {
        let path = format!("{}/tests/data/nist/{name}", env!("CARGO_MANIFEST_DIR"));
        let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{path}: {e}"));
        text.lines()
            .skip(60)
            .filter(|l| !l.trim().is_empty())
            .map(|l| {
                l.split_whitespace()
                    .map(|v| v.parse().unwrap_or_else(|e| panic!("{path}: {l}: {e}")))
                    .collect()
            })
            .collect()
    }

    fn close(found: f64, certified: f64, rel: f64) -> bool {
        ((found - certified) / certified).abs() <= rel
    }

    fn check(fit: &LsqFit, beta: &[f64], sd: &[f64], residual_sd: f64, r2: f64, rel: f64) {
        let se = fit.std_errors().unwrap_or_default();
        for (j, (b, s)) in beta.iter().zip(sd).enumerate() {
            assert!(
                close(fit.coefficients[j], *b, rel),
                "B{j} {} vs {b}",
                fit.coefficients[j]
            );
            assert!(close(se[j], *s, rel), "sd(B{j}) {} vs {s}", se[j]);
        }
        let rsd = fit.residual_sd.unwrap_or(f64::NAN);
        assert!(close(rsd, residual_sd, rel), "residual SD {rsd}");
        let fr2 = fit.r_squared.unwrap_or(f64::NAN);
        assert!(close(fr2, r2, rel), "R² {fr2}");
    }

    fn polynomial(rows: &[Vec<f64>], degree: i32) -> (Vec<Vec<f64>>, Vec<f64>) {
        let x = rows
            .iter()
            .map(|r| (0..=degree).map(|k| r[1].powi(k)).collect())
            .collect();
        (x, rows.iter().map(|r| r[0]).collect())
    }

    #[test]
    fn nist_norris() {
        // NIST StRD Norris (lower difficulty, linear): certified values from the file's header;
        // tolerance 1e-9 relative as suggested in checkdata SOURCES.md §1 (not NIST's).
        let rows = nist_rows("nist-strd-norris.dat");
        assert_eq!(rows.len(), 36);
        let (x, y) = polynomial(&rows, 1);
        let fit = solve(&x, &y, None).expect("Norris solves");
        check(
            &fit,
            &[-0.262323073774029, 1.00211681802045],
            &[0.232818234301152, 0.429796848199937E-03],
            0.884796396144373,
            0.999993745883712,
            1e-9,
        );
    }

    #[test]
    fn nist_pontius() {
        // NIST StRD Pontius (quadratic in x up to 3e6: the conditioning test); certified values
        // from the file's header; tolerance 1e-9 relative (SOURCES.md §1 suggestion).
        let rows = nist_rows("nist-strd-pontius.dat");
        assert_eq!(rows.len(), 40);
        let (x, y) = polynomial(&rows, 2);
        let fit = solve(&x, &y, None).expect("Pontius solves");
        check(
            &fit,
            &[
                0.673565789473684E-03,
                0.732059160401003E-06,
                -0.316081871345029E-14,
            ],
            &[
                0.107938612033077E-03,
                0.157817399981659E-09,
                0.486652849992036E-16,
            ],
            0.205177424076185E-03,
            0.999999900178537,
            1e-9,
        );
    }

    #[test]
    fn nist_longley() {
        // NIST StRD Longley (higher difficulty, 6 collinear predictors); certified values from
        // the file's header; tolerance 1e-7 relative (SOURCES.md §1 suggestion).
        let rows = nist_rows("nist-strd-longley.dat");
        assert_eq!(rows.len(), 16);
        let x: Vec<Vec<f64>> = rows
            .iter()
            .map(|r| std::iter::once(1.0).chain(r[1..].iter().copied()).collect())
            .collect();
        let y: Vec<f64> = rows.iter().map(|r| r[0]).collect();
        let fit = solve(&x, &y, None).expect("Longley solves");
        check(
            &fit,
            &[
                -3482258.63459582,
                15.0618722713733,
                -0.358191792925910E-01,
                -2.02022980381683,
                -1.03322686717359,
                -0.511041056535807E-01,
                1829.15146461355,
            ],
            &[
                890420.383607373,
                84.9149257747669,
                0.334910077722432E-01,
                0.488399681651699,
                0.214274163161675,
                0.226073200069370,
                455.478499142212,
            ],
            304.854073561965,
            0.995479004577296,
            1e-7,
        );
    }

    #[test]
    fn integer_weights_equal_repeated_rows() {
        // From the definition: weight 2 on a row is the same sum of squares as the row twice.
        let x = vec![
            vec![1.0, 0.0],
            vec![1.0, 1.0],
            vec![1.0, 2.0],
            vec![1.0, 3.0],
        ];
        let y = [1.0, 2.9, 5.2, 6.8];
        let weighted = solve(&x, &y, Some(&[1.0, 2.0, 1.0, 2.0])).expect("solves");
        let mut xr = x.clone();
        xr.extend([x[1].clone(), x[3].clone()]);
        let yr = [1.0, 2.9, 5.2, 6.8, 2.9, 6.8];
        let repeated = solve(&xr, &yr, None).expect("solves");
        for (a, b) in weighted.coefficients.iter().zip(&repeated.coefficients) {
            assert!((a - b).abs() < 1e-12, "{a} vs {b}");
        }
        assert!((weighted.weighted_rss - repeated.weighted_rss).abs() < 1e-12);
        for (ra, rb) in weighted
            .covariance_unscaled
            .iter()
            .zip(&repeated.covariance_unscaled)
        {
            for (a, b) in ra.iter().zip(rb) {
                assert!((a - b).abs() < 1e-12, "{a} vs {b}");
            }
        }
    }

    #[test]
    fn prediction_variance_of_a_mean_is_one_over_the_weight_sum() {
        // From the definition: fitting a constant gives the weighted mean, variance 1/Σw.
        let x = vec![vec![1.0]; 3];
        let fit = solve(&x, &[10.0, 12.0, 14.0], Some(&[1.0, 2.0, 1.0])).expect("solves");
        assert!((fit.coefficients[0] - 12.0).abs() < 1e-12);
        assert!((fit.variance_unscaled(&[1.0]) - 0.25).abs() < 1e-15);
        assert!((fit.predict(&[1.0]) - 12.0).abs() < 1e-12);
    }

    #[test]
    fn refuses_bad_problems_without_panicking() {
        let x = vec![vec![1.0, 2.0], vec![1.0, 2.0], vec![1.0, 2.0]];
        assert_eq!(
            solve(&x, &[1.0, 2.0, 3.0], None),
            Err(LsqError::RankDeficient { column: 1 })
        );
        let x = vec![vec![1.0, 0.0], vec![1.0, 1.0]];
        assert!(matches!(
            solve(&x, &[1.0, f64::NAN], None),
            Err(LsqError::NotFinite { row: 1 })
        ));
        assert!(matches!(
            solve(&x, &[1.0, 2.0], Some(&[1.0, 0.0])),
            Err(LsqError::BadWeight { row: 1, .. })
        ));
        assert!(matches!(
            solve(&x, &[1.0, 2.0], Some(&[1.0, f64::NAN])),
            Err(LsqError::NotFinite { row: 1 })
        ));
        assert!(matches!(
            solve(&x[..1], &[1.0], None),
            Err(LsqError::TooFewRows { rows: 1, params: 2 })
        ));
        assert!(matches!(
            solve(&[vec![1.0], vec![1.0, 2.0]], &[1.0, 2.0], None),
            Err(LsqError::Shape { row: 1, .. })
        ));
        assert!(matches!(
            solve(&x, &[1.0], None),
            Err(LsqError::Shape { .. })
        ));
        assert_eq!(solve(&[], &[], None), Err(LsqError::Empty));
        let exact = solve(&x, &[1.0, 3.0], None).expect("square system solves");
        assert_eq!(exact.dof, 0);
        assert_eq!(exact.residual_sd, None);
        assert_eq!(exact.std_errors(), None);
    }
}
