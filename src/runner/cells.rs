//! The `cells` stage: points that follow the unit under test. A recipe's fixed points come from
//! a golden sample; a unit whose AGC switches a few dB elsewhere can have one sitting on a
//! switch point, where its exchanges fall into two states and one of them gets too few. So
//! this stage maps each unit first and measures where that unit's states hold:
//!
//! 1. A short coarse map over the recipe's `map_db`, attenuation rising then falling (to see
//!    the hysteresis), `map_bursts` bursts per step; the plateaus come from the gain index the
//!    DUT reports, or from K's plateaus when it reports none.
//! 2. One point per gain state in the middle of its plateau, `margin_db` inside the switch
//!    points seen both ways.
//! 3. At each point a pilot of `bursts` bursts. When more than [`MIXED_SHARE`] of its exchanges
//!    fall into another state, the point sits too near a switch: it moves `margin_db` away from
//!    that state (at most [`MAX_MOVES`] times) and pilots again. What it measured stays in the
//!    record and in the cells.
//! 4. Then the adaptive rule of the sweep stage, judging every cell the point's exchanges fell
//!    into: the pilot's spread plans how many bursts the target needs, each cell's interval is
//!    looked at only when the plan is reached, and a miss plans again from all the data. Looking
//!    after every burst would stop on lucky streaks and the intervals would cover less than
//!    95 %. A cell whose own point is still to come is judged there, with this point's data.
//!
//! Cells are judged exactly as the table computes them (same de-embedding, rejection and
//! burst-clustered Student-t interval) over every exchange of the stage, map included, since
//! the table uses them all. A DUT that reports no gain index is judged point by point, each
//! point's exchanges taken as its one state (it sits mid-plateau, where it holds one).

use super::sweep::{gainless, log_map, map_of, session_deembed, Z975};
use super::{RunError, Session};
use crate::data::{Exchange, STATUS_OK};
use crate::fit::cal_row::CalRow;
use crate::fit::gainmap::GainMap;
use crate::fit::stats::t975;
use crate::fit::{fit, FitOptions};
use crate::recipe::Cells;
use std::collections::{BTreeMap, BTreeSet};

/// Share of a pilot's usable exchanges in other gain states beyond which a point counts as
/// sitting on a switch and moves. Level noise sends a stray exchange across a switch now and
/// then even from mid-plateau; one in twenty is a point in the switch's reach.
pub const MIXED_SHARE: f64 = 0.05;

/// Moves at most per point: a plateau too narrow to leave the switches after two is measured
/// where the point ends, every cell it feeds judged.
pub const MAX_MOVES: u32 = 2;

/// One point of the stage, placed for a gain state.
#[derive(Debug)]
struct Spot {
    /// The gain state it is placed for.
    state: u32,
    /// Where it is now.
    atten_db: f64,
    /// Moves made.
    moves: u32,
    /// Bursts taken at the point, wherever it stood.
    bursts: u32,
    /// Bursts taken where it stands now.
    bursts_here: u32,
    /// Usable exchanges per gain state where it stands now: as reported, or all in its own
    /// state for a DUT that reports none.
    here_by_gain: BTreeMap<u32, u64>,
    /// Every gain state its exchanges fell into, wherever it stood.
    seen: BTreeSet<u32>,
    /// Its exchanges, wherever it stood (for a DUT without a gain index).
    rows: Vec<Exchange>,
    /// The cells judged when it ended.
    judged: BTreeSet<u32>,
    /// Measured to the end (target reached, or its bursts spent).
    done: bool,
    /// False for a DUT that reports no gain index.
    by_gain: bool,
}

impl Spot {
    fn new(state: u32, atten_db: f64, by_gain: bool) -> Spot {
        Spot {
            state,
            atten_db,
            moves: 0,
            bursts: 0,
            bursts_here: 0,
            here_by_gain: BTreeMap::new(),
            seen: BTreeSet::new(),
            rows: Vec::new(),
            judged: BTreeSet::new(),
            done: false,
            by_gain,
        }
    }

    fn take(&mut self, burst: &[Exchange]) {
        self.bursts += 1;
        self.bursts_here += 1;
        for x in burst.iter().filter(|x| usable(x)) {
            let gain = if self.by_gain {
                x.dut_gain
            } else {
                Some(self.state)
            };
            if let Some(g) = gain {
                *self.here_by_gain.entry(g).or_insert(0) += 1;
                self.seen.insert(g);
            }
        }
        self.rows.extend_from_slice(burst);
    }
}

fn usable(x: &Exchange) -> bool {
    x.status == STATUS_OK && x.is_timed()
}

/// Runs a `cells` stage.
pub fn run_cells(session: &mut Session, stage: &Cells) -> Result<(), RunError> {
    session.begin_stage(&stage.name, stage.channel)?;
    let first = session.points.len();
    let mut rows: Vec<Exchange> = Vec::new();
    let visit = |session: &mut Session, db: f64| {
        skip_failed(session, stage, db, |s| {
            s.set_atten(db)?;
            s.wait_ms(stage.settle_ms)?;
            let mut got = Vec::new();
            for _ in 0..stage.map_bursts {
                got.extend(s.burst(stage.frames)?);
            }
            Ok(got)
        })
        .map(Option::unwrap_or_default)
    };
    for &db in &stage.map_db {
        rows.extend(visit(session, db)?);
    }
    // A skipped step records no point: count the rising ones that did.
    let rising = session.points.len() - first;
    for &db in stage.map_db.iter().rev() {
        rows.extend(visit(session, db)?);
    }
    let map = map_of(session, first, rising, &rows);
    log_map(session, &stage.name, &map);
    let step_db = session.bench().attenuator.step_db;
    let placed = place(&map, stage.margin_db, step_db);
    session
        .gain_maps
        .insert(stage.name.clone(), (stage.channel, map));
    if placed.is_empty() {
        return Err(RunError::Refused {
            message: format!(
                "stage `{}`: its map over {}..{} dB found no plateau",
                stage.name,
                stage.map_db[0],
                stage.map_db[stage.map_db.len() - 1]
            ),
            hint: "widen map_db to cover the unit's switch points; see gainmap.csv".into(),
        });
    }
    tracing::info!(
        "stage `{}`: points {:?} dB for gain states {:?}",
        stage.name,
        placed.iter().map(|p| p.1).collect::<Vec<_>>(),
        placed.iter().map(|p| p.0).collect::<Vec<_>>()
    );
    let by_gain = !gainless(&rows);
    let mut spots: Vec<Spot> = placed
        .iter()
        .map(|&(g, db)| Spot::new(g, db, by_gain))
        .collect();
    for i in 0..spots.len() {
        let db = spots[i].atten_db;
        let measured = skip_failed(session, stage, db, |s| {
            measure(s, stage, &mut spots, i, &mut rows, by_gain)
        })?;
        if measured.is_none() {
            spots[i].done = true;
        }
    }
    if by_gain {
        revisit(session, stage, &mut spots, &mut rows, first)?;
    }
    Ok(())
}

/// Runs `visit`; when its instrument faults outlast the retries and the recipe says
/// `on_point_failure = "skip"`, reports the point and returns `None`.
fn skip_failed<T>(
    session: &mut Session,
    stage: &Cells,
    db: f64,
    visit: impl FnOnce(&mut Session) -> Result<T, RunError>,
) -> Result<Option<T>, RunError> {
    match visit(session) {
        Ok(v) => Ok(Some(v)),
        Err(RunError::Instrument(e)) if session.policy.skip_failed_points => {
            let what = format!("stage `{}` at {db} dB: {e}", stage.name);
            tracing::warn!("skipped {what}");
            session.skipped_points.push(what);
            Ok(None)
        }
        Err(e) => Err(e),
    }
}

/// One point per plateau of `map`: its middle, at least `margin_db` inside the switch points
/// seen both ways (the plateau's middle when narrower), snapped to the attenuator's step.
/// Returns (gain state, attenuation) in gain order.
fn place(map: &GainMap, margin_db: f64, step_db: f64) -> Vec<(u32, f64)> {
    map.plateaus
        .iter()
        .filter_map(|p| {
            p.points_db(1, margin_db, step_db)
                .first()
                .map(|db| (p.gain_index, *db))
        })
        .collect()
}

/// Measures spot `i`: pilot (moving it off a switch when its exchanges fall into two states),
/// then bursts until every cell it feeds is judged within the target, or its bursts are spent.
fn measure(
    session: &mut Session,
    stage: &Cells,
    spots: &mut [Spot],
    i: usize,
    rows: &mut Vec<Exchange>,
    by_gain: bool,
) -> Result<(), RunError> {
    let (lo_db, hi_db) = (stage.map_db[0], stage.map_db[stage.map_db.len() - 1]);
    let step_db = session.bench().attenuator.step_db;
    let max_bursts = stage.adaptive.max_bursts;
    loop {
        let spot = &mut spots[i];
        session.set_atten(spot.atten_db)?;
        session.wait_ms(stage.settle_ms)?;
        spot.bursts_here = 0;
        spot.here_by_gain.clear();
        while spot.bursts_here < stage.bursts && spot.bursts < max_bursts {
            let got = session.burst(stage.frames)?;
            spot.take(&got);
            rows.extend(got);
        }
        if !by_gain || spot.moves >= MAX_MOVES || spot.bursts >= max_bursts {
            break;
        }
        let Some(up) = away(&spot.here_by_gain, spot.state) else {
            break;
        };
        let distance = stage.margin_db.max(step_db);
        let to = snap(
            spot.atten_db + if up { distance } else { -distance },
            step_db,
        )
        .clamp(lo_db, hi_db);
        if (to - spot.atten_db).abs() < step_db / 2.0 || session.bench().refuse_atten(to).is_some()
        {
            break;
        }
        tracing::info!(
            "stage `{}`: the point for gain state {} at {} dB sees other states {:?}; moving to {to} dB",
            stage.name,
            spot.state,
            spot.atten_db,
            spot.here_by_gain
        );
        spot.atten_db = to;
        spot.moves += 1;
    }
    adapt(session, stage, spots, i, rows, by_gain)?;
    spots[i].done = true;
    Ok(())
}

/// `db` on the attenuator's grid.
fn snap(db: f64, step_db: f64) -> f64 {
    (db / step_db).round() * step_db
}

/// Whether a point placed for `state` whose usable exchanges fell into states `by_gain` must
/// move, and which way: `Some(true)` toward higher attenuation (away from the stronger-signal
/// states, which hold below it), `Some(false)` toward lower; `None` when other states hold at
/// most [`MIXED_SHARE`] of them.
fn away(by_gain: &BTreeMap<u32, u64>, state: u32) -> Option<bool> {
    let total: u64 = by_gain.values().sum();
    let below: u64 = by_gain.range(..state).map(|(_, n)| n).sum();
    // `state` is DUT-reported: the top index has nothing above it, and must not overflow.
    let above: u64 = state
        .checked_add(1)
        .map_or(0, |next| by_gain.range(next..).map(|(_, n)| n).sum());
    if total == 0 || ((below + above) as f64) <= MIXED_SHARE * total as f64 {
        return None;
    }
    Some(below >= above)
}

/// The adaptive rule at spot `i`, after its pilot.
fn adapt(
    session: &mut Session,
    stage: &Cells,
    spots: &mut [Spot],
    i: usize,
    rows: &mut Vec<Exchange>,
    by_gain: bool,
) -> Result<(), RunError> {
    let target = stage.adaptive.target_ci95_ps;
    let max_bursts = stage.adaptive.max_bursts;
    let mut looks = 1;
    let mut planned = {
        let judged = judged_cells(spots, i);
        let cells = fit_cells(session, rows, &spots[i], by_gain);
        plan(&spots[i], &judged, &cells, target, max_bursts)
    };
    loop {
        let spot = &spots[i];
        if spot.bursts >= max_bursts {
            break;
        }
        if spot.bursts >= planned {
            let judged = judged_cells(spots, i);
            let cells = fit_cells(session, rows, spot, by_gain);
            if judged
                .iter()
                .all(|g| cells.get(g).is_some_and(|c| c.ci95_ps <= target))
            {
                break;
            }
            planned = plan(spot, &judged, &cells, target, max_bursts);
            looks += 1;
        }
        let got = session.burst(stage.frames)?;
        spots[i].take(&got);
        rows.extend(got);
    }
    spots[i].judged = judged_cells(spots, i);
    let spot = &spots[i];
    tracing::info!(
        "stage `{}` point for gain state {} at {} dB: {} bursts after {looks} plans, cells {:?}",
        stage.name,
        spot.state,
        spot.atten_db,
        spot.bursts,
        spot.seen
    );
    Ok(())
}

/// The cells judged at spot `i`: every state its exchanges fall into where it stands, but not
/// one whose own point is still to come (judged there, this point's exchanges included). A
/// state it saw only before it moved is judged where it is fed.
fn judged_cells(spots: &[Spot], i: usize) -> BTreeSet<u32> {
    let spot = &spots[i];
    let later = |g: u32| {
        spots
            .iter()
            .enumerate()
            .any(|(j, s)| j != i && s.state == g && !s.done)
    };
    spot.here_by_gain
        .keys()
        .copied()
        .filter(|g| *g == spot.state || !later(*g))
        .collect()
}

/// The stage's cells as the table computes them, by gain state: every exchange of the stage
/// grouped by the state it reports; for a DUT without a gain index, the spot's own exchanges
/// as its one state.
fn fit_cells(
    session: &Session,
    rows: &[Exchange],
    spot: &Spot,
    by_gain: bool,
) -> BTreeMap<u32, CalRow> {
    let options = FitOptions {
        reject_mad: session.reject_mad,
    };
    let table = if by_gain {
        fit(session_deembed(session), options, rows)
    } else {
        let one_state: Vec<Exchange> = spot
            .rows
            .iter()
            .map(|x| Exchange {
                dut_gain: Some(spot.state),
                ..x.clone()
            })
            .collect();
        fit(session_deembed(session), options, &one_state)
    };
    table.rows.into_iter().map(|r| (r.gain_index, r)).collect()
}

/// The burst count at which spot `spot` next looks: for each judged cell, the usable
/// exchanges its spread so far says the target needs, less those it has, at the rate this
/// point feeds it per burst; the largest over the cells, at least one more burst, at most
/// `max_bursts`. A cell this point does not feed cannot be planned for here.
fn plan(
    spot: &Spot,
    judged: &BTreeSet<u32>,
    cells: &BTreeMap<u32, CalRow>,
    target_ci95_ps: f64,
    max_bursts: u32,
) -> u32 {
    let more = judged
        .iter()
        .filter_map(|g| {
            let per_burst = spot.here_by_gain.get(g).copied().unwrap_or(0) as f64
                / f64::from(spot.bursts_here.max(1));
            let cell = cells.get(g);
            let needed = match cell {
                Some(c) => {
                    let se_ps = c.ci95_ps / t975(c.stat_dof)?;
                    let have = c.n_used as f64;
                    have * (Z975 * se_ps / target_ci95_ps).powi(2) - have
                }
                // Fewer than two exchanges kept: a pilot's worth more.
                None => f64::from(spot.bursts_here.max(1)) * per_burst,
            };
            (per_burst > 0.0).then(|| (needed.max(0.0) / per_burst).ceil())
        })
        .fold(0.0, f64::max);
    let planned = f64::from(spot.bursts) + more.max(1.0);
    planned.min(f64::from(max_bursts)) as u32
}

/// After every point: a cell still wider than the target that no point judged (seen only in
/// the map, in a state the map found no plateau for, or only where a point stood before it
/// moved) gets a point of its own where it held the largest share of a visit, if it held the
/// majority there.
fn revisit(
    session: &mut Session,
    stage: &Cells,
    spots: &mut Vec<Spot>,
    rows: &mut Vec<Exchange>,
    first: usize,
) -> Result<(), RunError> {
    let options = FitOptions {
        reject_mad: session.reject_mad,
    };
    let table = fit(session_deembed(session), options, rows.iter());
    let target = stage.adaptive.target_ci95_ps;
    let wide: Vec<u32> = table
        .rows
        .iter()
        .filter(|r| r.ci95_ps > target)
        .map(|r| r.gain_index)
        .filter(|g| !spots.iter().any(|s| s.judged.contains(g)))
        .collect();
    for g in wide {
        let best = session.points[first..]
            .iter()
            .filter(|p| p.stage == stage.name)
            .filter_map(|p| {
                let total: u64 = p.ok_by_gain.values().sum();
                let n = p.ok_by_gain.get(&g).copied().unwrap_or(0);
                (total > 0 && 2 * n > total).then_some((n as f64 / total as f64, p.atten_db))
            })
            .max_by(|a, b| a.0.total_cmp(&b.0))
            .map(|(_, db)| db);
        let Some(db) = best else {
            tracing::warn!(
                "stage `{}`: gain state {g} is still wider than {target} ps and held the \
                 majority at no point measured; its cell is left as it is",
                stage.name
            );
            continue;
        };
        spots.push(Spot::new(g, db, true));
        let i = spots.len() - 1;
        let measured = skip_failed(session, stage, db, |s| {
            measure(s, stage, spots, i, rows, true)
        })?;
        if measured.is_none() {
            spots[i].done = true;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::gainmap::Plateau;

    fn counts(pairs: &[(u32, u64)]) -> BTreeMap<u32, u64> {
        pairs.iter().copied().collect()
    }

    #[test]
    fn a_point_moves_away_from_the_state_that_intrudes() {
        // State 1's point: state 0 holds at lower attenuation, so its intrusion means "move up".
        assert_eq!(away(&counts(&[(0, 30), (1, 130)]), 1), Some(true));
        assert_eq!(away(&counts(&[(1, 130), (2, 30)]), 1), Some(false));
        // One stray in 160 (0.6 %) is level noise, not a switch in reach.
        assert_eq!(away(&counts(&[(0, 1), (1, 159)]), 1), None);
        // 5 % exactly is still tolerated; more is not.
        assert_eq!(away(&counts(&[(1, 95), (2, 5)]), 1), None);
        assert_eq!(away(&counts(&[(1, 94), (2, 6)]), 1), Some(false));
        // A point that saw none of its state at all moves too.
        assert_eq!(away(&counts(&[(2, 160)]), 1), Some(false));
        assert_eq!(away(&BTreeMap::new(), 1), None);
        // A DUT may report any u32: at the top index nothing is above, and nothing overflows.
        assert_eq!(
            away(&counts(&[(0, 30), (u32::MAX, 130)]), u32::MAX),
            Some(true)
        );
        assert_eq!(away(&counts(&[(u32::MAX, 160)]), u32::MAX), None);
    }

    #[test]
    fn points_sit_mid_plateau_inside_the_switches() {
        let map = GainMap {
            plateaus: vec![
                Plateau {
                    gain_index: 0,
                    atten_min_db: 28.0,
                    atten_max_db: 38.5,
                },
                Plateau {
                    gain_index: 1,
                    atten_min_db: 41.5,
                    atten_max_db: 46.0,
                },
            ],
            switches: Vec::new(),
            inferred: false,
        };
        // Margins of 2 dB leave 30..36.5 and 43.5..44 dB; their middles, 33.25 and 43.75 dB,
        // on the 0.5 dB grid (halves round away from zero).
        assert_eq!(place(&map, 2.0, 0.5), vec![(0, 33.5), (1, 44.0)]);
    }

    fn spot(state: u32, bursts: u32, here: &[(u32, u64)]) -> Spot {
        let mut s = Spot::new(state, 40.0, true);
        s.bursts = bursts;
        s.bursts_here = bursts;
        s.here_by_gain = counts(here);
        s.seen = s.here_by_gain.keys().copied().collect();
        s
    }

    fn cell(gain_index: u32, ci95_ps: f64, n_used: u64, n_bursts: u64) -> CalRow {
        CalRow {
            center_mhz: 5180,
            bw_mhz: 80,
            gain_index,
            delay_ps: 2500.0,
            ci95_ps,
            stat_dof: (n_bursts - 1) as f64,
            n_used,
            n_rejected: 0,
            n_bursts,
            sd_ps: 400.0,
            source: crate::fit::cal_row::RowSource::Measured,
        }
    }

    #[test]
    fn one_cell_plans_as_the_sweep_plans() {
        // Ten bursts of 16 exchanges, all in state 1, half-width 80 ps: the sweep's rule plans
        // (1.96·σ_burst/50)² bursts with σ_burst = ci/t(9)·√10 (t(9) = 2.262, NIST/SEMATECH
        // t table); here the same count in exchanges.
        let s = spot(1, 10, &[(1, 160)]);
        let cells = BTreeMap::from([(1, cell(1, 80.0, 160, 10))]);
        let t9 = t975(9.0).expect("t");
        let sweep_plan = (Z975 * 80.0 / t9 * 10f64.sqrt() / 50.0).powi(2).ceil();
        let planned = plan(&s, &BTreeSet::from([1]), &cells, 50.0, 1000);
        assert!(
            (f64::from(planned) - sweep_plan).abs() <= 1.0,
            "{planned} vs {sweep_plan}"
        );
    }

    #[test]
    fn a_cell_fed_by_a_fraction_of_the_exchanges_plans_more_bursts() {
        // The same spread, but state 2 gets a quarter of the exchanges: four times the bursts
        // past the pilot.
        let s = spot(1, 10, &[(1, 120), (2, 40)]);
        let cells = BTreeMap::from([(1, cell(1, 20.0, 1200, 100)), (2, cell(2, 80.0, 40, 10))]);
        let only_1 = plan(&s, &BTreeSet::from([1]), &cells, 50.0, 1000);
        assert_eq!(only_1, 11, "a cell inside the target plans one more burst");
        let both = plan(&s, &BTreeSet::from([1, 2]), &cells, 50.0, 1000);
        let se = 80.0 / t975(9.0).expect("t");
        let more = (40.0 * (Z975 * se / 50.0).powi(2) - 40.0) / 4.0;
        assert_eq!(f64::from(both), 10.0 + more.ceil());
        assert_eq!(plan(&s, &BTreeSet::from([1, 2]), &cells, 50.0, 12), 12);
    }

    #[test]
    fn a_cell_whose_own_point_is_still_to_come_is_judged_there() {
        let mut spots = vec![spot(0, 10, &[(0, 150), (1, 10)]), spot(1, 0, &[])];
        assert_eq!(judged_cells(&spots, 0), BTreeSet::from([0]));
        spots[1].done = true;
        assert_eq!(judged_cells(&spots, 0), BTreeSet::from([0, 1]));
        // A state with no point of its own is judged wherever it shows.
        let spots = vec![spot(0, 10, &[(0, 150), (3, 10)])];
        assert_eq!(judged_cells(&spots, 0), BTreeSet::from([0, 3]));
        // One seen only before the point moved is judged where it is fed.
        let mut moved = spot(1, 20, &[(1, 160)]);
        moved.seen.insert(0);
        assert_eq!(judged_cells(&[moved], 0), BTreeSet::from([1]));
    }
}
