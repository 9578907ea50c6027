//! Declarative measurement stages: the attenuation sweep (fixed or mid-plateau points, fixed or
//! adaptive burst counts), the gain-state map, verification, and temperature soaks.
//!
//! A DUT that reports no gain index still gets a gain map: its states are inferred from K's
//! plateaus over the map stage's own exchanges, and mid-plateau points are placed on those.

use super::{RunError, Session};
use crate::data::{Exchange, STATUS_OK};
use crate::fit::gainmap::{self, GainMap, MapPoint, Pass};
use crate::fit::state_labels::StateCollector;
use crate::fit::stats::t975;
use crate::fit::switch_point::{Estimate, Method};
use crate::fit::{fit, Deembed, FitOptions};
use crate::recipe::{Adaptive, Points, Soak, Sweep, Verify};

/// Runs a sweep: at each point set the attenuation, settle, then run the bursts.
pub fn run_sweep(session: &mut Session, sweep: &Sweep) -> Result<(), RunError> {
    let points = resolve(session, sweep)?;
    session.begin_stage(&sweep.name, sweep.channel)?;
    for db in points {
        measure_or_skip(session, sweep, db)?;
    }
    Ok(())
}

/// The de-embedding the run's own estimates use: the bench's path and reference, and the K a
/// range-reporting DUT removed (as it reported it, else as the bench says).
pub(super) fn session_deembed(session: &Session) -> Deembed {
    let bench = session.bench();
    Deembed::new(&bench.path, bench.reference.delay_ps.clone())
        .with_measured(bench.measured_path.clone())
        .with_applied_k(session.report_watch.applied_k_ps().or(bench.applied_k_ps()))
}

/// True when no usable row reports a DUT gain index (the device reports none).
pub(super) fn gainless(rows: &[Exchange]) -> bool {
    !rows
        .iter()
        .any(|x| x.status == STATUS_OK && x.dut_gain.is_some() && x.is_timed())
}

/// Measures a point and returns its rows; when its instrument faults outlast the retries and
/// the recipe says `on_point_failure = "skip"`, reports it and goes on with no rows.
fn measure_or_skip(
    session: &mut Session,
    sweep: &Sweep,
    db: f64,
) -> Result<Vec<Exchange>, RunError> {
    match measure_point(session, sweep, db) {
        Err(RunError::Instrument(e)) if session.policy.skip_failed_points => {
            let what = format!("stage `{}` at {db} dB: {e}", sweep.name);
            tracing::warn!("skipped {what}");
            session.skipped_points.push(what);
            Ok(Vec::new())
        }
        other => other,
    }
}

/// The sweep's attenuations: fixed, or mid-plateau from an earlier gain map.
fn resolve(session: &Session, sweep: &Sweep) -> Result<Vec<f64>, RunError> {
    match &sweep.points {
        Points::Fixed(p) => Ok(p.clone()),
        Points::MidPlateau {
            map_stage,
            per_state,
            margin_db,
        } => {
            let step = session.bench().attenuator.step_db;
            let map = session.gain_maps.get(map_stage).map(|(_, m)| m);
            let points: Vec<f64> = map
                .into_iter()
                .flat_map(|m| &m.plateaus)
                .flat_map(|p| p.points_db(*per_state, *margin_db, step))
                .collect();
            if points.is_empty() {
                return Err(RunError::Refused {
                    message: format!(
                        "stage `{}`: the gain map `{map_stage}` found no plateau",
                        sweep.name
                    ),
                    hint: "check the map stage's range and frames; see gainmap.csv".into(),
                });
            }
            tracing::info!("stage `{}`: mid-plateau points {points:?} dB", sweep.name);
            Ok(points)
        }
    }
}

/// One point: set, settle, run the bursts (adaptive: until the target interval is reached).
fn measure_point(session: &mut Session, sweep: &Sweep, db: f64) -> Result<Vec<Exchange>, RunError> {
    session.set_atten(db)?;
    session.wait_ms(sweep.settle_ms)?;
    let mut rows: Vec<Exchange> = Vec::new();
    for _ in 0..sweep.bursts {
        rows.extend(session.burst(sweep.frames)?);
    }
    if let Some(adaptive) = sweep.adaptive {
        // Stopping the first time a running interval dips under the target favours moments when
        // the spread happens to look small, and such intervals cover less often than they claim.
        // So the interval is only looked at when a planned count is reached; the plan comes from
        // the spread seen so far, and a miss plans again from all the data.
        let mut bursts = sweep.bursts;
        let mut planned = plan(session, &rows, bursts, adaptive);
        let mut looks = 1;
        while bursts < adaptive.max_bursts {
            if bursts >= planned {
                if main_cell(session, &rows).is_some_and(|(ci, _)| ci <= adaptive.target_ci95_ps) {
                    break;
                }
                planned = plan(session, &rows, bursts, adaptive);
                looks += 1;
            }
            rows.extend(session.burst(sweep.frames)?);
            bursts += 1;
        }
        tracing::info!(
            "stage `{}` point {db} dB: {bursts} bursts after {looks} plans, {} exchanges",
            sweep.name,
            rows.len()
        );
    }
    Ok(rows)
}

/// Bursts needed for the target from the burst-mean spread seen so far (at least one more than
/// done, at most the stage's maximum).
fn plan(session: &Session, rows: &[Exchange], done: u32, adaptive: Adaptive) -> u32 {
    main_cell(session, rows).map_or(done + 1, |(_, burst_sd_ps)| {
        let n = (Z975 * burst_sd_ps / adaptive.target_ci95_ps)
            .powi(2)
            .ceil();
        (n.min(f64::from(adaptive.max_bursts)) as u32).max(done + 1)
    })
}

/// Two-sided 95 % normal quantile: plans forecast with it from the spread seen so far; the
/// Student-t interval itself is what is judged when a plan is reached.
pub(super) const Z975: f64 = 1.959_964;

/// The 95 % half-width of the point's main gain state and the spread of its burst means,
/// computed exactly as the final table computes them (same de-embedding, rejection and
/// burst-clustered interval). A DUT that reports no gain index is taken to hold one state at
/// the point: adaptive points sit mid-plateau, where it does.
fn main_cell(session: &Session, rows: &[Exchange]) -> Option<(f64, f64)> {
    let options = FitOptions {
        reject_mad: session.reject_mad,
    };
    let one_state: Vec<Exchange>;
    let rows = if gainless(rows) {
        one_state = rows
            .iter()
            .map(|x| Exchange {
                dut_gain: Some(0),
                ..x.clone()
            })
            .collect();
        &one_state
    } else {
        rows
    };
    let table = fit(session_deembed(session), options, rows);
    let cell = table.rows.iter().max_by_key(|r| r.n_used)?;
    let t = t975(cell.n_bursts.checked_sub(1)? as f64)?;
    Some((
        cell.ci95_ps,
        cell.ci95_ps / t * (cell.n_bursts as f64).sqrt(),
    ))
}

/// Runs a gain-map stage: the points with attenuation rising, then falling; the map is kept in
/// the session for later mid-plateau sweeps and for `gainmap.csv`.
pub fn run_gain_map(session: &mut Session, map: &Sweep) -> Result<(), RunError> {
    let Points::Fixed(points) = &map.points else {
        return Err(RunError::Refused {
            message: format!("gain-map stage `{}` needs fixed points", map.name),
            hint: "give atten_db as a range or list".into(),
        });
    };
    session.begin_stage(&map.name, map.channel)?;
    let first = session.points.len();
    let falling = points.iter().rev().copied();
    let mut rows = Vec::new();
    for db in points.iter().copied() {
        rows.extend(measure_or_skip(session, map, db)?);
    }
    // A skipped step records no point: count the rising ones that did.
    let rising = session.points.len() - first;
    for db in falling {
        rows.extend(measure_or_skip(session, map, db)?);
    }
    let result = map_of(session, first, rising, &rows);
    log_map(session, &map.name, &result);
    session
        .gain_maps
        .insert(map.name.clone(), (map.channel, result));
    Ok(())
}

/// The gain map of the points a stage visited from `session.points[first]` on, the first
/// `rising` of them with attenuation rising and the rest falling; `rows` are their exchanges.
/// From the reported gain steps, or inferred from K's plateaus when the DUT reports no gain
/// index.
pub(super) fn map_of(session: &Session, first: usize, rising: usize, rows: &[Exchange]) -> GainMap {
    let seen: Vec<MapPoint> = session.points[first..]
        .iter()
        .enumerate()
        .map(|(i, p)| MapPoint {
            pass: if i < rising {
                Pass::Rising
            } else {
                Pass::Falling
            },
            atten_db: p.atten_db,
            ok_by_gain: p.ok_by_gain.clone(),
            steps: p.steps.clone(),
            rssi: p.rssi,
        })
        .collect();
    if gainless(rows) && !rows.is_empty() {
        inferred_map(session, rows)
    } else {
        gainmap::analyse(&seen)
    }
}

/// Logs what a map found: inferred states, and each switch in words.
pub(super) fn log_map(session: &Session, stage: &str, map: &GainMap) {
    if map.inferred {
        tracing::info!(
            "gain map `{stage}`: the DUT reports no gain index; {} states inferred from K's plateaus",
            map.plateaus.len()
        );
    }
    for s in &map.switches {
        tracing::info!(
            "gain map `{stage}`: state {} → {}: {}",
            s.below,
            s.above,
            describe_switch(s, |a| session.bench().dut_rx_dbm(a))
        );
    }
}

/// The gain map inferred from the map stage's rows, for a DUT that reports no gain index.
fn inferred_map(session: &Session, rows: &[Exchange]) -> GainMap {
    let mut collector = StateCollector::new(session_deembed(session), &[]);
    for x in rows {
        collector.push(x);
    }
    collector
        .finish()
        .and_then(|labels| labels.channels.into_values().next())
        .map(|states| states.gain_map())
        .unwrap_or_default()
}

/// A switch's fitted points and hysteresis in words; a hysteresis whose interval reaches zero is
/// said to be not resolved, never given as a number.
fn describe_switch(s: &gainmap::Switch, rx_dbm: impl Fn(f64) -> f64) -> String {
    let Some(fit) = &s.fit else {
        let seen = |e: Option<f64>, way: &str| {
            e.map(|a| format!("{a:.2} dB attenuation {way} ({:.1} dBm)", rx_dbm(a)))
        };
        let crossings: Vec<String> = [seen(s.rising_db, "rising"), seen(s.falling_db, "falling")]
            .into_iter()
            .flatten()
            .collect();
        return if crossings.is_empty() {
            "no step between them was seen, so no switch point was fitted".into()
        } else {
            format!(
                "K changes between the points around {} (no step was reported, so no switch \
                 point was fitted)",
                crossings.join(" and ")
            )
        };
    };
    let point = |e: Option<Estimate>, way: &str| {
        e.map_or(format!("no switch seen with attenuation {way}"), |e| {
            format!(
                "{:.2} ± {:.2} dB attenuation {way} ({:.1} dBm)",
                e.value_db,
                e.ci95_db,
                rx_dbm(e.value_db)
            )
        })
    };
    let hysteresis = match (fit.resolved_hysteresis_db(), fit.hysteresis_db) {
        (Some(h), _) => format!("hysteresis {:.2} ± {:.2} dB", h.value_db, h.ci95_db),
        (None, Some(h)) => format!(
            "hysteresis not resolved (95 % interval {:.2} to {:.2} dB reaches zero)",
            h.low_db(),
            h.high_db()
        ),
        (None, None) => "hysteresis unknown (one direction never switched)".into(),
    };
    let how = match fit.method {
        Method::Probit => "95 % intervals",
        Method::Bracket => "no level noise seen: brackets between sweep points",
    };
    format!(
        "AGC switches at {}, back at {}; {hysteresis} ({how})",
        point(fit.up_db, "rising"),
        point(fit.down_db, "falling")
    )
}

/// Runs a verification stage: fresh exchanges at each level, kept out of the table's fit.
pub fn run_verify(session: &mut Session, verify: &Verify) -> Result<(), RunError> {
    session
        .verify_stages
        .push((verify.sweep.name.clone(), verify.single_state_rx_dbm));
    run_sweep(session, &verify.sweep)
}

/// Runs a soak: sets the chamber, then reads the DUT's temperature (the chamber's product
/// sensor where the DUT reports none, its air where it has no such sensor) every `poll_s` until
/// it has stayed within `within_c` of the setpoint for `stable_s`, or stops the run at
/// `timeout_s`.
pub fn run_soak(session: &mut Session, soak: &Soak) -> Result<(), RunError> {
    let Some(chamber) = session.chamber().cloned() else {
        return Err(RunError::Refused {
            message: format!("soak `{}`: the bench has no chamber", soak.name),
            hint: "add a chamber role to the bench".into(),
        });
    };
    chamber.set_setpoint_c(soak.setpoint_c)?;
    let start_s = session.clock().now_s();
    let mut settled_since: Option<f64> = None;
    loop {
        session.wait_ms(soak.poll_s * 1000.0)?;
        let now_s = session.clock().now_s();
        let temp_c = match session.dut_temp_c()? {
            Some(t) => t,
            None => match chamber.product_c()? {
                Some(t) => t,
                None => chamber.air_c()?,
            },
        };
        if (temp_c - soak.setpoint_c).abs() <= soak.within_c {
            let since = *settled_since.get_or_insert(now_s);
            if now_s - since >= soak.stable_s {
                tracing::info!(
                    "soak `{}`: settled at {temp_c:.2} °C after {:.0} s",
                    soak.name,
                    now_s - start_s
                );
                return Ok(());
            }
        } else {
            settled_since = None;
        }
        if now_s - start_s > soak.timeout_s {
            return Err(RunError::Refused {
                message: format!(
                    "soak `{}`: the DUT reached only {temp_c:.2} °C of {} °C in {} s",
                    soak.name, soak.setpoint_c, soak.timeout_s
                ),
                hint: "raise timeout_s or within_c, or check the chamber".into(),
            });
        }
    }
}
