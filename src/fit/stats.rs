//! The statistics a calibration cell needs: robust location and spread for outlier rejection,
//! an accurate mean and standard deviation of what is kept, a Student-t quantile, and a standard
//! error that stays honest when samples within a burst share an error.
//!
//! Delays sit on large offsets (thousands of ps) with small spreads, which is where one-pass
//! variance formulas lose every digit; everything here centres first.

use statrs::distribution::{ContinuousCDF, Normal, StudentsT};
use std::collections::BTreeMap;

/// Factor that turns the median absolute deviation into a standard-deviation estimate for
/// normally distributed data (1 / Φ⁻¹(3/4); common practice).
pub const MAD_TO_SD: f64 = 1.4826;

/// Median of `values`, reordering them in place (O(n) selection). `None` when empty.
///
/// Ordering is [`f64::total_cmp`], so NaN never panics (it sorts to an end).
pub fn median(values: &mut [f64]) -> Option<f64> {
    let n = values.len();
    if n == 0 {
        return None;
    }
    let mid = n / 2;
    let (below, upper, _) = values.select_nth_unstable_by(mid, f64::total_cmp);
    let upper = *upper;
    if n % 2 == 1 {
        return Some(upper);
    }
    // Even count: the lower middle is the largest of the lower half.
    let lower = below.iter().copied().max_by(f64::total_cmp)?;
    Some(lower + (upper - lower) / 2.0)
}

/// Median absolute deviation from `center`, scaled by [`MAD_TO_SD`]. `None` when empty.
/// Overwrites `values` with the absolute deviations: the fitter passes a scratch copy, and
/// a cell of millions of delays then needs no second buffer.
pub fn mad_scaled(values: &mut [f64], center: f64) -> Option<f64> {
    for v in values.iter_mut() {
        *v = (*v - center).abs();
    }
    median(values).map(|m| MAD_TO_SD * m)
}

/// Arithmetic mean, refined by a second pass over the residuals so that values sharing a large
/// offset keep their last digits. `None` when empty.
pub fn mean(values: &[f64]) -> Option<f64> {
    if values.is_empty() {
        return None;
    }
    let n = values.len() as f64;
    let first = values.iter().sum::<f64>() / n;
    let correction = values.iter().map(|v| v - first).sum::<f64>() / n;
    Some(first + correction)
}

/// Sample standard deviation (denominator n − 1), two-pass with the rounding-error correction
/// term. `None` with fewer than two values.
pub fn sample_sd(values: &[f64]) -> Option<f64> {
    if values.len() < 2 {
        return None;
    }
    let m = mean(values)?;
    let n = values.len() as f64;
    let (sum_sq, sum) = values.iter().fold((0.0, 0.0), |(sq, s), v| {
        let d = v - m;
        (sq + d * d, s + d)
    });
    let var = (sum_sq - sum * sum / n) / (n - 1.0);
    Some(var.max(0.0).sqrt())
}

/// Two-sided 95 % Student-t quantile (t at probability 0.975) for `df` degrees of freedom;
/// `f64::INFINITY` gives the normal quantile. `None` unless `df ≥ 1`: a fit never has fewer,
/// and statrs' inversion is unreliable for very small fractional df.
pub fn t975(df: f64) -> Option<f64> {
    if df.is_nan() || df < 1.0 {
        return None;
    }
    let q = if df < LARGE_DF {
        StudentsT::new(0.0, 1.0, df).ok()?.inverse_cdf(0.975)
    } else {
        t_quantile_large_df(Normal::new(0.0, 1.0).ok()?.inverse_cdf(0.975), df)
    };
    q.is_finite().then_some(q)
}

/// Degrees of freedom from which [`t975`] switches from statrs' beta-function inversion to the
/// series: the inversion loses digits near 1e6 and stops converging near 1e8 (statrs 0.19).
const LARGE_DF: f64 = 1000.0;

/// Student-t quantile from the normal quantile `z` by the Cornish–Fisher series in 1/df
/// (Abramowitz & Stegun 26.7.5, from memory; agreement with statrs at df 100 and 1000 is tested).
fn t_quantile_large_df(z: f64, df: f64) -> f64 {
    let z2 = z * z;
    let g1 = z * (z2 + 1.0) / 4.0;
    let g2 = z * ((5.0 * z2 + 16.0) * z2 + 3.0) / 96.0;
    let g3 = z * (((3.0 * z2 + 19.0) * z2 + 17.0) * z2 - 15.0) / 384.0;
    let g4 = z * ((((79.0 * z2 + 776.0) * z2 + 1482.0) * z2 - 1920.0) * z2 - 945.0) / 92160.0;
    let v = 1.0 / df;
    z + v * (g1 + v * (g2 + v * (g3 + v * g4)))
}

/// Standard error of a mean whose samples come in clusters that may share an error.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ClusterSe {
    /// Standard error of the mean.
    pub se: f64,
    /// Number of distinct clusters among the samples; degrees of freedom are `clusters − 1`.
    pub clusters: u64,
}

/// Cluster-robust standard error of `mean` over `samples` given as `(value, cluster id)`.
///
/// Exchanges of one burst share the burst's clock-rate estimate and whatever the channel did
/// during it, so they are not independent; treating them as such understates the error. With G
/// clusters and n samples: `V = G/(G−1) · Σ_b (Σ_{i∈b} (x_i − mean))² / n²`, `se = √V`. `None`
/// with fewer than two clusters (no degrees of freedom).
pub fn cluster_robust_se(samples: &[(f64, u64)], mean: f64) -> Option<ClusterSe> {
    // The fitter hands samples over burst by burst, clusters ascending: then each cluster is
    // one run and its sum is accumulated in place, in the order (and so to the bit) a map keyed
    // by cluster would give, without a map lookup per sample (millions per cell in a long run).
    let residual_by_cluster: Vec<f64> = if samples.windows(2).all(|w| w[0].1 <= w[1].1) {
        let mut sums: Vec<f64> = Vec::new();
        let mut last = None;
        for &(x, cluster) in samples {
            if last != Some(cluster) {
                sums.push(0.0);
                last = Some(cluster);
            }
            if let Some(sum) = sums.last_mut() {
                *sum += x - mean;
            }
        }
        sums
    } else {
        let mut by_cluster: BTreeMap<u64, f64> = BTreeMap::new();
        for &(x, cluster) in samples {
            *by_cluster.entry(cluster).or_insert(0.0) += x - mean;
        }
        by_cluster.into_values().collect()
    };
    let g = residual_by_cluster.len();
    if g < 2 {
        return None;
    }
    let n = samples.len() as f64;
    let g_f = g as f64;
    let sum_sq: f64 = residual_by_cluster.iter().map(|r| r * r).sum();
    let var = g_f / (g_f - 1.0) * sum_sq / (n * n);
    Some(ClusterSe {
        se: var.sqrt(),
        clusters: g as u64,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_mad_scale_is_one_over_the_normal_quartile() {
        // Computed independently: statrs' inverse normal CDF gives Φ⁻¹(3/4) = 0.674490, so
        // 1/Φ⁻¹(3/4) = 1.482602 (NIST/SEMATECH e-Handbook 1.3.5.6 quotes 0.6745 for Φ⁻¹(3/4)).
        let quartile = Normal::standard().inverse_cdf(0.75);
        assert!((quartile - 0.6745).abs() < 5e-5, "{quartile}");
        assert!((MAD_TO_SD - 1.0 / quartile).abs() < 5e-5, "{MAD_TO_SD}");
    }
    use proptest::prelude::*;

    /// Data of a NIST StRD univariate file (verbatim copy in tests/data/nist): data from line 61.
    fn nist_univariate(name: &str) -> Vec<f64> {
        let path = format!("{}/tests/data/nist/{name}", env!("CARGO_MANIFEST_DIR"));
        let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{path}: {e}"));
        text.lines()
            .skip(60)
            .filter(|l| !l.trim().is_empty())
            .map(|l| {
                l.trim()
                    .parse()
                    .unwrap_or_else(|e| panic!("{path}: {l}: {e}"))
            })
            .collect()
    }

    fn check_certified(name: &str, n: usize, cert_mean: f64, cert_sd: f64) {
        let y = nist_univariate(name);
        assert_eq!(y.len(), n, "{name} observations");
        let m = mean(&y).unwrap_or(f64::NAN);
        let s = sample_sd(&y).unwrap_or(f64::NAN);
        // Tolerances are ours (relative 1e-12 on the mean, 1e-8 on the SD), not NIST's.
        assert!(
            ((m - cert_mean) / cert_mean).abs() < 1e-12,
            "{name} mean {m}"
        );
        assert!(((s - cert_sd) / cert_sd).abs() < 1e-8, "{name} sd {s}");
    }

    #[test]
    fn nist_numacc1() {
        // NIST StRD NumAcc1: certified mean 10000002, sd 1, 3 observations.
        check_certified("nist-strd-univ-numacc1.dat", 3, 10_000_002.0, 1.0);
    }

    #[test]
    fn nist_numacc2() {
        // NIST StRD NumAcc2: certified mean 1.2, sd 0.1, 1001 observations.
        check_certified("nist-strd-univ-numacc2.dat", 1001, 1.2, 0.1);
    }

    #[test]
    fn nist_numacc3() {
        // NIST StRD NumAcc3: certified mean 1000000.2, sd 0.1, 1001 observations.
        check_certified("nist-strd-univ-numacc3.dat", 1001, 1_000_000.2, 0.1);
    }

    #[test]
    fn nist_numacc4() {
        // NIST StRD NumAcc4: certified mean 10000000.2, sd 0.1, 1001 observations.
        check_certified("nist-strd-univ-numacc4.dat", 1001, 10_000_000.2, 0.1);
    }

    #[test]
    fn nist_michelso() {
        // NIST StRD Michelso: certified mean 299.852400000000, sd 0.0790105478190518, 100 obs.
        check_certified(
            "nist-strd-univ-michelso.dat",
            100,
            299.852_4,
            0.079_010_547_819_051_8,
        );
    }

    #[test]
    fn one_pass_variance_would_fail_numacc4() {
        // tests/data/SOURCES.md §1: the one-pass Σx² − n·x̄² form fails NumAcc4 (certified sd 0.1); this shows
        // the NIST check above is sharp enough to catch it.
        let y = nist_univariate("nist-strd-univ-numacc4.dat");
        let n = y.len() as f64;
        let sum: f64 = y.iter().sum();
        let sum_sq: f64 = y.iter().map(|v| v * v).sum();
        let naive_sd = ((sum_sq - sum * sum / n) / (n - 1.0)).abs().sqrt();
        assert!(((naive_sd - 0.1) / 0.1).abs() > 1e-8, "{naive_sd}");
    }

    #[test]
    fn t975_matches_e_handbook_table() {
        // NIST/SEMATECH e-Handbook §1.3.6.7.2, critical values of Student's t (3 decimals).
        let table = [
            (1.0, 12.706),
            (2.0, 4.303),
            (3.0, 3.182),
            (4.0, 2.776),
            (5.0, 2.571),
            (6.0, 2.447),
            (10.0, 2.228),
            (20.0, 2.086),
            (30.0, 2.042),
            (60.0, 2.000),
            (100.0, 1.984),
            (f64::INFINITY, 1.960),
        ];
        for (df, t) in table {
            let q = t975(df).unwrap_or(f64::NAN);
            assert!((q - t).abs() <= 0.0005, "df {df}: {q} vs {t}");
        }
    }

    #[test]
    fn t975_exact_closed_forms() {
        // tests/data/SOURCES.md §2 exact forms, p = 0.975: df 1 tan(π(p − ½)); df 2 (2p − 1)·√(2 / (4p(1 − p)));
        // df ∞ the normal quantile 1.959963984540054 (from memory; also checked against df 1e9).
        let p: f64 = 0.975;
        let df1 = (std::f64::consts::PI * (p - 0.5)).tan();
        let df2 = (2.0 * p - 1.0) * (2.0 / (4.0 * p * (1.0 - p))).sqrt();
        let close = |a: f64, b: f64| ((a - b) / b).abs() < 1e-9;
        assert!(close(t975(1.0).unwrap_or(f64::NAN), df1));
        assert!(close(t975(2.0).unwrap_or(f64::NAN), df2));
        let inf = t975(f64::INFINITY).unwrap_or(f64::NAN);
        assert!(close(inf, 1.959_963_984_540_054));
        assert!((t975(1e9).unwrap_or(f64::NAN) - inf).abs() < 1e-6);
    }

    #[test]
    fn large_df_series_agrees_with_statrs() {
        // The series must join the beta-function inversion without a visible step.
        let z = 1.959_963_984_540_054;
        for df in [100.0, 999.0, 1000.0] {
            let exact = StudentsT::new(0.0, 1.0, df)
                .map(|t| t.inverse_cdf(0.975))
                .unwrap_or(f64::NAN);
            let series = t_quantile_large_df(z, df);
            assert!(
                (exact - series).abs() < 1e-7,
                "df {df}: {exact} vs {series}"
            );
        }
        assert!(t975(1e12).is_some_and(|t| (t - z).abs() < 1e-9));
    }

    #[test]
    fn t975_rejects_no_degrees_of_freedom() {
        assert_eq!(t975(0.0), None);
        assert_eq!(t975(0.5), None);
        assert_eq!(t975(-1.0), None);
        assert_eq!(t975(f64::NAN), None);
    }

    #[test]
    fn median_and_mad_small_cases() {
        assert_eq!(median(&mut []), None);
        assert_eq!(median(&mut [3.0]), Some(3.0));
        assert_eq!(median(&mut [4.0, 1.0, 3.0, 2.0]), Some(2.5));
        assert_eq!(median(&mut [5.0, 1.0, 3.0]), Some(3.0));
        // |x − 3| = 2, 0, 2, 97 → median 2 → 2·1.4826.
        let mad = mad_scaled(&mut [1.0, 3.0, 5.0, 100.0], 3.0).unwrap_or(f64::NAN);
        assert!((mad - 2.0 * MAD_TO_SD).abs() < 1e-12);
    }

    #[test]
    fn median_survives_nan() {
        let mut v = [f64::NAN, 1.0, 2.0, 3.0, f64::NAN];
        assert!(median(&mut v).is_some());
    }

    #[test]
    fn cluster_se_needs_two_clusters() {
        assert_eq!(cluster_robust_se(&[(1.0, 7), (2.0, 7)], 1.5), None);
        assert_eq!(cluster_robust_se(&[], 0.0), None);
    }

    proptest! {
        #[test]
        fn median_is_the_sorted_middle(mut v in prop::collection::vec(-1e6f64..1e6, 1..60)) {
            let mut sorted = v.clone();
            sorted.sort_by(f64::total_cmp);
            let n = sorted.len();
            let expect = if n % 2 == 1 {
                sorted[n / 2]
            } else {
                (sorted[n / 2 - 1] + sorted[n / 2]) / 2.0
            };
            let got = median(&mut v);
            prop_assert!(got.is_some_and(|m| (m - expect).abs() <= 1e-9 * expect.abs().max(1.0)));
        }

        #[test]
        fn mean_and_sd_follow_shift_and_scale(
            v in prop::collection::vec(-1e3f64..1e3, 2..60),
            shift in -1e7f64..1e7,
            scale in 0.01f64..100.0,
        ) {
            let m = mean(&v).unwrap_or(f64::NAN);
            let s = sample_sd(&v).unwrap_or(f64::NAN);
            let moved: Vec<f64> = v.iter().map(|x| shift + scale * x).collect();
            let m2 = mean(&moved).unwrap_or(f64::NAN);
            let s2 = sample_sd(&moved).unwrap_or(f64::NAN);
            prop_assert!((m2 - (shift + scale * m)).abs() <= 1e-6 * (1.0 + shift.abs()));
            prop_assert!((s2 - scale * s).abs() <= 1e-6 * (1.0 + scale * s) + 1e-9 * shift.abs());
        }

        #[test]
        fn one_sample_per_cluster_is_the_ordinary_se(v in prop::collection::vec(-1e4f64..1e4, 2..80)) {
            // With G = n the G/(G−1) factor turns Σ(x − x̄)²/n² into s²/n exactly.
            let samples: Vec<(f64, u64)> = v.iter().enumerate().map(|(i, &x)| (x, i as u64)).collect();
            let m = mean(&v).unwrap_or(f64::NAN);
            let s = sample_sd(&v).unwrap_or(f64::NAN);
            let c = cluster_robust_se(&samples, m);
            prop_assert!(c.is_some());
            let c = c.unwrap_or(ClusterSe { se: f64::NAN, clusters: 0 });
            prop_assert_eq!(c.clusters, v.len() as u64);
            let ordinary_var = s * s / v.len() as f64;
            prop_assert!((c.se * c.se - ordinary_var).abs() <= 1e-9 * ordinary_var.max(1e-12));
        }

        #[test]
        fn clusters_in_runs_or_shuffled_give_the_same_clusters(
            v in prop::collection::vec((-1e4f64..1e4, 0u64..12), 2..80),
        ) {
            // Ascending runs take the one-pass path, any other order the map: same cluster count,
            // and the same SE up to the order of additions.
            let mut sorted = v.clone();
            sorted.sort_by_key(|s| s.1);
            let mut unsorted = sorted.clone();
            unsorted.reverse();
            prop_assume!(unsorted.windows(2).any(|w| w[0].1 > w[1].1));
            let m = mean(&v.iter().map(|s| s.0).collect::<Vec<_>>()).unwrap_or(f64::NAN);
            let a = cluster_robust_se(&sorted, m);
            let b = cluster_robust_se(&unsorted, m);
            prop_assert_eq!(a.map(|c| c.clusters), b.map(|c| c.clusters));
            if let (Some(a), Some(b)) = (a, b) {
                prop_assert!((a.se - b.se).abs() <= 1e-9 * (1.0 + b.se));
            }
        }

        #[test]
        fn shared_cluster_offsets_inflate_by_the_cluster_size(
            offsets in prop::collection::vec(-100.0f64..100.0, 2..20),
            per_cluster in 1usize..30,
        ) {
            // Every sample of cluster b equals c_b (intra-cluster correlation 1): the cluster SE
            // is the SE of the G cluster means, s_c/√G, whatever the cluster size m, while the
            // ordinary s²/n underestimates it by the factor (G·m − 1)/(G − 1) ≈ m.
            let g = offsets.len();
            let c_sd = sample_sd(&offsets).unwrap_or(f64::NAN);
            prop_assume!(c_sd > 1e-6);
            let mut samples = Vec::new();
            for (b, &c) in offsets.iter().enumerate() {
                for _ in 0..per_cluster {
                    samples.push((c, b as u64));
                }
            }
            let values: Vec<f64> = samples.iter().map(|s| s.0).collect();
            let m = mean(&values).unwrap_or(f64::NAN);
            let se = cluster_robust_se(&samples, m).map_or(f64::NAN, |c| c.se);
            let expect = c_sd / (g as f64).sqrt();
            prop_assert!((se - expect).abs() <= 1e-9 * expect);
            let s = sample_sd(&values).unwrap_or(f64::NAN);
            let ordinary_var = s * s / values.len() as f64;
            let n = (g * per_cluster) as f64;
            let inflation = (n - 1.0) / (g as f64 - 1.0);
            prop_assert!((se * se / ordinary_var - inflation).abs() <= 1e-9 * inflation);
        }
    }
}
