//! A cell's delays as a Gaussian core plus a one-sided late component, for benches where late
//! detections (multipath) sit too close to the core for a symmetric rejection window to remove.
//!
//! A late path only ever adds delay, so contamination that survives the gross rejection pulls
//! a plain mean one way. Here the kept delays are modelled as the two-component normal mixture
//! `(1 − p)·N(μ, v) + p·N(m, w)` with the late mean held at least one core standard deviation
//! above the core (`m ≥ μ + √v`), fitted by maximum likelihood with the EM algorithm (Dempster,
//! Laird & Rubin 1977). The mixture replaces the single normal only when the kept delays are
//! skewed to the late side and the Akaike information criterion (Akaike 1974) prefers it, so
//! clean cells keep the plain mean. The core mean's standard error is a delete-a-group
//! jackknife over bursts (Quenouille 1956, Tukey 1958), so what the exchanges of a burst share
//! and the uncertainty of where the core ends and the tail begins are both in the interval.
//!
//! Never used for anything but the location of the core: the late component's parameters
//! describe whatever lies late, they are not a model of the channel.

use crate::fit::stats::{mean, sample_sd};

/// Most EM iterations per cell; the log-likelihood normally settles within a few dozen.
const MAX_ITERATIONS: usize = 500;

/// EM stops when an iteration gains less log-likelihood than this.
const TOLERANCE: f64 = 1e-9;

/// The skewness a cell must show before a late component is considered: this many standard
/// errors of the sample skewness of normal data (`√(6/n)`; common practice). It keeps the
/// mixture away from symmetric heavy tails, which it would otherwise bend into a late side.
const SKEW_GATE_SE: f64 = 3.0;

/// Fewest kept delays for a mixture fit: five parameters need far more than five points.
const MIN_SAMPLES: usize = 40;

/// The core's location when a late component was found.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LateSplit {
    /// Mean of the Gaussian core.
    pub core_mean_ps: f64,
    /// Standard deviation of the core.
    pub core_sd_ps: f64,
    /// Cluster-robust standard error of the core mean.
    pub core_se_ps: f64,
    /// Jackknife groups (bursts, or runs of bursts in a long cell); the interval has
    /// `clusters − 1` degrees of freedom.
    pub clusters: u64,
    /// Distinct bursts among the delays.
    pub bursts: u64,
    /// Share of the delays in the late component.
    pub late_share: f64,
    /// Delays more likely late than core.
    pub judged_late: u64,
    mixture: Mixture,
}

impl LateSplit {
    /// Whether a delay of `x_ps` is more likely from the late component than from the core.
    pub fn is_late(&self, x_ps: f64) -> bool {
        let (core, late) = self.mixture.weighted_densities(x_ps);
        late > core
    }
}

/// The mixture's parameters: core mean and variance, late share, late mean and variance.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Mixture {
    mu: f64,
    v: f64,
    p: f64,
    m: f64,
    w: f64,
}

impl Mixture {
    /// Densities of `x` under the core and the late component, each with its weight.
    fn weighted_densities(&self, x: f64) -> (f64, f64) {
        (
            (1.0 - self.p) * normal_pdf(x, self.mu, self.v),
            self.p * normal_pdf(x, self.m, self.w),
        )
    }
}

fn normal_pdf(x: f64, mean: f64, var: f64) -> f64 {
    let d = x - mean;
    (-0.5 * d * d / var).exp() / (2.0 * std::f64::consts::PI * var).sqrt()
}

/// Whether `values` lean late: their sample skewness exceeds [`SKEW_GATE_SE`] standard errors
/// of the skewness of normal data. Judged on a symmetric window, so that symmetric outliers
/// are not taken for a late side.
pub fn leans_late(values: &[f64]) -> bool {
    let n = values.len();
    if n < MIN_SAMPLES {
        return false;
    }
    mean(values).is_some_and(|m| skewness(values, m) >= SKEW_GATE_SE * (6.0 / n as f64).sqrt())
}

/// Sample skewness `g1 = m3 / m2^{3/2}` about `center`.
fn skewness(values: &[f64], center: f64) -> f64 {
    let n = values.len() as f64;
    let (m2, m3) = values.iter().fold((0.0, 0.0), |(s2, s3), x| {
        let d = x - center;
        (s2 + d * d, s3 + d * d * d)
    });
    let (m2, m3) = (m2 / n, m3 / n);
    if m2 <= 0.0 {
        return 0.0;
    }
    m3 / m2.powf(1.5)
}

/// Splits `samples` (delay, burst; bursts ascending) into a core and a late side when the data
/// call for it; `None` when a single normal serves (too few delays, or the information
/// criterion prefers one component), and the caller keeps the plain mean. Meant for cells that
/// [`leans_late`] picked.
pub fn split_late(samples: &[(f64, u64)]) -> Option<LateSplit> {
    let n = samples.len();
    if n < MIN_SAMPLES {
        return None;
    }
    let values: Vec<f64> = samples.iter().map(|s| s.0).collect();
    let one_mean = mean(&values)?;
    let one_sd = sample_sd(&values)?;
    if one_sd <= 0.0 {
        return None;
    }
    let n_f = n as f64;
    let one_var = one_sd * one_sd * (n_f - 1.0) / n_f;
    let one_ll: f64 = values
        .iter()
        .map(|&x| normal_pdf(x, one_mean, one_var).ln())
        .sum();
    // Start: the core where the bulk is (a little below the mean the tail pulls up), the late
    // component a few standard deviations above it.
    let start = Mixture {
        mu: one_mean - 0.2 * one_sd,
        v: (0.8 * one_sd).powi(2),
        p: 0.1,
        m: one_mean + 2.0 * one_sd,
        w: one_sd * one_sd,
    };
    let (mix, mix_ll) = em(&values, start)?;
    // AIC: −2·ln L + 2k, two parameters against five. The skew gate has already asked whether
    // the cell leans late; BIC's ln n per parameter turned away one cell in thirty on a bench
    // with 5 % late by 2.9 sd, and each kept a plain mean 3 standard errors high.
    let aic_one = -2.0 * one_ll + 2.0 * 2.0;
    let aic_mix = -2.0 * mix_ll + 2.0 * 5.0;
    if aic_mix >= aic_one {
        return None;
    }
    let (core_se_ps, clusters) = jackknife_se(&mix, samples)?;
    let bursts = 1 + samples.windows(2).filter(|w| w[0].1 != w[1].1).count() as u64;
    let mut split = LateSplit {
        core_mean_ps: mix.mu,
        core_sd_ps: mix.v.sqrt(),
        core_se_ps,
        clusters,
        bursts,
        late_share: mix.p,
        judged_late: 0,
        mixture: mix,
    };
    split.judged_late = values.iter().filter(|&&x| split.is_late(x)).count() as u64;
    Some(split)
}

/// Fits the mixture by EM from `start`; `None` if it degenerates.
fn em(values: &[f64], start: Mixture) -> Option<(Mixture, f64)> {
    let mut mix = start;
    let n = values.len() as f64;
    let mut last_ll = f64::NEG_INFINITY;
    // Variances may not collapse onto a few points: a floor of a millionth of the spread.
    let var_floor = 1e-6 * start.v;
    for _ in 0..MAX_ITERATIONS {
        let (mut r_sum, mut rx, mut lx) = (0.0, 0.0, 0.0);
        let mut ll = 0.0;
        for &x in values {
            let (core, late) = mix.weighted_densities(x);
            let total = core + late;
            if total <= 0.0 || !total.is_finite() {
                return None;
            }
            ll += total.ln();
            let r = core / total;
            r_sum += r;
            rx += r * x;
            lx += (1.0 - r) * x;
        }
        let l_sum = n - r_sum;
        if r_sum < 2.0 || l_sum < 1e-3 {
            return None;
        }
        let mu = rx / r_sum;
        let m_free = lx / l_sum;
        let (mut rv, mut lw) = (0.0, 0.0);
        for &x in values {
            let (core, late) = mix.weighted_densities(x);
            let r = core / (core + late);
            rv += r * (x - mu) * (x - mu);
            lw += (1.0 - r) * (x - m_free) * (x - m_free);
        }
        let v = (rv / r_sum).max(var_floor);
        // The late side is late: its mean is held at least one core sd above the core (the
        // constrained M-step for m, since the likelihood in m alone is a concave parabola).
        let m = m_free.max(mu + v.sqrt());
        let w = ((lw + l_sum * (m - m_free).powi(2)) / l_sum).max(var_floor);
        mix = Mixture {
            mu,
            v,
            p: (l_sum / n).clamp(1e-6, 0.5),
            m,
            w,
        };
        if (ll - last_ll).abs() < TOLERANCE * n {
            last_ll = ll;
            break;
        }
        last_ll = ll;
    }
    let ll: f64 = values
        .iter()
        .map(|&x| {
            let (core, late) = mix.weighted_densities(x);
            (core + late).ln()
        })
        .sum();
    (ll.is_finite() && last_ll.is_finite()).then_some((mix, ll))
}

/// Most jackknife groups: cells with more bursts delete contiguous groups of bursts, so a long
/// run costs at most this many refits per cell that leans late.
const MAX_GROUPS: usize = 100;

/// Delete-a-group jackknife standard error of the core mean (Quenouille–Tukey; with bursts as
/// the groups it is the cluster jackknife): the mixture is refitted without each group in turn,
/// started from the full fit, and `V = (J−1)/J · Σ_j (μ_(j) − μ̄)²`. A sandwich over the five
/// parameters came out 16 % short at 30 bursts, where the core and the late side overlap; the
/// jackknife carries the refits' real spread. `None` with fewer than two groups or a refit
/// that degenerates.
fn jackknife_se(mix: &Mixture, samples: &[(f64, u64)]) -> Option<(f64, u64)> {
    // Where each burst starts (samples come burst by burst).
    let mut starts: Vec<usize> = Vec::new();
    let mut last = None;
    for (i, &(_, cluster)) in samples.iter().enumerate() {
        if last != Some(cluster) {
            starts.push(i);
            last = Some(cluster);
        }
    }
    let bursts = starts.len();
    if bursts < 2 {
        return None;
    }
    let groups = bursts.min(MAX_GROUPS);
    let bound = |j: usize| {
        let b = j * bursts / groups;
        if b == bursts {
            samples.len()
        } else {
            starts[b]
        }
    };
    let mut rest = Vec::with_capacity(samples.len());
    let mut estimates = Vec::with_capacity(groups);
    for j in 0..groups {
        let (from, to) = (bound(j), bound(j + 1));
        rest.clear();
        rest.extend(samples[..from].iter().chain(&samples[to..]).map(|s| s.0));
        let (refit, _) = em(&rest, *mix)?;
        estimates.push(refit.mu);
    }
    let j_f = groups as f64;
    let centre = mean(&estimates)?;
    let var = (j_f - 1.0) / j_f * estimates.iter().map(|m| (m - centre).powi(2)).sum::<f64>();
    (var.is_finite() && var > 0.0).then(|| (var.sqrt(), groups as u64))
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;
    use rand_distr::{Distribution, Normal};

    /// `bursts` × 16 delays: N(1000, 200²) with a share `late` of them moved `late_ps` later.
    fn cell(seed: u64, bursts: u64, late: f64, late_ps: f64) -> Vec<(f64, u64)> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let noise = Normal::new(1000.0, 200.0).expect("normal");
        let mut out = Vec::new();
        for b in 0..bursts {
            for i in 0..16u64 {
                let x = noise.sample(&mut rng);
                // Every 1/late-th delay, spread evenly, so the share is exact.
                let is_late = ((b * 16 + i) as f64 * late).fract() + late >= 1.0;
                out.push((if is_late { x + late_ps } else { x }, b));
            }
        }
        out
    }

    #[test]
    fn symmetric_data_does_not_lean_late() {
        // Normal delays, and normal delays with symmetric outliers at ±4 sd: skewness near 0
        // (its standard error at n = 640 is √(6/640) = 0.097), under the 2-SE gate in nearly
        // every seed.
        let mut leaning = 0;
        for seed in 0..100 {
            let mut values: Vec<f64> = cell(seed, 40, 0.0, 0.0).iter().map(|s| s.0).collect();
            for (i, v) in values.iter_mut().enumerate().step_by(25) {
                *v += if i % 50 == 0 { 800.0 } else { -800.0 };
            }
            leaning += usize::from(leans_late(&values));
        }
        // One-sided 2-SE gate: about 2.3 % of seeds by chance (normal approximation).
        assert!(leaning <= 8, "{leaning} of 100 leaned late");
    }

    #[test]
    fn a_late_share_three_sd_late_is_found_and_the_core_recovered() {
        // 5 % of delays 600 ps (3 sd) late: the plain mean sits 30 ps high. Over 40 seeds the
        // core's mean must miss 1000 ps by more than 1.96 of its standard errors about as often
        // as a 95 % interval should (expected 2; binomial P(more than 6) < 0.5 %), with mean z
        // within 0.45 (about 3 standard errors of a mean of 40).
        let (mut sum_z, mut outside) = (0.0, 0);
        for seed in 0..40 {
            let samples = cell(seed, 40, 0.05, 600.0);
            let values: Vec<f64> = samples.iter().map(|s| s.0).collect();
            assert!(leans_late(&values), "seed {seed}");
            let split = split_late(&samples).expect("a late side");
            let z = (split.core_mean_ps - 1000.0) / split.core_se_ps;
            outside += usize::from(z.abs() > 1.96);
            assert!(
                (split.core_sd_ps - 200.0).abs() < 40.0,
                "seed {seed}: {split:?}"
            );
            assert!(
                (0.01..0.3).contains(&split.late_share) && split.judged_late > 0,
                "seed {seed}: {split:?}"
            );
            assert!(split.is_late(1800.0) && !split.is_late(1000.0));
            sum_z += z;
        }
        assert!(outside <= 6, "{outside} of 40 outside");
        assert!((sum_z / 40.0).abs() < 0.45, "mean z {}", sum_z / 40.0);
        let plain = mean(
            &cell(0, 40, 0.05, 600.0)
                .iter()
                .map(|s| s.0)
                .collect::<Vec<_>>(),
        );
        assert!(plain.is_some_and(|m| m > 1015.0), "{plain:?}");
    }

    #[test]
    fn long_cells_delete_groups_of_bursts() {
        let samples = cell(5, 250, 0.05, 600.0);
        let split = split_late(&samples).expect("a late side");
        assert_eq!((split.clusters, split.bursts), (MAX_GROUPS as u64, 250));
    }

    #[test]
    fn too_few_delays_are_left_to_the_plain_mean() {
        let samples = cell(1, 3, 0.1, 600.0);
        assert!(split_late(&samples[..MIN_SAMPLES - 1]).is_none());
        assert!(!leans_late(&[1.0; 10]));
    }
}
