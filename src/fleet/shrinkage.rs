//! The Ledoit–Wolf shrinkage estimate of a covariance matrix: the sample covariance pulled
//! towards a scaled identity by the amount that minimises the expected squared error. A fleet
//! may hold few units for its many cells, and then the sample covariance is noisy and may be
//! singular; the shrunk one is always positive definite.
//!
//! Ledoit, O. & Wolf, M. (2004), "A well-conditioned estimator for large-dimensional covariance
//! matrices", Journal of Multivariate Analysis 88(2), 365–411, lemma 3.2 and theorem 3.2 (the
//! estimator as scikit-learn's `sklearn.covariance.ledoit_wolf` computes it: centred data, the
//! sample covariance over n, the target μ·I with μ the mean variance).

/// A shrunk covariance.
#[derive(Debug, Clone, PartialEq)]
pub struct Shrunk {
    /// The covariance, row-major p × p.
    pub cov: Vec<Vec<f64>>,
    /// How far towards the target it was pulled, 0..=1.
    pub shrinkage: f64,
    /// The column means the data were centred by.
    pub mean: Vec<f64>,
}

/// The Ledoit–Wolf estimate from `rows` (one observation each, all the same length ≥ 1).
/// `None` with fewer than two rows or rows of unequal length.
pub fn ledoit_wolf(rows: &[Vec<f64>]) -> Option<Shrunk> {
    let n = rows.len();
    let p = rows.first()?.len();
    if n < 2 || p == 0 || rows.iter().any(|r| r.len() != p) {
        return None;
    }
    let nf = n as f64;
    let mean: Vec<f64> = (0..p)
        .map(|j| rows.iter().map(|r| r[j]).sum::<f64>() / nf)
        .collect();
    let x: Vec<Vec<f64>> = rows
        .iter()
        .map(|r| r.iter().zip(&mean).map(|(v, m)| v - m).collect())
        .collect();
    let mut s = vec![vec![0.0; p]; p];
    for r in &x {
        for i in 0..p {
            for j in 0..p {
                s[i][j] += r[i] * r[j] / nf;
            }
        }
    }
    let pf = p as f64;
    // Norms are Ledoit and Wolf's: ‖A‖² = tr(AAᵀ)/p.
    let mu = (0..p).map(|i| s[i][i]).sum::<f64>() / pf;
    let d2 = (0..p)
        .flat_map(|i| (0..p).map(move |j| (i, j)))
        .map(|(i, j)| (s[i][j] - if i == j { mu } else { 0.0 }).powi(2))
        .sum::<f64>()
        / pf;
    let b2_bar = x
        .iter()
        .map(|r| {
            (0..p)
                .flat_map(|i| (0..p).map(move |j| (i, j)))
                .map(|(i, j)| (r[i] * r[j] - s[i][j]).powi(2))
                .sum::<f64>()
                / pf
        })
        .sum::<f64>()
        / (nf * nf);
    let b2 = b2_bar.min(d2);
    let shrinkage = if b2 == 0.0 { 0.0 } else { b2 / d2 };
    let cov = (0..p)
        .map(|i| {
            (0..p)
                .map(|j| (1.0 - shrinkage) * s[i][j] + if i == j { shrinkage * mu } else { 0.0 })
                .collect()
        })
        .collect();
    Some(Shrunk {
        cov,
        shrinkage,
        mean,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn matches_scikit_learn_on_a_worked_example() {
        // Reference: scikit-learn's `ledoit_wolf_shrinkage` / `ledoit_wolf` (assume_centered =
        // False), its published source followed step by step in plain Python (β = Σ‖x‖⁴ form)
        // and run on these five observations of three variables: shrinkage 0.568422411289542,
        // μ 1.74667.
        let rows = vec![
            vec![1.0, 2.0, 0.5],
            vec![2.0, 1.0, 1.5],
            vec![4.0, 3.5, 2.0],
            vec![3.0, 5.0, 4.0],
            vec![0.5, 1.5, 3.0],
        ];
        let s = ledoit_wolf(&rows).unwrap();
        assert!((s.shrinkage - 0.568_422_411_289_542).abs() < 1e-12, "{s:?}");
        let want = [
            [
                1.700_631_723_870_884_6,
                0.556_735_089_436_490_7,
                0.163_999_483_709_974,
            ],
            [
                0.556_735_089_436_490_7,
                1.916_420_518_226_113_6,
                0.466_103_795_807_294_6,
            ],
            [
                0.163_999_483_709_974,
                0.466_103_795_807_294_6,
                1.622_947_757_903_002,
            ],
        ];
        for (got, want) in s.cov.iter().zip(&want) {
            for (g, w) in got.iter().zip(want) {
                assert!((g - w).abs() < 1e-12, "{g} against {w}: {s:?}");
            }
        }
        assert!((s.mean[0] - 2.1).abs() < 1e-12);
    }

    #[test]
    fn many_observations_of_few_variables_are_barely_shrunk() {
        // With n ≫ p the sample covariance is already good: Ledoit and Wolf's optimal
        // intensity falls like 1/n.
        let rows: Vec<Vec<f64>> = (0..2000)
            .map(|k| {
                let a = ((k * 7919) % 101) as f64 - 50.0;
                let b = ((k * 104_729) % 89) as f64 - 44.0;
                vec![a, a + 0.5 * b]
            })
            .collect();
        let s = ledoit_wolf(&rows).unwrap();
        assert!(s.shrinkage < 0.01, "{s:?}");
        assert!(ledoit_wolf(&rows[..1]).is_none());
    }
}
