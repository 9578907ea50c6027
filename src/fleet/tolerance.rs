//! The two-sided normal tolerance factor k: x̄ ± k·s covers at least a proportion `p` of a
//! normal population with confidence `gamma`, from `n` units.
//!
//! Computed exactly (Odeh 1978; the integral of ISO 16269-6 and of Meeker, Hahn & Escobar,
//! *Statistical Intervals*, 2nd ed., §E): with x̄ ~ N(0, 1/n) and ν·s² ~ χ²_ν (ν = n − 1),
//! the interval covers at least `p` exactly when s ≥ r(x̄)/k, where r(x) solves
//! Φ(x + r) − Φ(x − r) = p; so the confidence is
//! γ(k) = 2 ∫₀^∞ √(n/2π) e^{−n x²/2} · P[χ²_ν > ν r(x)²/k²] dx, solved for k.
//! Howe's closed-form approximation (NIST/SEMATECH e-Handbook §7.2.6.3) starts the search.

use statrs::distribution::{ChiSquared, Continuous, ContinuousCDF, Normal};

/// Why a factor cannot be computed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ToleranceError {
    /// Fewer than two units: no standard deviation.
    #[error("a tolerance interval needs at least 2 units, not {0}")]
    TooFew(usize),
    /// A proportion or confidence outside (0, 1).
    #[error("proportion and confidence must lie strictly between 0 and 1")]
    Level,
}

fn standard_normal() -> Normal {
    Normal::new(0.0, 1.0).expect("unit normal")
}

/// Howe's approximation k ≈ √(ν (1 + 1/n) z²₍₁₊ₚ₎/₂ / χ²₁₋γ,ν), χ²₁₋γ,ν the (1 − γ)
/// quantile of χ²_ν (NIST/SEMATECH e-Handbook of Statistical Methods §7.2.6.3).
pub fn howe_factor(n: usize, p: f64, gamma: f64) -> Result<f64, ToleranceError> {
    check(n, p, gamma)?;
    let nu = (n - 1) as f64;
    let z = standard_normal().inverse_cdf((1.0 + p) / 2.0);
    let chi = ChiSquared::new(nu).map_err(|_| ToleranceError::TooFew(n))?;
    let q = chi.inverse_cdf(1.0 - gamma);
    Ok((nu * (1.0 + 1.0 / n as f64) * z * z / q).sqrt())
}

/// The exact two-sided factor (see the module's note).
pub fn exact_factor(n: usize, p: f64, gamma: f64) -> Result<f64, ToleranceError> {
    let start = howe_factor(n, p, gamma)?;
    let confidence = |k: f64| coverage_confidence(n, p, k) - gamma;
    // γ(k) rises with k; Howe's value is within a few % of the root, so a bracket of a factor
    // of two either way always holds it.
    let (mut lo, mut hi) = (start * 0.5, start * 2.0);
    let (mut f_lo, mut f_hi) = (confidence(lo), confidence(hi));
    // Regula falsi with the Illinois modification: few evaluations, each an integral.
    for _ in 0..100 {
        let k = hi - f_hi * (hi - lo) / (f_hi - f_lo);
        let f = confidence(k);
        if f.abs() < 1e-12 || (hi - lo) < 1e-10 * k {
            return Ok(k);
        }
        if (f > 0.0) == (f_hi > 0.0) {
            hi = k;
            f_hi = f;
            f_lo /= 2.0;
        } else {
            lo = k;
            f_lo = f;
            f_hi /= 2.0;
        }
    }
    Ok(hi - f_hi * (hi - lo) / (f_hi - f_lo))
}

fn check(n: usize, p: f64, gamma: f64) -> Result<(), ToleranceError> {
    if n < 2 {
        return Err(ToleranceError::TooFew(n));
    }
    if !(p > 0.0 && p < 1.0 && gamma > 0.0 && gamma < 1.0) {
        return Err(ToleranceError::Level);
    }
    Ok(())
}

/// γ(k): the probability that x̄ ± k·s covers at least `p` of the population.
fn coverage_confidence(n: usize, p: f64, k: f64) -> f64 {
    let nu = (n - 1) as f64;
    let chi = ChiSquared::new(nu).expect("n ≥ 2");
    let nf = n as f64;
    // x̄'s density beyond 9 of its SDs is below 1e-17.
    let upper = 9.0 / nf.sqrt();
    // Composite Simpson's rule: the integrand is smooth and bell-shaped.
    const STEPS: usize = 400;
    let h = upper / STEPS as f64;
    let mut r = standard_normal().inverse_cdf((1.0 + p) / 2.0);
    let mut sum = 0.0;
    for i in 0..=STEPS {
        let x = i as f64 * h;
        r = half_width(x, p, r);
        let density = (nf / (2.0 * std::f64::consts::PI)).sqrt() * (-nf * x * x / 2.0).exp();
        let f = density * chi.sf(nu * r * r / (k * k));
        let w = if i == 0 || i == STEPS {
            1.0
        } else if i % 2 == 1 {
            4.0
        } else {
            2.0
        };
        sum += w * f;
    }
    2.0 * sum * h / 3.0
}

/// r with Φ(x + r) − Φ(x − r) = p, by Newton's method from `guess` (the previous x's root,
/// which is close).
fn half_width(x: f64, p: f64, guess: f64) -> f64 {
    let phi = standard_normal();
    let mut r = guess.max(1e-6);
    for _ in 0..50 {
        let f = phi.cdf(x + r) - phi.cdf(x - r) - p;
        let df = phi.pdf(x + r) + phi.pdf(x - r);
        let step = f / df;
        r = (r - step).max(r / 2.0);
        if step.abs() < 1e-13 * r {
            break;
        }
    }
    r
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn howe_matches_the_nist_handbook_example() {
        // NIST/SEMATECH e-Handbook of Statistical Methods §7.2.6.3, worked example:
        // N = 43, p = 0.90, γ = 0.99 gives k2 = 2.2173.
        let k = howe_factor(43, 0.90, 0.99).expect("factor");
        assert!((k - 2.2173).abs() < 5e-5, "{k}");
    }

    #[test]
    fn too_few_units_or_a_bad_level_is_an_error() {
        assert_eq!(exact_factor(1, 0.95, 0.95), Err(ToleranceError::TooFew(1)));
        assert_eq!(exact_factor(10, 1.0, 0.95), Err(ToleranceError::Level));
    }

    #[test]
    fn the_exact_factor_tends_to_the_normal_quantile() {
        // As n grows, s → σ and x̄ → μ, so k → z at (1 + p)/2 = 1.95996 for p = 0.95.
        let k = exact_factor(100_000, 0.95, 0.95).expect("factor");
        assert!((k - 1.95996).abs() < 0.01, "{k}");
    }
}
