//! AGC gain states inferred from K alone, for devices that report no gain index: plateaus of K
//! against receive level, found by a penalised change-point fit (design §6).
//!
//! The unit of evidence is a *visit*: one attenuation point of one stage, with its bursts. Raw
//! rows are a poor unit: a burst shares its timing offset, so rows are not independent, and a
//! device may report one averaged row per burst. Each visit is therefore summarised robustly —
//! each burst by the median K of its rows, the visit by the frame-weighted mean of its burst
//! values within 3.5 robust standard deviations of their median — with a standard error from
//! the spread *between* its bursts, a burst of `f` frames counting as `f` frames' worth (so
//! stages of different burst sizes pool). Few bursts make that spread a poor estimate, so it is
//! shrunk toward the pooled spread of the neighbouring visits (a prior worth [`PRIOR_DF`]
//! degrees of freedom); a visit of one burst takes its neighbours' spread outright. The spreads
//! of each group of visits (a stage: one burst size, one way of taking them) are then scaled by
//! an over-dispersion factor measured from the data themselves: successive differences of the
//! group's visits in level order, standardised, whose median would be that of χ²₁ if the
//! errors were right (a few differences across real switches barely move a median). Per group,
//! because the frames of a burst do not scale its noise exactly: a device trimming eight frames
//! keeps more of their tails than one trimming sixteen.
//!
//! Visits are ordered by receive level (attenuation), taking the hysteresis into account: a
//! sticky AGC holds the stronger-signal state when the level falls into its band and the
//! weaker-signal state when it rises into it, so a visit made with attenuation rising sorts
//! half a band lower, and one made with it falling half a band higher. The band is unknown, so
//! widths from 0 to 12 dB are tried and the one the segmentation fits best is kept (a band
//! other than none is charged one change's penalty: it is one more parameter).
//!
//! The ordered summaries are segmented by PELT (Killick, Fearnhead & Eckley 2012) with a
//! weighted Gaussian cost `Σ (y − ȳ)²/se²` — a visit counts by how well it is known — and a
//! BIC penalty of `2·ln n` per change (a new mean and a change location). A change the penalty
//! admits must then also be a practical one: adjacent segments whose means differ by less than
//! [`MIN_JUMP_Z`] standard errors, or by less than [`MIN_JUMP_PS`], or not by Welch's t on the
//! scatter of their visits' values (level [`WELCH_ALPHA`]; a segment of one visit offers its own
//! bursts' scatter), are merged, the least distinct pair first, until every change passes all
//! three. The last test leans on no modelled standard error, so noise growing faster than the
//! shrunk errors follow (toward sensitivity) cannot make a state.
//!
//! States are numbered by level as an AGC numbers them: 0 for the segment at the lowest
//! attenuation (strongest signal). Around each switch, every visit whose state would change if
//! the change were placed at another location that fits nearly as well ([`LOCATION_DELTA`]) is
//! marked as near the switch: with level noise the AGC toggles near its threshold, so bursts
//! there mix states and the data place the change only roughly. So is the last visit of a
//! state, or the first of the next, when far more of its bursts are nearer the other state's K
//! than its state's visits have ([`ACROSS_MARGIN`]): the switch came during the visit. A visit
//! that leans from its state's mean toward a neighbouring state's by more than [`MIXED_Z`]
//! standard errors is taken to mix them too. Such rows may hold either state, so the table
//! leaves them out rather than guess. The unsure span of a switch, for rows judged by level
//! alone, runs from the last visit of one state to the first of the next (or across the
//! hysteresis band they overlap in) and over every visit marked near it.
//!
//! Limits, by construction: states whose K differ by less than the noise allows (or by less
//! than [`MIN_JUMP_PS`]) are one state; a state seen at one visit is found only when that visit
//! has bursts enough to show its own spread, and one seen at a few coarse visits may not be;
//! and a switch is placed only to within the points around it and the hysteresis band.

use crate::fit::gainmap::{GainMap, Plateau, Switch};
use crate::fit::stats::{mad_scaled, median};
use statrs::distribution::{ContinuousCDF, StudentsT};
use std::collections::BTreeMap;

/// Degrees of freedom the neighbours' spread is worth when a visit's own is shrunk toward it.
pub const PRIOR_DF: f64 = 4.0;

/// Degrees of freedom the neighbouring visits pooled into a visit's prior must reach.
const PRIOR_WINDOW_DF: f64 = 12.0;

/// A change of state must move K by at least this many standard errors of the difference
/// between the two segments' means.
pub const MIN_JUMP_Z: f64 = 5.0;

/// ... and by at least this much: smaller steps are of no practical use to a table whose cells
/// are known to some picoseconds, and would come from drift as easily as from the AGC.
pub const MIN_JUMP_PS: f64 = 20.0;

/// Median of the χ² distribution with one degree of freedom (0.454 936 4; Abramowitz & Stegun
/// 26.4, from memory, checked by the test below against the normal quantile 0.674 49²).
const CHI2_1_MEDIAN: f64 = 0.454_936_4;

/// Burst values further than this many robust standard deviations from a visit's median are
/// left out of its mean (late detections, a burst that straddled a switch).
const TRIM_Z: f64 = 3.5;

/// How the sweep arrived at a visit's attenuation.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Approach {
    /// From a lower attenuation (stronger signal): attenuation rising.
    Rising,
    /// First visit of its stage, or the same attenuation as the visit before.
    Unknown,
    /// From a higher attenuation: attenuation falling.
    Falling,
}

/// One attenuation point of one stage: what the inference sees of it.
#[derive(Debug, Clone, PartialEq)]
pub struct Visit {
    /// Attenuator setting.
    pub atten_db: f64,
    /// How the sweep came to it.
    pub approach: Approach,
    /// Its group (the stage it belongs to): visits of one group are taken alike, and their
    /// standard errors share one over-dispersion factor.
    pub group: u32,
    /// Its bursts.
    pub bursts: Vec<Burst>,
}

/// One burst of a visit.
#[derive(Debug, Clone, PartialEq)]
pub struct Burst {
    /// The de-embedded K of its usable rows (one value for a burst-averaged row).
    pub k_ps: Vec<f64>,
    /// The frames behind them: a burst-averaged row's `frames`, or the rows of a burst
    /// reported frame by frame. A burst's value is known as well as its frames make it.
    pub frames: u32,
}

/// A visit as the segmentation uses it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct VisitSummary {
    /// Robust location of the visit's K.
    pub k_ps: f64,
    /// Its standard error, shrunk and scaled as the module explains.
    pub se_ps: f64,
    /// Degrees of freedom of its own bursts' spread (bursts kept − 1).
    pub own_df: f64,
}

/// One inferred state.
#[derive(Debug, Clone, PartialEq)]
pub struct InferredState {
    /// Weighted mean K of its visits (for ordering and display; the table fits its rows).
    pub k_ps: f64,
    /// Lowest attenuation of a visit in it.
    pub atten_min_db: f64,
    /// Highest attenuation of a visit in it.
    pub atten_max_db: f64,
}

/// Where the state changes between two neighbouring inferred states.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct InferredSwitch {
    /// The stronger-signal state; the other is `below + 1`.
    pub below: u32,
    /// The switch level: midway between the highest attenuation seen in `below` and the
    /// lowest seen in `below + 1` (these overlap when the hysteresis band was visited).
    pub atten_db: f64,
    /// Lower end of the span where the state is unsure by level: between the two states'
    /// visits (or their overlap), and over the visits whose state depends on where the change
    /// is placed.
    pub unsure_from_db: f64,
    /// Upper end of that span.
    pub unsure_to_db: f64,
    /// Midway between the last visit in `below` and the first in `below + 1`, counting only
    /// visits made with attenuation rising.
    pub rising_db: Option<f64>,
    /// The same with attenuation falling.
    pub falling_db: Option<f64>,
}

/// What a visit is, once the states are inferred.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum VisitState {
    /// Clearly in one state.
    In(u32),
    /// Next to or inside the switch between `below` and `below + 1`: its rows may hold either.
    NearSwitch {
        /// The stronger-signal state of the pair.
        below: u32,
    },
    /// No usable burst: nothing to say.
    Empty,
}

/// The inferred states of one channel.
#[derive(Debug, Clone, PartialEq)]
pub struct InferredStates {
    /// States in index order (0 = strongest signal).
    pub states: Vec<InferredState>,
    /// Switches between neighbouring states, in index order.
    pub switches: Vec<InferredSwitch>,
    /// Per visit, in the order given.
    pub visits: Vec<VisitState>,
    /// Per group, the over-dispersion factor applied to its standard errors' squares.
    pub dispersion: BTreeMap<u32, f64>,
}

impl InferredStates {
    /// The state at `atten_db` judged by level alone: `Err(below)` inside the unsure span of
    /// the switch between `below` and `below + 1`.
    pub fn state_at(&self, atten_db: f64) -> Result<u32, u32> {
        for s in &self.switches {
            if atten_db < s.unsure_from_db {
                return Ok(s.below);
            }
            if atten_db <= s.unsure_to_db {
                return Err(s.below);
            }
        }
        Ok(self.switches.last().map_or(0, |s| s.below + 1))
    }

    /// The states as a gain map: each plateau spans the attenuations where its state held
    /// whichever way the sweep came (between the unsure spans), each switch its crossings per
    /// direction; there is nothing to fit switch points from.
    pub fn gain_map(&self) -> GainMap {
        let plateaus = self
            .states
            .iter()
            .enumerate()
            .filter_map(|(s, st)| {
                let lo = s
                    .checked_sub(1)
                    .and_then(|p| self.switches.get(p))
                    .map_or(st.atten_min_db, |sw| sw.unsure_to_db);
                let hi = self
                    .switches
                    .get(s)
                    .map_or(st.atten_max_db, |sw| sw.unsure_from_db);
                (lo <= hi).then_some(Plateau {
                    gain_index: s as u32,
                    atten_min_db: lo,
                    atten_max_db: hi,
                })
            })
            .collect();
        let switches = self
            .switches
            .iter()
            .map(|s| Switch {
                below: s.below,
                above: s.below + 1,
                rising_db: s.rising_db,
                falling_db: s.falling_db,
                fit: None,
            })
            .collect();
        GainMap {
            plateaus,
            switches,
            inferred: true,
        }
    }
}

/// Infers the states of one channel from its visits (any order).
pub fn infer_states(visits: &[Visit]) -> InferredStates {
    let summaries = summarise(visits);
    let ordered = |band_db: f64| {
        let key = |i: usize| {
            let v = &visits[i];
            let shift = match v.approach {
                Approach::Rising => -band_db / 2.0,
                Approach::Unknown => 0.0,
                Approach::Falling => band_db / 2.0,
            };
            v.atten_db + shift
        };
        let mut order: Vec<usize> = (0..visits.len())
            .filter(|&i| summaries[i].is_some())
            .collect();
        order.sort_by(|&a, &b| {
            key(a)
                .total_cmp(&key(b))
                .then(visits[a].approach.cmp(&visits[b].approach))
        });
        order
    };
    let in_order = |order: &[usize]| -> Vec<VisitSummary> {
        order.iter().filter_map(|&i| summaries[i]).collect()
    };
    let level_order = ordered(0.0);
    let overall = dispersion(&in_order(&level_order));
    let mut factors = BTreeMap::new();
    for v in visits {
        factors.entry(v.group).or_insert_with(|| {
            let mine: Vec<usize> = level_order
                .iter()
                .copied()
                .filter(|&i| visits[i].group == v.group)
                .collect();
            // A group too small to say keeps the factor of all visits together.
            if mine.len() > MIN_GROUP_VISITS {
                dispersion(&in_order(&mine))
            } else {
                overall
            }
        });
    }
    let scaled = |order: &[usize]| -> Vec<VisitSummary> {
        order
            .iter()
            .filter_map(|&i| {
                let v = summaries[i]?;
                let factor = factors.get(&visits[i].group).copied().unwrap_or(overall);
                Some(VisitSummary {
                    se_ps: v.se_ps * factor.sqrt(),
                    ..v
                })
            })
            .collect()
    };
    // The hysteresis band is not known: each candidate orders the visits as a band that wide
    // would, and the order the segmentation fits best (the least penalised cost; the narrowest
    // band on a tie) is kept. A band is one more parameter, chosen from many orders: it is
    // charged a change's penalty, so reordering alone does not make states out of noise.
    let mut best: Option<(f64, Vec<usize>, Vec<usize>)> = None;
    for step in 0..=BAND_STEPS {
        let order = ordered(f64::from(step) * BAND_STEP_DB);
        let ys = scaled(&order);
        if ys.is_empty() {
            break;
        }
        let (ends, fit_cost) = pelt(&ys);
        let cost = fit_cost + if step > 0 { penalty(ys.len()) } else { 0.0 };
        if best
            .as_ref()
            .is_none_or(|(c, _, _)| cost < c - 1e-9 * c.abs())
        {
            best = Some((cost, order, ends));
        }
    }
    let (order, ends, scaled) = match best {
        Some((_, order, ends)) => {
            let ys = scaled(&order);
            let ends = merge_small_jumps(&ys, ends);
            (order, ends, ys)
        }
        None => (Vec::new(), Vec::new(), Vec::new()),
    };
    let mut out = InferredStates {
        states: Vec::new(),
        switches: Vec::new(),
        visits: vec![VisitState::Empty; visits.len()],
        dispersion: factors,
    };
    let mut start = 0;
    for (s, &end) in ends.iter().enumerate() {
        let seg = &order[start..end];
        let attens = seg.iter().map(|&i| visits[i].atten_db);
        out.states.push(InferredState {
            k_ps: weighted_mean(&scaled[start..end]),
            atten_min_db: attens.clone().fold(f64::INFINITY, f64::min),
            atten_max_db: attens.fold(f64::NEG_INFINITY, f64::max),
        });
        for &i in seg {
            out.visits[i] = VisitState::In(s as u32);
        }
        start = end;
    }
    let prefix = Prefix::new(&scaled);
    // Per level-order position, the switch whose change location, moved to another that fits
    // about as well, would change the visit's state.
    let mut flipping: Vec<Option<u32>> = vec![None; order.len()];
    for below in 0..out.states.len().saturating_sub(1) {
        let (a, b) = (&out.states[below], &out.states[below + 1]);
        let first = if below == 0 { 0 } else { ends[below - 1] };
        let (change, last) = (ends[below], ends[below + 1]);
        let best = prefix.cost(first, change) + prefix.cost(change, last);
        let plausible = (first + MIN_SEGMENT..=last - MIN_SEGMENT)
            .filter(|&t| prefix.cost(first, t) + prefix.cost(t, last) - best <= LOCATION_DELTA);
        for t in plausible {
            for slot in &mut flipping[t.min(change)..t.max(change)] {
                *slot = Some(below as u32);
            }
        }
        let (from, to) = (0..order.len())
            .filter(|&pos| flipping[pos] == Some(below as u32))
            .map(|pos| visits[order[pos]].atten_db)
            .fold(
                (
                    a.atten_max_db.min(b.atten_min_db),
                    a.atten_max_db.max(b.atten_min_db),
                ),
                |(lo, hi), x| (lo.min(x), hi.max(x)),
            );
        let pass = |way: Approach| {
            let last = last_in(visits, &out.visits, below as u32, way, f64::max)?;
            let first = last_in(visits, &out.visits, below as u32 + 1, way, f64::min)?;
            Some((last + first) / 2.0)
        };
        out.switches.push(InferredSwitch {
            below: below as u32,
            atten_db: (a.atten_max_db + b.atten_min_db) / 2.0,
            unsure_from_db: from,
            unsure_to_db: to,
            rising_db: pass(Approach::Rising),
            falling_db: pass(Approach::Falling),
        });
    }
    // The last visit of a state and the first of the next: many more of its bursts nearer the
    // other state's K than its state's visits have says the switch came during the visit.
    for (below, &change) in ends.iter().enumerate().take(ends.len().saturating_sub(1)) {
        let (own, other) = (out.states[below].k_ps, out.states[below + 1].k_ps);
        let first = if below == 0 { 0 } else { ends[below - 1] };
        for (pos, run, near, far) in [
            (change - 1, first..change, own, other),
            (change, change..ends[below + 1], other, own),
        ] {
            let share = |r: std::ops::Range<usize>| {
                let (across, all) = r
                    .map(|p| across(&visits[order[p]], near, far))
                    .fold((0, 0), |(a, n), (x, m)| (a + x, n + m));
                across as f64 / all.max(1) as f64
            };
            let (visit, state) = (share(pos..pos + 1), share(run));
            if flipping[pos].is_none() && visit > (2.0 * state).max(state + ACROSS_MARGIN) {
                flipping[pos] = Some(below as u32);
            }
        }
    }
    for (pos, &i) in order.iter().enumerate() {
        let near = flipping[pos].or_else(|| mixed(&out, &prefix, &ends, pos, scaled[pos]));
        if let Some(below) = near {
            out.visits[i] = VisitState::NearSwitch { below };
        }
    }
    out
}

/// How many of `v`'s bursts (each its rows' median K) are nearer `other_ps` than `own_ps`, and
/// of how many.
fn across(v: &Visit, own_ps: f64, other_ps: f64) -> (usize, usize) {
    let (mut across, mut all) = (0, 0);
    for b in &v.bursts {
        let mut ks: Vec<f64> = b.k_ps.iter().copied().filter(|k| k.is_finite()).collect();
        if let Some(k) = median(&mut ks) {
            all += 1;
            across += usize::from((k - other_ps).abs() < (k - own_ps).abs());
        }
    }
    (across, all)
}

/// For the visit at level-order position `pos` with summary `y`: the switch (by its `below`)
/// toward whose other state it leans by more than [`MIXED_Z`] standard errors, if any — a
/// visit whose bursts mixed two states (the AGC toggling on level noise) sits between them.
fn mixed(
    out: &InferredStates,
    prefix: &Prefix,
    ends: &[usize],
    pos: usize,
    y: VisitSummary,
) -> Option<u32> {
    let s = ends.iter().position(|&e| pos < e)?;
    let start = if s == 0 { 0 } else { ends[s - 1] };
    let (mean, se) = prefix.mean_se(start, ends[s]);
    let z = (y.k_ps - mean) / y.se_ps.hypot(se);
    if z.abs() <= MIXED_Z {
        return None;
    }
    let toward = |other: usize| {
        out.states
            .get(other)
            .is_some_and(|o| (o.k_ps - mean).signum() == z.signum())
    };
    if s + 1 < out.states.len() && toward(s + 1) {
        Some(s as u32)
    } else if s > 0 && toward(s - 1) {
        Some(s as u32 - 1)
    } else {
        None
    }
}

/// The extreme attenuation (`pick` = max or min) of the visits in `state` made going `way`.
fn last_in(
    visits: &[Visit],
    states: &[VisitState],
    state: u32,
    way: Approach,
    pick: fn(f64, f64) -> f64,
) -> Option<f64> {
    visits
        .iter()
        .zip(states)
        .filter(|(v, s)| v.approach == way && **s == VisitState::In(state))
        .map(|(v, _)| v.atten_db)
        .reduce(pick)
}

/// Each visit's robust location and shrunk standard error (`None` for a visit without a
/// usable burst), in the order given.
pub fn summarise(visits: &[Visit]) -> Vec<Option<VisitSummary>> {
    let raw: Vec<Option<Located>> = visits.iter().map(locate).collect();
    let mut order: Vec<usize> = (0..visits.len()).filter(|&i| raw[i].is_some()).collect();
    order.sort_by(|&a, &b| visits[a].atten_db.total_cmp(&visits[b].atten_db));
    // Pooled (degrees-of-freedom weighted) variances: a median of a few small-sample
    // variances sits well below their mean (χ²₁'s median is 0.45 of it) and would make every
    // visit look better known than it is.
    let pooled = |js: &mut dyn Iterator<Item = usize>| {
        let (sum, df) = js
            .filter_map(|j| raw[j])
            .filter_map(|l| Some((l.frame_var?, l.df())))
            .fold((0.0, 0.0), |(s, d), (v, df)| (s + v * df, d + df));
        (df > 0.0).then(|| sum / df)
    };
    // Without any visit of two bursts there is no scale at all: a unit one, which the
    // over-dispersion factor then sets from the data.
    let overall = pooled(&mut order.iter().copied()).unwrap_or(1.0);
    let mut out = vec![None; visits.len()];
    for (pos, &i) in order.iter().enumerate() {
        let Some(here) = raw[i] else {
            continue;
        };
        // The nearest visits (in level order) that together give PRIOR_WINDOW_DF degrees of
        // freedom: spreads change with level (noise grows toward sensitivity), but a prior
        // of a few degrees of freedom would be as noisy as the visit's own.
        let mut width = 1;
        let prior = loop {
            let lo = pos.saturating_sub(width);
            let hi = (pos + width + 1).min(order.len());
            let near = order[lo..hi].iter().copied().filter(|&j| j != i);
            let df: f64 = near
                .clone()
                .filter_map(|j| raw[j])
                .filter(|l| l.frame_var.is_some())
                .map(|l| l.df())
                .sum();
            if df >= PRIOR_WINDOW_DF || (lo == 0 && hi == order.len()) {
                break pooled(&mut near.clone()).unwrap_or(overall);
            }
            width += 1;
        };
        let df = here.df();
        let shrunk = (df * here.frame_var.unwrap_or(0.0) + PRIOR_DF * prior) / (df + PRIOR_DF);
        out[i] = Some(VisitSummary {
            k_ps: here.k_ps,
            se_ps: (shrunk / here.frames).sqrt(),
            own_df: df,
        });
    }
    out
}

/// What one visit's own bursts say.
#[derive(Debug, Clone, Copy)]
struct Located {
    /// Frame-weighted mean of the kept burst values.
    k_ps: f64,
    /// Variance of one frame's worth, `Σ f·(x − x̄)² / (m − 1)`, from two or more bursts: a
    /// burst value of `f` frames then has `frame_var / f` (bursts of different sizes pool).
    frame_var: Option<f64>,
    /// Bursts kept.
    bursts: usize,
    /// Frames behind them.
    frames: f64,
}

impl Located {
    fn df(&self) -> f64 {
        (self.bursts as f64 - 1.0).max(0.0)
    }
}

/// A visit's bursts, each its rows' median K with the frames behind it, outliers trimmed.
fn locate(v: &Visit) -> Option<Located> {
    let mut values: Vec<(f64, f64)> = v
        .bursts
        .iter()
        .filter_map(|b| {
            let mut ks: Vec<f64> = b.k_ps.iter().copied().filter(|k| k.is_finite()).collect();
            let frames = f64::from(b.frames.max(ks.len() as u32).max(1));
            Some((median(&mut ks)?, frames))
        })
        .collect();
    let mut xs: Vec<f64> = values.iter().map(|v| v.0).collect();
    let center = median(&mut xs)?;
    if values.len() >= 3 {
        let spread = mad_scaled(&mut xs, center)?;
        if spread > 0.0 {
            values.retain(|(x, _)| (x - center).abs() <= TRIM_Z * spread);
        }
    }
    let bursts = values.len();
    let frames: f64 = values.iter().map(|v| v.1).sum();
    let k_ps = values.iter().map(|(x, f)| x * f).sum::<f64>() / frames;
    let frame_var = (bursts >= 2)
        .then(|| {
            values
                .iter()
                .map(|(x, f)| f * (x - k_ps).powi(2))
                .sum::<f64>()
                / (bursts as f64 - 1.0)
        })
        .filter(|v| *v > 0.0);
    Some(Located {
        k_ps,
        frame_var,
        bursts,
        frames,
    })
}

/// Over-dispersion: the median standardised squared successive difference over that of χ²₁,
/// at least 1 (errors are never trusted to be smaller than estimated), or 1 with too few
/// visits to say.
fn dispersion(ys: &[VisitSummary]) -> f64 {
    let mut d: Vec<f64> = ys
        .windows(2)
        .map(|w| (w[1].k_ps - w[0].k_ps).powi(2) / (w[0].se_ps.powi(2) + w[1].se_ps.powi(2)))
        .filter(|x| x.is_finite())
        .collect();
    if d.len() < 3 {
        return 1.0;
    }
    median(&mut d).map_or(1.0, |m| (m / CHI2_1_MEDIAN).max(1.0))
}

/// Weighted mean of a run of summaries, weights 1/se².
fn weighted_mean(ys: &[VisitSummary]) -> f64 {
    let (sw, swy) = ys.iter().fold((0.0, 0.0), |(sw, swy), v| {
        let w = v.se_ps.powi(-2);
        (sw + w, swy + w * v.k_ps)
    });
    swy / sw
}

/// Prefix sums for the weighted cost of any run of summaries.
struct Prefix {
    w: Vec<f64>,
    wy: Vec<f64>,
    wyy: Vec<f64>,
}

impl Prefix {
    fn new(ys: &[VisitSummary]) -> Self {
        let mut p = Prefix {
            w: vec![0.0],
            wy: vec![0.0],
            wyy: vec![0.0],
        };
        for v in ys {
            let w = v.se_ps.powi(-2);
            p.w.push(p.w.last().copied().unwrap_or(0.0) + w);
            p.wy.push(p.wy.last().copied().unwrap_or(0.0) + w * v.k_ps);
            p.wyy
                .push(p.wyy.last().copied().unwrap_or(0.0) + w * v.k_ps * v.k_ps);
        }
        p
    }

    /// `Σ (y − ȳ)²/se²` over summaries `a..b`.
    fn cost(&self, a: usize, b: usize) -> f64 {
        let w = self.w[b] - self.w[a];
        let wy = self.wy[b] - self.wy[a];
        (self.wyy[b] - self.wyy[a] - wy * wy / w).max(0.0)
    }

    /// Weighted mean of `a..b` and its standard error.
    fn mean_se(&self, a: usize, b: usize) -> (f64, f64) {
        let w = self.w[b] - self.w[a];
        ((self.wy[b] - self.wy[a]) / w, w.sqrt().recip())
    }
}

/// How much worse (in the weighted cost, a χ² scale) a change location may fit than the best
/// and still be plausible: the χ²₁ 95 % point, 3.84. A change location is not a regular
/// parameter, so this is a working rule; the tests measure what it gives.
pub const LOCATION_DELTA: f64 = 3.84;

/// A visit further than this many standard errors from its state's mean, toward a
/// neighbouring state, is taken to mix the two.
pub const MIXED_Z: f64 = 3.0;

/// A group of visits needs more than this many to have an over-dispersion factor of its own.
const MIN_GROUP_VISITS: usize = 6;

/// Two-sided level of the scatter test every change must also pass: Welch's t on the values of
/// the two segments' visits.
pub const WELCH_ALPHA: f64 = 0.01;

/// The last visit of a state (or the first of the next) is taken to have switched during the
/// visit when the share of its bursts nearer the neighbouring state's K exceeds both twice the
/// share over its state's visits and that share plus this margin. Noise puts some bursts
/// across in every visit; a switch puts many more in one. A state of one visit cannot be
/// judged so.
pub const ACROSS_MARGIN: f64 = 0.25;

/// Hysteresis bands tried, in steps of [`BAND_STEP_DB`] from none.
const BAND_STEPS: u32 = 24;

/// Resolution of the band search: finer than any attenuator sweep's points need.
const BAND_STEP_DB: f64 = 0.5;

/// The BIC penalty of one change among `n` visits: a new mean and a change location, each
/// `ln n` (Schwarz 1978).
fn penalty(n: usize) -> f64 {
    2.0 * (n as f64).ln()
}

/// Shortest segment, in visits: one, if it passes the scatter test on its own bursts.
const MIN_SEGMENT: usize = 1;

/// Degrees of freedom a segment's scatter must have for the scatter test to find it distinct:
/// two visits, or one visit of three bursts.
const MIN_LONE_DF: f64 = 1.0;

/// PELT: the segment ends (exclusive, the last is `ys.len()`) minimising cost plus
/// [`penalty`] per change, and that minimum. The cost satisfies `C(a,c) ≥ C(a,b) + C(b,c)`, so pruning is exact.
fn pelt(ys: &[VisitSummary]) -> (Vec<usize>, f64) {
    let n = ys.len();
    if n < 2 * MIN_SEGMENT {
        return (vec![n], Prefix::new(ys).cost(0, n));
    }
    let penalty = penalty(n);
    let p = Prefix::new(ys);
    let mut best = vec![f64::INFINITY; n + 1];
    let mut last = vec![0usize; n + 1];
    best[0] = -penalty;
    let mut candidates: Vec<usize> = vec![0];
    for t in MIN_SEGMENT..=n {
        // A start becomes a candidate once a segment from it to t is long enough.
        if t >= 2 * MIN_SEGMENT {
            candidates.push(t - MIN_SEGMENT);
        }
        let scored: Vec<(usize, f64)> = candidates
            .iter()
            .filter(|&&s| best[s].is_finite() && t - s >= MIN_SEGMENT)
            .map(|&s| (s, best[s] + p.cost(s, t) + penalty))
            .collect();
        if let Some(&(s, f)) = scored.iter().min_by(|a, b| a.1.total_cmp(&b.1)) {
            best[t] = f;
            last[t] = s;
        }
        let bound = best[t];
        candidates.retain(|&s| {
            !best[s].is_finite() || t - s < MIN_SEGMENT || best[s] + p.cost(s, t) <= bound
        });
    }
    let mut ends = vec![n];
    let mut t = n;
    while last[t] > 0 {
        t = last[t];
        ends.push(t);
    }
    ends.reverse();
    (ends, best[n])
}

/// Welch's t of two runs of visits from the scatter of their values alone (whatever their
/// standard errors claim), over its two-sided [`WELCH_ALPHA`] critical value: below 1 the
/// runs do not differ by their own scatter. Standard errors shrunk toward neighbours can be
/// too small where the noise grows fast (near sensitivity); the visits' own scatter cannot.
fn welch_ratio(a: &[VisitSummary], b: &[VisitSummary]) -> f64 {
    // (degrees of freedom, mean, squared standard error of the mean). A lone visit has no
    // scatter of visits: its own bursts' spread stands in, if it has enough of them.
    let moments = |r: &[VisitSummary]| match r {
        [lone] => (lone.own_df, lone.k_ps, lone.se_ps.powi(2)),
        _ => {
            let n = r.len() as f64;
            let mean = r.iter().map(|v| v.k_ps).sum::<f64>() / n;
            let var = r.iter().map(|v| (v.k_ps - mean).powi(2)).sum::<f64>() / (n - 1.0);
            (n - 1.0, mean, var / n)
        }
    };
    let ((da, ma, va), (db, mb, vb)) = (moments(a), moments(b));
    if da < MIN_LONE_DF || db < MIN_LONE_DF {
        return 0.0;
    }
    let se = (va + vb).sqrt();
    if se == 0.0 {
        return f64::INFINITY;
    }
    // Welch–Satterthwaite degrees of freedom.
    let df = (va + vb).powi(2) / (va * va / da + vb * vb / db);
    let critical = StudentsT::new(0.0, 1.0, df.max(1.0))
        .map_or(f64::INFINITY, |t| t.inverse_cdf(1.0 - WELCH_ALPHA / 2.0));
    (mb - ma).abs() / se / critical
}

/// Merges neighbouring segments whose means differ by less than [`MIN_JUMP_Z`] standard errors
/// or [`MIN_JUMP_PS`], or not by their visits' scatter ([`welch_ratio`]), the least distinct
/// pair first.
fn merge_small_jumps(ys: &[VisitSummary], mut ends: Vec<usize>) -> Vec<usize> {
    let p = Prefix::new(ys);
    loop {
        let mut worst: Option<(usize, f64)> = None;
        for j in 0..ends.len().saturating_sub(1) {
            let a = if j == 0 { 0 } else { ends[j - 1] };
            let (m1, se1) = p.mean_se(a, ends[j]);
            let (m2, se2) = p.mean_se(ends[j], ends[j + 1]);
            let jump = (m2 - m1).abs();
            let z = jump / se1.hypot(se2);
            let scatter = welch_ratio(&ys[a..ends[j]], &ys[ends[j]..ends[j + 1]]);
            if z < MIN_JUMP_Z || jump < MIN_JUMP_PS || scatter < 1.0 {
                // Rank by how far short of the hardest of the tests it falls.
                let shortfall = (z / MIN_JUMP_Z).min(jump / MIN_JUMP_PS).min(scatter);
                if worst.is_none_or(|(_, w)| shortfall < w) {
                    worst = Some((j, shortfall));
                }
            }
        }
        match worst {
            Some((j, _)) => {
                ends.remove(j);
            }
            None => return ends,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{RngExt, SeedableRng};
    use rand_chacha::ChaCha8Rng;
    use rand_distr::{Distribution, Normal};

    /// One visit of `bursts` burst-averaged rows around `k_ps` with a spread of `sd_ps`.
    fn visit(
        rng: &mut ChaCha8Rng,
        atten_db: f64,
        approach: Approach,
        k_ps: &[f64],
        sd_ps: f64,
    ) -> Visit {
        let noise = Normal::new(0.0, sd_ps).expect("sd");
        Visit {
            atten_db,
            approach,
            group: 0,
            bursts: k_ps
                .iter()
                .map(|k| Burst {
                    k_ps: vec![k + noise.sample(rng)],
                    frames: 16,
                })
                .collect(),
        }
    }

    /// A sweep from 10 to 70 dB in `step_db` steps, rising then falling, of a device whose K
    /// is 2100/2330/2610 ps in states switching at 30 and 50 dB with `band_db` of hysteresis.
    fn three_states(seed: u64, step_db: f64, band_db: f64) -> Vec<Visit> {
        three_states_with_truth(seed, step_db, band_db).0
    }

    /// [`three_states`] and the state each visit was truly in.
    fn three_states_with_truth(seed: u64, step_db: f64, band_db: f64) -> (Vec<Visit>, Vec<u32>) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let ks = [2100.0, 2330.0, 2610.0];
        let mut state = 0usize;
        let (mut out, mut truth) = (Vec::new(), Vec::new());
        let n = ((70.0 - 10.0) / step_db) as usize;
        let mut levels: Vec<(f64, Approach)> = (0..=n)
            .map(|i| (10.0 + step_db * i as f64, Approach::Rising))
            .collect();
        levels.extend(
            (0..n)
                .rev()
                .map(|i| (10.0 + step_db * i as f64, Approach::Falling)),
        );
        for (a, way) in levels {
            let half = band_db / 2.0;
            if state < 2 && a > [30.0, 50.0][state] + half {
                state += 1;
            }
            if state > 0 && a < [30.0, 50.0][state - 1] - half {
                state -= 1;
            }
            out.push(visit(&mut rng, a, way, &[ks[state]; 4], 80.0));
            truth.push(state as u32);
        }
        (out, truth)
    }

    #[test]
    fn the_chi_square_median_is_the_squared_normal_quartile() {
        // Φ⁻¹(0.75) = 0.674 489 75 (normal tables): P(Z² ≤ q²) = 1/2.
        assert!((CHI2_1_MEDIAN - 0.674_489_75f64.powi(2)).abs() < 1e-6);
    }

    #[test]
    fn three_states_with_hysteresis_are_found_and_numbered_by_level() {
        let got = infer_states(&three_states(3, 2.0, 4.0));
        assert_eq!(got.states.len(), 3, "{got:?}");
        for (s, want) in got.states.iter().zip([2100.0, 2330.0, 2610.0]) {
            assert!((s.k_ps - want).abs() < 30.0, "{s:?}");
        }
        for (sw, want) in got.switches.iter().zip([30.0, 50.0]) {
            // Within the step plus the band.
            assert!((sw.atten_db - want).abs() <= 2.0 + 4.0, "{sw:?}");
            let (up, down) = (sw.rising_db.expect("up"), sw.falling_db.expect("down"));
            assert!(up > down, "{sw:?}");
        }
    }

    #[test]
    fn visits_are_in_their_true_state_or_near_the_switch() {
        let (visits, truth) = three_states_with_truth(4, 2.0, 4.0);
        let got = infer_states(&visits);
        for ((v, s), want) in visits.iter().zip(&got.visits).zip(truth) {
            let a = v.atten_db;
            match *s {
                // In the band too: the sweep's direction orders the visits as the AGC's
                // history did.
                VisitState::In(g) => assert_eq!(g, want, "{a} dB {v:?}"),
                VisitState::NearSwitch { below } => {
                    let t = [30.0, 50.0][below as usize];
                    assert!((a - t).abs() <= 2.0 + 2.0, "{a} dB near {t}");
                }
                VisitState::Empty => panic!("every visit has bursts"),
            }
        }
        // Level alone: clear inside plateaus, unsure in the band.
        assert_eq!(got.state_at(12.0), Ok(0));
        assert_eq!(got.state_at(40.0), Ok(1));
        assert_eq!(got.state_at(68.0), Ok(2));
        assert_eq!(got.state_at(30.0), Err(0));
    }

    #[test]
    fn the_gain_map_of_inferred_states_has_plateaus_between_the_unsure_spans() {
        let got = infer_states(&three_states(6, 2.0, 4.0));
        let map = got.gain_map();
        assert!(map.inferred);
        assert_eq!(map.plateaus.len(), 3, "{map:?}");
        for (p, sw) in map.plateaus.iter().skip(1).zip(&got.switches) {
            assert_eq!(p.atten_min_db, sw.unsure_to_db);
        }
        // Plateaus hold their state both ways: away from the thresholds by the half band.
        assert!(map.plateaus[0].atten_max_db <= 32.0, "{map:?}");
        assert!(map.plateaus[1].atten_min_db >= 28.0, "{map:?}");
        assert!(map.switches.iter().all(|s| s.fit.is_none()));
    }

    #[test]
    fn one_state_is_not_split_over_many_seeds() {
        let mut splits = 0;
        for seed in 0..300 {
            let mut rng = ChaCha8Rng::seed_from_u64(seed);
            let visits: Vec<Visit> = (0..30)
                .map(|i| {
                    let bursts = rng.random_range(1..=4);
                    visit(
                        &mut rng,
                        10.0 + 2.0 * f64::from(i),
                        Approach::Rising,
                        &vec![2400.0; bursts],
                        90.0,
                    )
                })
                .collect();
            splits += usize::from(infer_states(&visits).states.len() != 1);
        }
        assert!(splits <= 6, "{splits} of 300 seeds split one state");
    }

    #[test]
    fn a_step_below_the_practical_floor_is_not_a_state() {
        // 10 ps apart, known to a fraction of a picosecond: statistically clear, of no use.
        let mut rng = ChaCha8Rng::seed_from_u64(9);
        let visits: Vec<Visit> = (0..20)
            .map(|i| {
                let k = if i < 10 { 2400.0 } else { 2410.0 };
                visit(&mut rng, f64::from(i), Approach::Rising, &[k; 16], 0.5)
            })
            .collect();
        assert_eq!(infer_states(&visits).states.len(), 1);
        // 60 ps apart at the same precision: two states.
        let visits: Vec<Visit> = (0..20)
            .map(|i| {
                let k = if i < 10 { 2400.0 } else { 2460.0 };
                visit(&mut rng, f64::from(i), Approach::Rising, &[k; 16], 0.5)
            })
            .collect();
        assert_eq!(infer_states(&visits).states.len(), 2);
    }

    #[test]
    fn a_visit_whose_bursts_straddle_a_switch_is_near_it() {
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let mut visits: Vec<Visit> = (0..20)
            .map(|i| {
                let k = if i < 10 { 2100.0 } else { 2400.0 };
                visit(&mut rng, f64::from(2 * i), Approach::Rising, &[k; 4], 60.0)
            })
            .collect();
        // Half its bursts in each state.
        visits[10] = visit(
            &mut rng,
            20.0,
            Approach::Rising,
            &[2100.0, 2100.0, 2400.0, 2400.0],
            60.0,
        );
        let got = infer_states(&visits);
        assert_eq!(got.states.len(), 2);
        assert_eq!(got.visits[10], VisitState::NearSwitch { below: 0 });
        assert_eq!(got.visits[5], VisitState::In(0));
        assert_eq!(got.visits[15], VisitState::In(1));
    }

    #[test]
    fn nothing_usable_is_one_empty_state_and_no_panic() {
        let empty = Visit {
            atten_db: 10.0,
            approach: Approach::Unknown,
            group: 0,
            bursts: vec![
                Burst {
                    k_ps: vec![],
                    frames: 0,
                },
                Burst {
                    k_ps: vec![f64::NAN],
                    frames: 1,
                },
            ],
        };
        let got = infer_states(&[empty]);
        assert_eq!(got.visits, vec![VisitState::Empty]);
        assert!(got.switches.is_empty());
        assert_eq!(infer_states(&[]).switches, Vec::new());
    }

    #[test]
    fn the_weighted_cost_is_the_chi_square_of_a_run_about_its_mean() {
        let ys: Vec<VisitSummary> = [(1.0, 1.0), (3.0, 1.0), (2.0, 0.5)]
            .map(|(k_ps, se_ps)| VisitSummary {
                k_ps,
                se_ps,
                own_df: 0.0,
            })
            .to_vec();
        let p = Prefix::new(&ys);
        // Weights 1, 1, 4: mean (1 + 3 + 8)/6 = 2; χ² = 1 + 1 + 0 = 2.
        assert!((p.cost(0, 3) - 2.0).abs() < 1e-12);
        assert_eq!(p.mean_se(0, 3), (2.0, 6f64.sqrt().recip()));
    }
}
