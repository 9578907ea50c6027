//! Combining standard uncertainties after the GUM (JCGM 100:2008): root-sum-square of the
//! contributions (5.1.2, uncorrelated inputs), Welch–Satterthwaite effective degrees of freedom
//! (G.4.1) and the coverage factor from Student's t at 95 % (G.3, G.4).

use crate::fit::stats::t975;

/// How a component's standard uncertainty was evaluated (GUM 2.3.2, 2.3.3).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Evaluation {
    /// By statistical analysis of series of observations.
    A,
    /// By other means: a certificate, a stated bound, a specification.
    B,
}

impl Evaluation {
    /// The `type` column value of `budget.csv`.
    pub fn as_str(self) -> &'static str {
        match self {
            Evaluation::A => "A",
            Evaluation::B => "B",
        }
    }
}

/// One input of the measurement model with its standard uncertainty.
#[derive(Debug, Clone, PartialEq)]
pub struct Component {
    /// What it is (`statistical`, `cable_delay`, …).
    pub name: &'static str,
    /// Type A or B.
    pub evaluation: Evaluation,
    /// The distribution assumed for the input (`t`, `normal`, or `not stated`).
    pub distribution: &'static str,
    /// Sensitivity coefficient ∂K/∂x (GUM 5.1.3).
    pub sensitivity: f64,
    /// Standard uncertainty of the input, ps.
    pub u_ps: f64,
    /// Degrees of freedom of `u_ps` (infinite when known exactly enough, GUM G.4.2).
    pub dof: f64,
}

impl Component {
    /// |c·u|: the component's contribution to the combined standard uncertainty, ps.
    pub fn contribution_ps(&self) -> f64 {
        (self.sensitivity * self.u_ps).abs()
    }
}

/// The combined result of a budget.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Combined {
    /// Combined standard uncertainty u_c, ps.
    pub u_comb_ps: f64,
    /// Welch–Satterthwaite effective degrees of freedom (infinite when every contribution's
    /// are).
    pub dof_eff: f64,
    /// Coverage factor for 95 %: Student's t at `dof_eff`.
    pub k: f64,
    /// Expanded uncertainty U = k·u_c, ps.
    pub expanded_ps: f64,
}

/// Root-sum-square of the contributions of uncorrelated inputs (GUM eq. 10).
pub fn root_sum_square(contributions_ps: impl IntoIterator<Item = f64>) -> f64 {
    contributions_ps
        .into_iter()
        .map(|c| c * c)
        .sum::<f64>()
        .sqrt()
}

/// Welch–Satterthwaite: ν_eff = u_c⁴ / Σ (c_i u_i)⁴ / ν_i (GUM eq. G.2b), for
/// (contribution, degrees of freedom) pairs. Contributions with infinite ν add nothing to the
/// sum; when nothing is left the result is infinite. Not truncated: [`t975`] takes fractional
/// degrees of freedom, which GUM G.4.1 note 1 allows as interpolation.
pub fn welch_satterthwaite(parts: &[(f64, f64)]) -> f64 {
    let u_c = root_sum_square(parts.iter().map(|p| p.0));
    let denominator: f64 = parts
        .iter()
        .filter(|(c, dof)| dof.is_finite() && *c != 0.0)
        .map(|(c, dof)| c.powi(4) / dof)
        .sum();
    if denominator > 0.0 {
        u_c.powi(4) / denominator
    } else {
        f64::INFINITY
    }
}

/// Combines `components`; `None` when a degree of freedom is below 1 (no interval can be
/// given) or a value is not a number.
pub fn combine(components: &[Component]) -> Option<Combined> {
    if components
        .iter()
        .any(|c| !(c.dof >= 1.0 && c.u_ps.is_finite() && c.sensitivity.is_finite()))
    {
        return None;
    }
    let parts: Vec<(f64, f64)> = components
        .iter()
        .map(|c| (c.contribution_ps(), c.dof))
        .collect();
    let u_comb_ps = root_sum_square(parts.iter().map(|p| p.0));
    let dof_eff = welch_satterthwaite(&parts);
    let k = t975(dof_eff)?;
    Some(Combined {
        u_comb_ps,
        dof_eff,
        k,
        expanded_ps: k * u_comb_ps,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64, tol: f64) -> bool {
        (a - b).abs() <= tol
    }

    /// JCGM 100:2008 (GUM) H.1, the end-gauge calibration, Table H.1 (figures from memory of
    /// the published table; they agree with each other, as the checks show): contributions 25 nm (ν 18), 9.7 nm (ν 25.6),
    /// 2.9 nm (ν 50), 16.6 nm (ν 2), and two of zero sensitivity; the text gives
    /// u_c² = 1002 nm², u_c = 32 nm and ν_eff = 16.7 (H.1.6).
    #[test]
    fn end_gauge_example_h1() {
        let parts = [
            (25.0, 18.0),
            (9.7, 25.6),
            (0.0, f64::INFINITY),
            (0.0, f64::INFINITY),
            (2.9, 50.0),
            (16.6, 2.0),
        ];
        // The GUM sums unrounded contributions; the rounded ones printed give 1003.1 nm² and
        // ν_eff 16.77, hence the tolerances.
        let u_c = root_sum_square(parts.iter().map(|p| p.0));
        assert!(close(u_c * u_c, 1002.0, 1.5), "u_c² {}", u_c * u_c);
        assert!(close(u_c, 32.0, 0.5), "u_c {u_c}");
        let nu = welch_satterthwaite(&parts);
        assert!(close(nu, 16.7, 0.1), "ν_eff {nu}");
    }

    /// GUM H.1.3.2: the sub-budget of d, the mean of the comparisons — u(d̄) = 5.8 nm (ν 24),
    /// u(d₁) = 3.9 nm (ν 5), u(d₂) = 6.7 nm (ν 8) combine to u(d) = 9.7 nm with ν_eff = 25.6.
    #[test]
    fn end_gauge_comparison_sub_budget_h1() {
        let parts = [(5.8, 24.0), (3.9, 5.0), (6.7, 8.0)];
        let u = root_sum_square(parts.iter().map(|p| p.0));
        assert!(close(u, 9.7, 0.05), "u(d) {u}");
        // The GUM works from unrounded inputs; from the rounded ones printed, ν is 25.4.
        let nu = welch_satterthwaite(&parts);
        assert!(close(nu, 25.6, 0.3), "ν_eff(d) {nu}");
    }

    /// GUM G.4.1, example: Y = b·X₁·X₂·X₃ with relative standard uncertainties 0.25 % (ν 9),
    /// 0.57 % (ν 4) and 0.82 % (ν 14); u_c/|y| = 1.03 %, ν_eff = 19.0, t₉₅(19) = 2.09 and
    /// U₉₅ = 2.2 %. Through [`combine`], with relative uncertainties as the unit.
    #[test]
    fn three_input_example_g41() {
        let part = |u_ps, dof| Component {
            name: "x",
            evaluation: Evaluation::A,
            distribution: "t",
            sensitivity: 1.0,
            u_ps,
            dof,
        };
        let c = combine(&[part(0.25, 9.0), part(0.57, 4.0), part(0.82, 14.0)]);
        let c = c.expect("combines");
        assert!(close(c.u_comb_ps, 1.03, 0.005), "u_c {}", c.u_comb_ps);
        assert!(close(c.dof_eff, 19.0, 0.1), "ν_eff {}", c.dof_eff);
        assert!(close(c.k, 2.09, 0.005), "k {}", c.k);
        assert!(close(c.expanded_ps, 2.2, 0.05), "U {}", c.expanded_ps);
    }

    #[test]
    fn type_b_alone_has_infinite_dof_and_the_normal_factor() {
        // GUM G.6.4 / common practice: with ν_eff infinite, k is the normal 1.960.
        let b = Component {
            name: "cable_delay",
            evaluation: Evaluation::B,
            distribution: "normal",
            sensitivity: 2.0,
            u_ps: 3.0,
            dof: f64::INFINITY,
        };
        let c = combine(std::slice::from_ref(&b)).expect("combines");
        assert_eq!(c.u_comb_ps, 6.0);
        assert_eq!(c.dof_eff, f64::INFINITY);
        assert!(close(c.k, 1.959_964, 1e-5), "k {}", c.k);
        let bad = Component { dof: 0.5, ..b };
        assert_eq!(combine(&[bad]), None);
    }
}
