//! A run's fourth phase: the table fitted from the exchanges on disk (exactly as `taucal fit`
//! reads them), and the files made from it and from the stages: `caltable.csv`, `drift.csv`,
//! `gainmap.csv`, `verify.csv`, `budget.csv`.

use super::prepare::Prepared;
use super::record::Recorded;
use super::tabulate::{self, FitSettings, Tabulated};
use super::RunError;
use crate::bench::Bench;
use crate::data::manifest::{write_atomic, SingleState};
use crate::data::run_dir::files;
use crate::fit::budget_cell::{budget_csv, budgets};
use crate::fit::gainmap::GainMap;
use crate::fit::switch_point::Estimate;
use crate::fit::verify::{self, VerifyRow};
use crate::fit::FitResult;
use crate::recipe::{Channel, Plan, Stage};
use std::collections::BTreeMap;
use std::path::Path;

/// The fit of a run and its verification.
#[derive(Default)]
pub struct Outputs {
    /// The table (absent if the exchanges could not be read).
    pub fit: Option<FitResult>,
    /// Verification rows, when the recipe verifies.
    pub verify: Vec<VerifyRow>,
    /// The single-state calibrations the verification compares against.
    pub single_state: Vec<SingleState>,
}

/// Fits the run's exchanges and writes its output files. Every file is attempted; the first
/// that cannot be written is the failure returned.
pub fn fit_and_write(
    plan: &Plan,
    bench: &Bench,
    prepared: &Prepared,
    recorded: &Recorded,
) -> (Outputs, Result<(), RunError>) {
    let dir = &prepared.dir;
    let gain_map_written = if recorded.gain_maps.is_empty() {
        Ok(())
    } else {
        let csv = gainmap_csv(bench, &recorded.gain_maps);
        write_file(&dir.join(files::GAINMAP), csv.as_bytes())
    };
    let settings = FitSettings {
        reject_mad: plan.reject_mad,
        verify_stages: recorded
            .verify_stages
            .iter()
            .map(|(n, _)| n.clone())
            .collect(),
        gain_states: plan.gain_states,
        predict: plan.predict.as_ref().map(|p| p.model.clone()),
        applied_k_ps: recorded.applied_k_ps,
    };
    let levels = &recorded.verify_stages;
    match tabulate::fit_file(&dir.join(files::EXCHANGES), bench, &settings) {
        Ok(Tabulated { fit, checked, .. }) => {
            let table_path = dir.join(files::CALTABLE);
            let table_written = tabulate::write_table(&table_path, &fit, &bench.uncertainty)
                .map_err(|e| RunError::io(&table_path, e));
            let budget_written = write_file(
                &dir.join(files::BUDGET),
                budget_text(&fit, bench).as_bytes(),
            );
            let drift_written = if fit.drift.is_empty() {
                Ok(())
            } else {
                let csv = crate::fit::drift::drift_csv(&fit.drift);
                write_file(&dir.join(files::DRIFT), csv.as_bytes())
            };
            let (rows, single_state) = verification(plan, bench, &fit, &checked, levels);
            let verify_written = if levels.is_empty() {
                Ok(())
            } else {
                write_file(
                    &dir.join(files::VERIFY),
                    verify::verify_csv(&rows).as_bytes(),
                )
            };
            let outputs = Outputs {
                fit: Some(fit),
                verify: rows,
                single_state,
            };
            let written = gain_map_written
                .and(table_written)
                .and(budget_written)
                .and(drift_written)
                .and(verify_written);
            (outputs, written)
        }
        Err(e) => {
            tracing::error!("fit: {e}");
            (Outputs::default(), gain_map_written)
        }
    }
}

/// `budget.csv`: every cell's budget from the bench's stated uncertainties.
pub fn budget_text(fit: &FitResult, bench: &Bench) -> String {
    budget_csv(&budgets(&fit.rows, &bench.uncertainty))
}

fn write_file(path: &Path, bytes: &[u8]) -> Result<(), RunError> {
    write_atomic(path, bytes).map_err(|e| RunError::io(path, e))
}

/// `gainmap.csv`: each mapped state's plateau as attenuation and as DUT receive level, then
/// (appended columns, so older readers keep working) the fitted switch to the next state up:
/// its attenuations rising and falling and the hysteresis, each with a 95 % half-width. The
/// hysteresis is left empty unless its interval lies wholly above zero. The last column says
/// whether the states were `reported` by the DUT or `inferred` from K; an inferred switch has
/// the crossings seen each way and no interval (no step was reported to fit one from).
fn gainmap_csv(bench: &Bench, maps: &BTreeMap<String, (Channel, GainMap)>) -> String {
    let mut out = String::from(
        "center_mhz,bw_mhz,gain_index,atten_min_db,atten_max_db,rx_power_min_dbm,rx_power_max_dbm,\
         next_gain_index,switch_rising_db,switch_rising_ci95_db,switch_falling_db,\
         switch_falling_ci95_db,hysteresis_db,hysteresis_ci95_db,hysteresis_resolved,states\n",
    );
    let pair = |e: Option<Estimate>| {
        e.map_or(",".to_string(), |e| {
            format!("{:.2},{:.2}", e.value_db, e.ci95_db)
        })
    };
    for (channel, map) in maps.values() {
        for p in &map.plateaus {
            let switch = map.switches.iter().find(|s| s.below == p.gain_index);
            let fitted = switch.and_then(|s| s.fit);
            let next = switch.map_or(String::new(), |s| s.above.to_string());
            let resolved = fitted.and_then(|f| f.resolved_hysteresis_db());
            let known = fitted.is_some_and(|f| f.hysteresis_db.is_some());
            let seen = |e: Option<f64>| e.map_or(",".to_string(), |a| format!("{a:.2},"));
            let (rising, falling) = match (map.inferred, switch) {
                (true, Some(s)) => (seen(s.rising_db), seen(s.falling_db)),
                _ => (
                    pair(fitted.and_then(|f| f.up_db)),
                    pair(fitted.and_then(|f| f.down_db)),
                ),
            };
            out.push_str(&format!(
                "{},{},{},{:.2},{:.2},{:.2},{:.2},{next},{rising},{falling},{},{},{}\n",
                channel.center_mhz,
                channel.bw_mhz,
                p.gain_index,
                p.atten_min_db,
                p.atten_max_db,
                bench.dut_rx_dbm(p.atten_max_db),
                bench.dut_rx_dbm(p.atten_min_db),
                pair(resolved),
                if known {
                    resolved.is_some().to_string()
                } else {
                    String::new()
                },
                if map.inferred { "inferred" } else { "reported" },
            ));
        }
    }
    out
}

/// Verification rows and the single-state calibrations they compare against.
fn verification(
    plan: &Plan,
    bench: &Bench,
    fit: &FitResult,
    checked: &[verify::Checked],
    levels: &[(String, f64)],
) -> (Vec<VerifyRow>, Vec<SingleState>) {
    let table: BTreeMap<(u32, u32, u32), f64> = fit
        .rows
        .iter()
        .map(|r| ((r.center_mhz, r.bw_mhz, r.gain_index), r.delay_ps))
        .collect();
    let mut single = BTreeMap::new();
    let mut states = Vec::new();
    for (name, rx_dbm) in levels {
        let Some(Stage::Verify(v)) = plan.stages.iter().find(|s| s.name() == name) else {
            continue;
        };
        let ch = v.sweep.channel;
        let atten_db = bench.reference.tx_power_dbm - bench.path.fixed_loss_db - rx_dbm;
        let gain = verify::single_state_gain(checked, ch.center_mhz, ch.bw_mhz, atten_db);
        match gain.and_then(|g| table.get(&(ch.center_mhz, ch.bw_mhz, g)).map(|k| (g, *k))) {
            Some((gain_index, delay_ps)) => {
                tracing::info!(
                    "verify `{name}`: single-state calibration is gain state {gain_index} (at {rx_dbm} dBm), K = {delay_ps:.1} ps"
                );
                single.insert((ch.center_mhz, ch.bw_mhz), delay_ps);
                states.push(SingleState {
                    center_mhz: ch.center_mhz,
                    bw_mhz: ch.bw_mhz,
                    rx_dbm: *rx_dbm,
                    gain_index,
                    delay_ps,
                });
            }
            None => {
                tracing::warn!("verify `{name}`: no table row for the gain state at {rx_dbm} dBm")
            }
        }
    }
    let level = |a: f64| {
        (
            bench.dut_rx_dbm(a),
            bench.reference.tx_power_dbm - bench.dut_rx_dbm(a),
        )
    };
    let (rows, skipped) = verify::verify(checked, &table, &single, level);
    if skipped > 0 {
        tracing::warn!(
            "verification: {skipped} exchanges in gain states the table lacks were skipped"
        );
    }
    (rows, states)
}
