//! The uncertainty budget of each calibration cell (design §6): the statistical spread of K
//! (type A) and the bench's stated uncertainties (type B), through the measurement model
//! K = RTT − 2·τ_path − K_ref, and `budget.csv` made from them.

use crate::bench::uncertainty::{BenchUncertainty, InputUncertainty};
use crate::fit::budget::{combine, root_sum_square, Combined, Component, Evaluation};
use crate::fit::stats::t975;
use crate::fit::CalRow;

/// ∂K/∂τ for a one-way path delay: the round trip crosses it twice.
pub const PATH_SENSITIVITY: f64 = -2.0;

/// ∂K/∂K_ref: the reference's own K is removed once.
pub const REFERENCE_SENSITIVITY: f64 = -1.0;

/// The `budget.csv` header.
pub const BUDGET_HEADER: &str =
    "center_mhz,bw_mhz,gain_index,component,type,distribution,sensitivity,u_ps,contribution_ps,dof";

/// A cell's budget: every component and, when they combine, the result.
#[derive(Debug, Clone, PartialEq)]
pub struct CellBudget {
    /// Channel center frequency.
    pub center_mhz: u32,
    /// Channel bandwidth.
    pub bw_mhz: u32,
    /// DUT receive gain state.
    pub gain_index: u32,
    /// Statistical first, then the bench's inputs.
    pub components: Vec<Component>,
    /// `None` when the row's interval has no usable degrees of freedom.
    pub combined: Option<Combined>,
}

/// The summary of a budget that `caltable.csv` carries.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RowBudget {
    /// Statistical standard uncertainty: `ci95_ps` over its Student-t factor.
    pub u_stat_ps: f64,
    /// The bench's inputs combined (type B).
    pub u_bench_ps: f64,
    /// Combined standard uncertainty.
    pub u_comb_ps: f64,
    /// Welch–Satterthwaite effective degrees of freedom.
    pub dof: f64,
    /// Coverage factor at 95 %.
    pub k: f64,
    /// Expanded uncertainty k·u_comb.
    pub expanded_ps: f64,
}

impl CellBudget {
    /// The summary for `caltable.csv`; `None` when the budget did not combine.
    pub fn row_budget(&self) -> Option<RowBudget> {
        let c = self.combined?;
        let of = |e: Evaluation| {
            root_sum_square(
                self.components
                    .iter()
                    .filter(|p| p.evaluation == e)
                    .map(Component::contribution_ps),
            )
        };
        Some(RowBudget {
            u_stat_ps: of(Evaluation::A),
            u_bench_ps: of(Evaluation::B),
            u_comb_ps: c.u_comb_ps,
            dof: c.dof_eff,
            k: c.k,
            expanded_ps: c.expanded_ps,
        })
    }
}

/// A bench input as a type B component (u = 0, `not stated`, when the bench gives none).
fn bench_component(
    name: &'static str,
    sensitivity: f64,
    input: Option<InputUncertainty>,
) -> Component {
    Component {
        name,
        evaluation: Evaluation::B,
        distribution: if input.is_some() {
            "normal"
        } else {
            "not stated"
        },
        sensitivity,
        u_ps: input.map_or(0.0, |i| i.u_ps),
        dof: input.map_or(f64::INFINITY, |i| i.dof),
    }
}

/// A measured path's in-band ripple (cables' and the attenuator's, independent mismatches, so
/// root-sum-square). The delay a frame sees lies somewhere between the band's extremes with
/// none more likely known: a rectangular distribution of half-width (max − min)/2, u = a/√3
/// (GUM 4.3.7). Type B; no degrees of freedom are lost on a bound taken as given (GUM G.4.2).
fn ripple_component(u_ps: f64) -> Component {
    Component {
        name: "path_ripple",
        evaluation: Evaluation::B,
        distribution: "rectangular",
        sensitivity: PATH_SENSITIVITY,
        u_ps,
        dof: f64::INFINITY,
    }
}

/// The budget of one row. The bench's inputs shift every cell alike: they are listed in each.
pub fn cell_budget(row: &CalRow, bench: &BenchUncertainty) -> CellBudget {
    let u_stat_ps = t975(row.stat_dof).map(|t| row.ci95_ps / t);
    let statistical = Component {
        name: "statistical",
        evaluation: Evaluation::A,
        distribution: "t",
        sensitivity: 1.0,
        u_ps: u_stat_ps.unwrap_or(f64::NAN),
        dof: row.stat_dof,
    };
    let mut components = vec![
        statistical,
        bench_component("cable_delay", PATH_SENSITIVITY, bench.cable),
        bench_component("atten_delay", PATH_SENSITIVITY, bench.atten),
        bench_component("reference_k", REFERENCE_SENSITIVITY, bench.reference),
    ];
    if let Some(m) = &bench.measured {
        components.push(ripple_component(
            m.channel(row.center_mhz, row.bw_mhz)
                .ok()
                .map_or(f64::NAN, |p| {
                    p.cable.ripple_u_ps.hypot(p.atten_ripple_u_ps())
                }),
        ));
    }
    let combined = u_stat_ps.and_then(|_| combine(&components));
    CellBudget {
        center_mhz: row.center_mhz,
        bw_mhz: row.bw_mhz,
        gain_index: row.gain_index,
        components,
        combined,
    }
}

/// Budgets of every row, in the table's order.
pub fn budgets(rows: &[CalRow], bench: &BenchUncertainty) -> Vec<CellBudget> {
    rows.iter().map(|r| cell_budget(r, bench)).collect()
}

/// Degrees of freedom as the CSV files write them: `inf` when infinite, else 1 decimal.
pub fn dof_text(dof: f64) -> String {
    if dof.is_infinite() {
        "inf".to_string()
    } else {
        format!("{dof:.1}")
    }
}

/// `budget.csv`: one line per cell and component, ps to 3 decimals.
pub fn budget_csv(budgets: &[CellBudget]) -> String {
    let mut out = format!("{BUDGET_HEADER}\n");
    for b in budgets {
        for c in &b.components {
            out.push_str(&format!(
                "{},{},{},{},{},{},{},{:.3},{:.3},{}\n",
                b.center_mhz,
                b.bw_mhz,
                b.gain_index,
                c.name,
                c.evaluation.as_str(),
                c.distribution,
                c.sensitivity,
                c.u_ps,
                c.contribution_ps(),
                dof_text(c.dof)
            ));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bench::uncertainty::UncertaintyFrom;
    use crate::fit::RowSource;

    fn row(ci95_ps: f64, stat_dof: f64) -> CalRow {
        CalRow {
            center_mhz: 5500,
            bw_mhz: 40,
            gain_index: 2,
            delay_ps: 2000.0,
            ci95_ps,
            stat_dof,
            n_used: 90,
            n_rejected: 0,
            n_bursts: 10,
            sd_ps: 40.0,
            source: RowSource::Measured,
        }
    }

    fn stated(u_ps: f64, dof: f64) -> Option<InputUncertainty> {
        Some(InputUncertainty {
            u_ps,
            dof,
            from: UncertaintyFrom::Standard,
        })
    }

    #[test]
    fn the_path_counts_twice_and_the_reference_once() {
        // Design §6: sensitivity 2 for the one-way path, 1 for the reference K. With the
        // statistical part from a 9-dof interval: u_stat = ci95 / t₉₅(9).
        let t9 = t975(9.0).expect("t");
        let bench = BenchUncertainty {
            cable: stated(3.0, f64::INFINITY),
            atten: stated(0.0, f64::INFINITY),
            reference: stated(5.0, 20.0),
            measured: None,
        };
        let b = cell_budget(&row(4.0 * t9, 9.0), &bench);
        let r = b.row_budget().expect("combines");
        assert!((r.u_stat_ps - 4.0).abs() < 1e-9);
        assert!((r.u_bench_ps - (36.0f64 + 25.0).sqrt()).abs() < 1e-9);
        assert!((r.u_comb_ps - (16.0f64 + 36.0 + 25.0).sqrt()).abs() < 1e-9);
        let nu = 77.0f64.powi(2) / (4.0f64.powi(4) / 9.0 + 5.0f64.powi(4) / 20.0);
        assert!((r.dof - nu).abs() < 1e-9, "dof {} vs {nu}", r.dof);
        assert!((r.expanded_ps - t975(nu).expect("t") * r.u_comb_ps).abs() < 1e-9);
    }

    #[test]
    fn writes_one_line_per_component() {
        let b = cell_budget(&row(2.0, 11.0), &BenchUncertainty::default());
        let text = budget_csv(&[b]);
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines.len(), 5);
        assert_eq!(lines[0], BUDGET_HEADER);
        assert!(lines[1].starts_with("5500,40,2,statistical,A,t,1,"));
        assert!(lines[1].ends_with(",11.0"));
        assert_eq!(
            lines[2],
            "5500,40,2,cable_delay,B,not stated,-2,0.000,0.000,inf"
        );
    }

    #[test]
    fn a_row_without_usable_dof_has_no_combination() {
        let b = cell_budget(&row(2.0, 0.0), &BenchUncertainty::default());
        assert_eq!(b.combined, None);
        assert_eq!(b.row_budget(), None);
    }
}
