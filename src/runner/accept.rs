//! A run's fifth phase: the recipe's acceptance limits evaluated on the fitted table and its
//! verification.

use crate::data::manifest::AcceptCheck;
use crate::fit::verify::VerifyRow;
use crate::fit::FitResult;
use crate::recipe::Acceptance;
use std::collections::BTreeSet;

/// The acceptance checks of a run (none without a table), each logged with its verdict (judged
/// only when the run `finished`).
pub fn accept(
    accept: &Acceptance,
    fit: Option<&FitResult>,
    verify: &[VerifyRow],
    finished: bool,
) -> Vec<AcceptCheck> {
    let checks = fit.map_or_else(Vec::new, |f| acceptance(accept, f, verify));
    for c in &checks {
        tracing::info!("acceptance {}", c.summary(finished));
    }
    checks
}

/// Evaluates the recipe's acceptance limits on a fitted table and its verification.
fn acceptance(accept: &Acceptance, fit: &FitResult, verify: &[VerifyRow]) -> Vec<AcceptCheck> {
    let mut checks = Vec::new();
    if let Some(limit) = accept.max_ci95_ps {
        let worst = fit.rows.iter().map(|r| r.ci95_ps).fold(f64::NAN, f64::max);
        checks.push(AcceptCheck {
            name: "max_ci95_ps".into(),
            limit,
            value: worst,
            passed: worst <= limit,
        });
    }
    if let Some(limit) = accept.min_gain_states {
        // Modelled rows fill in states the run did not reach: they measure nothing.
        let gains: BTreeSet<u32> = fit
            .rows
            .iter()
            .filter(|r| r.source.is_from_exchanges())
            .map(|r| r.gain_index)
            .collect();
        checks.push(AcceptCheck {
            name: "min_gain_states".into(),
            limit: f64::from(limit),
            value: gains.len() as f64,
            passed: gains.len() >= limit as usize,
        });
    }
    if let Some(limit) = accept.max_range_error_m {
        let worst = verify
            .iter()
            .map(|r| r.range_error_table_m.abs())
            .fold(f64::NAN, f64::max);
        checks.push(AcceptCheck {
            name: "max_range_error_m".into(),
            limit,
            value: worst,
            passed: worst <= limit,
        });
    }
    checks
}
