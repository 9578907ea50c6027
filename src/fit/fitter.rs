//! The streaming fitter: recorded exchanges in, one calibration row per cell out.
//!
//! Runs can be long (overnight, millions of exchanges), so rows are consumed one at a time and
//! only a few numbers per usable exchange are kept: the DUT delay and its burst. Rows arrive
//! grouped by burst; a burst is buffered until it ends, because its clock-rate ratio needs all of
//! its exchanges before any of their RTTs can be corrected.
//!
//! Cells are (center frequency, bandwidth, DUT gain state as reported): near an AGC switch point
//! one attenuation setting yields two gain states, so grouping by sweep point would mix them.

use crate::data::{Exchange, STATUS_OK};
use crate::fit::cal_row::{CalRow, RowSource};
use crate::fit::deembed::Deembed;
use crate::fit::device_rtt::{timing, Timing};
use crate::fit::drift::{DriftRow, TempBins};
use crate::fit::late_tail::{leans_late, split_late};
use crate::fit::rtt::{burst_offsets, corrected_rtt_from_counters_ps, rate_ratio};
use crate::fit::stats::{cluster_robust_se, mad_scaled, mean, median, sample_sd, t975};
use crate::in_turn::in_turn;
use std::collections::BTreeMap;

/// Smallest spread the rejection rule trusts, one counter tick. Below the counters' resolution
/// the spread is quantisation, not noise, and a zero MAD (many identical values) would otherwise
/// reject every sample one tick away from the median.
const MAD_FLOOR_PS: f64 = 1.0;

/// How far above the median, in rejection windows, the late-side model looks: late detections
/// spread upward, and a window that chops them leaves a late component no simple shape fits
/// (on a 160 MHz bench with 1.5 ns jitter, a reach of 1 left a +0.29 mean z, 2 left +0.13).
const LATE_REACH: f64 = 2.0;

/// Choices that change what the fitter keeps.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitOptions {
    /// Reject a delay when `|K − median| > reject_mad · MAD` of its cell, MAD scaled by 1.4826
    /// so it estimates a standard deviation (floored at 1 ps). What the window keeps may still
    /// be split into a core and a late side ([`split_late`]); an infinite `reject_mad` keeps
    /// every delay and splits nothing.
    pub reject_mad: f64,
}

impl Default for FitOptions {
    /// Five robust standard deviations, as the pandas baseline does.
    fn default() -> Self {
        Self { reject_mad: 5.0 }
    }
}

/// What the fitter saw and which fallbacks it took, for the log and the report.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct FitSummary {
    /// Rows given to the fitter.
    pub rows_pushed: u64,
    /// Rows not `ok`, missing a timing or the DUT gain, or giving a non-finite delay.
    pub rows_unusable: u64,
    /// Usable rows timed by the device itself (a reported RTT, or a range with its applied K
    /// added back) rather than by raw counters.
    pub rows_device_rtt: u64,
    /// Rows reporting a range whose applied K was not known (counted as unusable too).
    pub rows_without_applied_k: u64,
    /// Usable rows whose reference gain state has no entry in the reference delay table.
    pub rows_without_reference: u64,
    /// Bursts with at least one usable exchange.
    pub bursts: u64,
    /// Bursts whose own clock-rate ratio could not be estimated (fewer than two usable exchanges
    /// or no spread in t1) and that got the median ratio of earlier bursts, or 1 if none.
    pub bursts_fallback_ratio: u64,
    /// Cells whose kept samples all come from one burst: their interval uses the ordinary
    /// `s/√n` with n − 1 degrees of freedom, which ignores what the exchanges of a burst share.
    pub cells_single_burst: u64,
    /// Delays kept by the rejection window that the late-side model judged late (more likely
    /// from the late component than the core), over all cells; counted in `n_rejected` too.
    pub rows_judged_late: u64,
    /// Cells left out of the table because fewer than two samples were kept.
    pub cells_skipped: u64,
    /// Median over bursts with their own estimate of the clock offset `(ratio − 1)·1e6`, DUT
    /// (initiator) relative to the reference (responder); `None` when no burst gave one.
    pub median_clock_offset_ppm: Option<f64>,
    /// The stages whose rows were given to the fitter, in the order they first appear.
    pub stages: Vec<String>,
}

/// The calibration table and its summary.
#[derive(Debug, Clone, PartialEq)]
pub struct FitResult {
    /// One row per cell with at least two kept samples, sorted by center, bandwidth, gain.
    pub rows: Vec<CalRow>,
    /// Temperature coefficients per cell, where the exchanges span temperatures.
    pub drift: Vec<DriftRow>,
    /// Counts and fallbacks.
    pub summary: FitSummary,
}

/// (center_mhz, bw_mhz, dut_gain); the tuple order is the table's sort order.
type CellKey = (u32, u32, u32);

/// (stage, point, burst) of the burst being buffered.
type BurstKey = (String, u32, u32);

/// One de-embedded delay as a cell keeps it: 16 bytes, so memory stays a few numbers per
/// exchange however large the file.
#[derive(Debug, Clone, Copy)]
struct Sample {
    k_ps: f64,
    burst: u32,
    /// NaN when the exchange reported no temperature.
    temp_c: f32,
}

/// A usable row the device timed itself: its delay needs no other row of the burst.
struct Direct {
    rtt_ps: f64,
    atten_db: f64,
    cell: CellKey,
    ref_gain: Option<u32>,
    temp_c: Option<f64>,
}

/// What one usable exchange contributes once its burst's clock ratio is known.
struct Pending {
    t_ps: [u64; 4],
    atten_db: f64,
    cell: CellKey,
    ref_gain: Option<u32>,
    temp_c: Option<f64>,
}

impl Pending {
    /// The exchange as the correction needs it.
    fn timed(&self) -> Timed {
        (
            self.t_ps,
            (self.cell.0, self.cell.1),
            self.atten_db,
            self.ref_gain,
        )
    }

    /// Where its delay is filed: its cell, with its temperature.
    fn filed(&self) -> (CellKey, Option<f64>) {
        (self.cell, self.temp_c)
    }
}

/// Streaming fitter: [`push`](Fitter::push) rows in file order, then [`finish`](Fitter::finish).
///
/// A file can also be fitted in two parts at once: a [`Fitter::new`] for the rows up to a burst
/// boundary, a [`Fitter::continuing`] for the rest, then [`append`](Fitter::append) the second
/// to the first; the result is the same to the bit.
pub struct Fitter {
    deembed: Deembed,
    options: FitOptions,
    current_burst: Option<BurstKey>,
    pending: Vec<Pending>,
    /// The burst's rows the device timed itself.
    direct: Vec<Direct>,
    /// Ratios of bursts that had their own estimate, for the fallback and the summary.
    ratios: Vec<f64>,
    cells: Cells,
    /// Buffers each burst's correction reuses (allocated per burst, they cost as much as the
    /// cell lookups).
    burst: BurstBuffers,
    /// Set for a fitter that does not start at the file's start: it cannot know the earlier
    /// bursts' ratios a burst without its own would take the median of, so such bursts wait
    /// in `deferred` for [`append`](Fitter::append).
    continuing: bool,
    deferred: Vec<Deferred>,
    summary: FitSummary,
}

/// A burst without its own clock-rate ratio, waiting for the ratios of the bursts before it.
struct Deferred {
    /// The burst's number among the continuing fitter's bursts.
    burst_id: u64,
    /// How many of the continuing fitter's own ratios came before it.
    ratios_before: usize,
    exchanges: Vec<Pending>,
}

/// Every delay computed so far, per cell, with the cells in the order first seen.
#[derive(Default)]
struct Cells {
    list: Vec<(CellKey, Vec<Segment>)>,
    /// Where each cell is in `list`. Looked up once per burst and cell, not per delay: a map
    /// lookup per delay was a tenth of the fitter's streaming work.
    index: BTreeMap<CellKey, usize>,
}

/// A cell's delays from one run of bursts, in file order. A fitter files into one segment per
/// cell; an appended fitter's segments are taken over whole, without copying their delays.
#[derive(Debug, Clone, Default)]
struct Segment {
    /// Added to each delay's burst number for the burst's number in the file.
    offset: u32,
    samples: Vec<Sample>,
}

impl Segment {
    /// The delays with their bursts' numbers in the file.
    fn numbered(&self) -> impl Iterator<Item = Sample> + Clone + '_ {
        self.samples.iter().map(|s| Sample {
            burst: s.burst.wrapping_add(self.offset),
            ..*s
        })
    }
}

impl Cells {
    /// Where `cell` is in `list`, adding it if new.
    fn slot(&mut self, cell: CellKey) -> usize {
        let list = &mut self.list;
        *self.index.entry(cell).or_insert_with(|| {
            list.push((cell, Vec::new()));
            list.len() - 1
        })
    }

    /// Files burst `burst_id`'s delays (aligned with its exchanges' cells and temperatures)
    /// under their cells, counting those it cannot use.
    fn file(
        &mut self,
        burst_id: u64,
        exchanges: impl IntoIterator<Item = (CellKey, Option<f64>)>,
        delays: &[Option<f64>],
        summary: &mut FitSummary,
    ) {
        // 2^32 bursts (~7e10 exchanges) before ids repeat.
        let burst = burst_id as u32;
        // The cell of the delay before, and where it is in `list`.
        let mut last: Option<(CellKey, usize)> = None;
        for ((p_cell, p_temp_c), &k) in exchanges.into_iter().zip(delays) {
            match k {
                None => summary.rows_without_reference += 1,
                Some(k) if !k.is_finite() => summary.rows_unusable += 1,
                Some(k) => {
                    let i = match last {
                        Some((cell, i)) if cell == p_cell => i,
                        _ => {
                            let i = self.slot(p_cell);
                            last = Some((p_cell, i));
                            i
                        }
                    };
                    let segment = segment_for(&mut self.list[i].1, burst);
                    segment.samples.push(Sample {
                        k_ps: k,
                        burst: burst.wrapping_sub(segment.offset),
                        temp_c: p_temp_c.map_or(f32::NAN, |t| t as f32),
                    });
                }
            }
        }
    }
}

/// The segment a delay of `burst` goes into: the last that starts at or before it, or a new
/// first one. Bursts are filed in order, so it is nearly always the last.
fn segment_for(segments: &mut Vec<Segment>, burst: u32) -> &mut Segment {
    let at = segments.partition_point(|s| s.offset <= burst);
    if at == 0 {
        segments.insert(
            0,
            Segment {
                offset: burst,
                samples: Vec::new(),
            },
        );
        return &mut segments[0];
    }
    &mut segments[at - 1]
}

/// A burst's usable exchanges for the correction, and what it makes of them.
#[derive(Default)]
struct BurstBuffers {
    items: Vec<Timed>,
    t1_t2: Vec<(u64, u64)>,
    delays: Vec<Option<f64>>,
}

impl Fitter {
    /// A fitter that removes `deembed`'s bench delays and rejects outliers per `options`.
    pub fn new(deembed: Deembed, options: FitOptions) -> Self {
        Self {
            deembed,
            options,
            current_burst: None,
            pending: Vec::new(),
            direct: Vec::new(),
            ratios: Vec::new(),
            cells: Cells::default(),
            burst: BurstBuffers::default(),
            continuing: false,
            deferred: Vec::new(),
            summary: FitSummary::default(),
        }
    }

    /// A fitter for rows that continue another fitter's from a burst boundary, to be
    /// [`append`](Fitter::append)ed to it.
    pub fn continuing(deembed: Deembed, options: FitOptions) -> Self {
        Self {
            continuing: true,
            ..Self::new(deembed, options)
        }
    }

    /// Takes over `later`, a [`continuing`](Fitter::continuing) fitter given the rows that
    /// follow this one's, from a burst boundary: afterwards this fitter is as if it had been
    /// given all the rows itself, and can take more.
    pub fn append(&mut self, later: Fitter) {
        self.close_burst();
        let offset = self.summary.bursts;
        // Bursts are numbered in file order: the later fitter's follow this one's.
        for (cell, segments) in later.cells.list {
            let i = self.cells.slot(cell);
            self.cells.list[i]
                .1
                .extend(segments.into_iter().map(|segment| Segment {
                    offset: segment.offset.wrapping_add(offset as u32),
                    ..segment
                }));
        }
        let mut late_cells = Vec::new();
        if self.continuing {
            // This fitter does not know the earlier ratios either: the bursts wait on.
            let before = self.ratios.len();
            self.deferred
                .extend(later.deferred.into_iter().map(|burst| Deferred {
                    burst_id: burst.burst_id + offset,
                    ratios_before: before + burst.ratios_before,
                    exchanges: burst.exchanges,
                }));
        } else {
            for burst in later.deferred {
                let mut earlier = self.ratios.clone();
                earlier.extend(&later.ratios[..burst.ratios_before]);
                let ratio = median(&mut earlier).unwrap_or(1.0);
                let mut delays = Vec::new();
                let items: Vec<Timed> = burst.exchanges.iter().map(Pending::timed).collect();
                corrected_delays(&self.deembed, &items, ratio, &mut delays);
                late_cells.extend(burst.exchanges.iter().map(|p| p.cell));
                self.cells.file(
                    burst.burst_id + offset,
                    burst.exchanges.iter().map(Pending::filed),
                    &delays,
                    &mut self.summary,
                );
            }
        }
        // A deferred burst's delays were filed after later bursts': back into file order (a
        // stable sort keeps each burst's own order), so sums run as they would have.
        late_cells.sort_unstable();
        late_cells.dedup();
        for cell in late_cells {
            if let Some(&i) = self.cells.index.get(&cell) {
                for segment in &mut self.cells.list[i].1 {
                    if !segment.samples.is_sorted_by_key(|s| s.burst) {
                        segment.samples.sort_by_key(|s| s.burst);
                    }
                }
            }
        }
        self.ratios.extend(later.ratios);
        let (mine, theirs) = (&mut self.summary, later.summary);
        mine.rows_pushed += theirs.rows_pushed;
        mine.rows_unusable += theirs.rows_unusable;
        mine.rows_device_rtt += theirs.rows_device_rtt;
        mine.rows_without_applied_k += theirs.rows_without_applied_k;
        mine.rows_without_reference += theirs.rows_without_reference;
        mine.bursts += theirs.bursts;
        mine.bursts_fallback_ratio += theirs.bursts_fallback_ratio;
        for stage in theirs.stages {
            if !mine.stages.contains(&stage) {
                mine.stages.push(stage);
            }
        }
        self.current_burst = later.current_burst;
        self.pending = later.pending;
        self.direct = later.direct;
    }

    /// Gives back the room the delays kept so far were growing into: for a fitter whose rows
    /// have ended but that waits to be [`append`](Fitter::append)ed, while others still read.
    pub fn shrink_to_fit(&mut self) {
        for (_, segments) in &mut self.cells.list {
            segments.iter_mut().for_each(|s| s.samples.shrink_to_fit());
        }
    }

    /// Take one row. Consecutive rows with the same (stage, point, burst) form a burst; a key
    /// seen again after another burst starts a new burst.
    pub fn push(&mut self, x: &Exchange) {
        self.summary.rows_pushed += 1;
        let same_burst = self
            .current_burst
            .as_ref()
            .is_some_and(|(stage, point, burst)| {
                *stage == x.stage && *point == x.point && *burst == x.burst
            });
        if !same_burst {
            self.close_burst();
            if !self.summary.stages.contains(&x.stage) {
                self.summary.stages.push(x.stage.clone());
            }
            self.current_burst = Some((x.stage.clone(), x.point, x.burst));
        }
        let ok = x.status == STATUS_OK;
        match (x.dut_gain, timing(x, self.deembed.applied_k_ps)) {
            (Some(gain), Timing::Counters(t_ps)) if ok => {
                self.pending.push(Pending {
                    t_ps,
                    atten_db: x.atten_db,
                    cell: (x.center_mhz, x.bw_mhz, gain),
                    ref_gain: x.ref_gain,
                    temp_c: x.temp_c.filter(|t| t.is_finite()),
                });
            }
            (Some(gain), Timing::Rtt(rtt_ps)) if ok => {
                self.summary.rows_device_rtt += 1;
                self.direct.push(Direct {
                    rtt_ps,
                    atten_db: x.atten_db,
                    cell: (x.center_mhz, x.bw_mhz, gain),
                    ref_gain: x.ref_gain,
                    temp_c: x.temp_c.filter(|t| t.is_finite()),
                });
            }
            (_, Timing::RangeWithoutK) if ok => {
                self.summary.rows_without_applied_k += 1;
                self.summary.rows_unusable += 1;
            }
            _ => self.summary.rows_unusable += 1,
        }
    }

    /// Close the last burst and compute the table.
    ///
    /// Cells are summarised on two threads: once the file is read this is all that is left
    /// (two medians per cell over all its delays; 0.06–0.08 s of a 2M-row fit on one thread,
    /// 0.035–0.047 s on two). Each cell is summarised whole by one thread, in its samples'
    /// order, so the table is the same to the bit; two threads keep at most two cells' scratch
    /// buffers (at 10M rows, 13 MiB more peak RSS than one).
    pub fn finish(mut self) -> FitResult {
        self.close_burst();
        let mut ratios = self.ratios;
        self.summary.median_clock_offset_ppm = median(&mut ratios).map(|r| (r - 1.0) * 1e6);
        let options = self.options;
        // The table's order, the cells' key order.
        let mut cells = self.cells.list;
        cells.sort_unstable_by_key(|&(cell, _)| cell);
        // Each cell's samples are freed once summarised.
        let (done, states) = in_turn(
            cells,
            2,
            "fit-cells",
            || (TempBins::default(), Scratch::default()),
            |(temps, scratch), (cell, segments)| {
                let mut notes = CellNotes::default();
                let row = cell_row(cell, &segments, options, temps, scratch, &mut notes);
                CellOutcome { row, notes }
            },
        );
        let mut temps = TempBins::default();
        for (theirs, _) in states {
            temps.merge(theirs);
        }
        let mut rows = Vec::with_capacity(done.len());
        for cell in done {
            self.summary.cells_single_burst += u64::from(cell.notes.single_burst);
            self.summary.rows_judged_late += cell.notes.judged_late;
            match cell.row {
                Some(row) => rows.push(row),
                None => self.summary.cells_skipped += 1,
            }
        }
        FitResult {
            rows,
            drift: temps.drift(),
            summary: self.summary,
        }
    }

    /// Correct and de-embed the buffered burst and file its delays under their cells.
    fn close_burst(&mut self) {
        if self.pending.is_empty() && self.direct.is_empty() {
            return;
        }
        let burst_id = self.summary.bursts;
        self.summary.bursts += 1;
        if !self.direct.is_empty() {
            let delays = &mut self.burst.delays;
            delays.clear();
            delays.extend(self.direct.iter().map(|d| {
                let channel = (d.cell.0, d.cell.1);
                self.deembed
                    .dut_k_ps(d.rtt_ps, channel, d.atten_db, d.ref_gain)
            }));
            let filed = self.direct.drain(..).map(|d| (d.cell, d.temp_c));
            self.cells.file(burst_id, filed, delays, &mut self.summary);
            if self.pending.is_empty() {
                return;
            }
        }
        let BurstBuffers {
            items,
            t1_t2,
            delays,
        } = &mut self.burst;
        items.clear();
        items.extend(self.pending.iter().map(Pending::timed));
        let ratio = match own_ratio(items, t1_t2) {
            Some(r) => {
                self.ratios.push(r);
                r
            }
            None if self.continuing => {
                self.summary.bursts_fallback_ratio += 1;
                self.deferred.push(Deferred {
                    burst_id,
                    ratios_before: self.ratios.len(),
                    exchanges: std::mem::take(&mut self.pending),
                });
                return;
            }
            None => {
                self.summary.bursts_fallback_ratio += 1;
                median(&mut self.ratios.clone()).unwrap_or(1.0)
            }
        };
        corrected_delays(&self.deembed, items, ratio, delays);
        let filed = self.pending.drain(..).map(|p| p.filed());
        self.cells.file(burst_id, filed, delays, &mut self.summary);
    }
}

/// A usable exchange as the clock correction and de-embedding need it: (t1..t4, channel,
/// attenuation, reference gain).
type Timed = ([u64; 4], (u32, u32), f64, Option<u32>);

/// The clock-rate ratio of a burst's usable exchanges, if they yield one; `t1_t2` is a buffer.
fn own_ratio(items: &[Timed], t1_t2: &mut Vec<(u64, u64)>) -> Option<f64> {
    t1_t2.clear();
    t1_t2.extend(items.iter().map(|(t, _, _, _)| (t[0], t[1])));
    rate_ratio(&burst_offsets(t1_t2))
}

/// Each exchange's de-embedded delay into `delays` (`None` where the reference table has no
/// value for its gain), its RTT corrected with the burst's clock-rate `ratio`. `items` are the
/// burst's usable exchanges.
fn corrected_delays(deembed: &Deembed, items: &[Timed], ratio: f64, delays: &mut Vec<Option<f64>>) {
    delays.clear();
    delays.extend(
        items
            .iter()
            .map(|&([t1, t2, t3, t4], channel, atten_db, ref_gain)| {
                let rtt_ps = corrected_rtt_from_counters_ps(t1, t2, t3, t4, ratio);
                deembed.dut_k_ps(rtt_ps, channel, atten_db, ref_gain)
            }),
    );
}

/// De-embedded delays of one burst's rows, aligned with `rows`: `None` for an unusable row or
/// one whose reference gain has no delay. Used where exchanges are judged one by one
/// (verification) rather than pooled into cells.
pub fn burst_delays(deembed: &Deembed, rows: &[Exchange], fallback_ratio: f64) -> Vec<Option<f64>> {
    let mut out = vec![None; rows.len()];
    let mut counted: Vec<(usize, Timed)> = Vec::new();
    for (i, x) in rows.iter().enumerate() {
        if !x.is_usable() {
            continue;
        }
        match timing(x, deembed.applied_k_ps) {
            Timing::Counters(t) => {
                counted.push((i, (t, (x.center_mhz, x.bw_mhz), x.atten_db, x.ref_gain)))
            }
            Timing::Rtt(rtt_ps) => {
                out[i] = deembed
                    .dut_k_ps(rtt_ps, (x.center_mhz, x.bw_mhz), x.atten_db, x.ref_gain)
                    .filter(|k| k.is_finite());
            }
            Timing::RangeWithoutK | Timing::Missing => {}
        }
    }
    let items: Vec<_> = counted.iter().map(|(_, it)| *it).collect();
    let ratio = own_ratio(&items, &mut Vec::new()).unwrap_or(fallback_ratio);
    let mut delays = Vec::new();
    corrected_delays(deembed, &items, ratio, &mut delays);
    for ((i, _), k) in counted.iter().zip(delays) {
        out[*i] = k.filter(|k| k.is_finite());
    }
    out
}

/// Buffers the cells share while the table is computed. Allocated afresh per cell, tens of MB
/// of new pages per large cell were zeroed by the kernel (perf: ~7 % of a 2M-row fit).
#[derive(Default)]
struct Scratch {
    values: Vec<f64>,
    kept: Vec<(f64, u64)>,
}

/// What [`cell_row`] made of a cell.
struct CellOutcome {
    row: Option<CalRow>,
    notes: CellNotes,
}

/// What the summary learns from one cell.
#[derive(Default)]
struct CellNotes {
    /// The kept samples all come from one burst.
    single_burst: bool,
    /// Samples a late component took (see [`split_late`]).
    judged_late: u64,
}

/// Reject outliers in one cell and summarise the rest; `None` when fewer than two are kept.
/// `notes` say whether the kept samples all come from one burst and how many were judged late.
fn cell_row(
    (center_mhz, bw_mhz, gain_index): CellKey,
    segments: &[Segment],
    options: FitOptions,
    temps: &mut TempBins,
    scratch: &mut Scratch,
    notes: &mut CellNotes,
) -> Option<CalRow> {
    let values = &mut scratch.values;
    values.clear();
    let samples = || segments.iter().flat_map(Segment::numbered);
    values.extend(samples().map(|s| s.k_ps));
    let center = median(values)?;
    // The median of deviations does not depend on their order, so reusing the reordered
    // values gives the same spread as a fresh copy.
    let spread = mad_scaled(values, center)?.max(MAD_FLOOR_PS);
    let limit = options.reject_mad * spread;
    let cell = (center_mhz, bw_mhz, gain_index);
    let total = samples().count() as u64;
    let in_window = |s: &Sample| (s.k_ps - center).abs() <= limit;
    let kept_values = &mut scratch.values;
    kept_values.clear();
    kept_values.extend(samples().filter(in_window).map(|s| s.k_ps));
    // Late detections close to the core survive a symmetric window and all push one way. Where
    // the window's delays lean late, a late-side model sees the early side as the window cuts
    // it and the late side to `LATE_REACH` windows, so a late component is not chopped to a
    // shape it cannot fit; where it finds one, the core's mean stands for the cell. An infinite
    // window keeps everything and splits nothing.
    if limit.is_finite() && leans_late(kept_values) {
        let in_reach =
            |s: &Sample| s.k_ps >= center - limit && s.k_ps <= center + LATE_REACH * limit;
        let kept = &mut scratch.kept;
        kept.clear();
        kept.extend(
            samples()
                .filter(in_reach)
                .map(|s| (s.k_ps, u64::from(s.burst))),
        );
        if let Some(split) = split_late(kept) {
            let core = samples().filter(|s| in_reach(s) && !split.is_late(s.k_ps));
            for s in core.clone().filter(|s| s.temp_c.is_finite()) {
                temps.add(cell, f64::from(s.temp_c), s.k_ps);
            }
            notes.judged_late = split.judged_late;
            let n_used = core.count() as u64;
            if n_used < 2 {
                return None;
            }
            let df = (split.clusters - 1) as f64;
            return Some(CalRow {
                center_mhz,
                bw_mhz,
                gain_index,
                delay_ps: split.core_mean_ps,
                ci95_ps: t975(df)? * split.core_se_ps,
                stat_dof: df,
                n_used,
                n_rejected: total - n_used,
                n_bursts: split.bursts,
                sd_ps: split.core_sd_ps,
                source: RowSource::Measured,
            });
        }
    }
    let kept_samples = samples().filter(in_window);
    for s in kept_samples.clone().filter(|s| s.temp_c.is_finite()) {
        temps.add(cell, f64::from(s.temp_c), s.k_ps);
    }
    let kept = &mut scratch.kept;
    kept.clear();
    kept.extend(kept_samples.map(|s| (s.k_ps, u64::from(s.burst))));
    let n = kept_values.len();
    if n < 2 {
        return None;
    }
    let delay_ps = mean(kept_values)?;
    let sd_ps = sample_sd(kept_values)?;
    // Distinct bursts are the clusters of the robust standard error (one when it has none).
    let (se_ps, df, n_bursts) = match cluster_robust_se(kept, delay_ps) {
        Some(c) => (c.se, (c.clusters - 1) as f64, c.clusters),
        None => {
            notes.single_burst = true;
            (sd_ps / (n as f64).sqrt(), (n - 1) as f64, 1)
        }
    };
    let ci95_ps = t975(df)? * se_ps;
    Some(CalRow {
        center_mhz,
        bw_mhz,
        gain_index,
        delay_ps,
        ci95_ps,
        stat_dof: df,
        n_used: n as u64,
        n_rejected: total - n as u64,
        n_bursts,
        sd_ps,
        source: RowSource::Measured,
    })
}

/// Fit a whole sequence of rows in one call.
pub fn fit<'a>(
    deembed: Deembed,
    options: FitOptions,
    rows: impl IntoIterator<Item = &'a Exchange>,
) -> FitResult {
    let mut fitter = Fitter::new(deembed, options);
    for row in rows {
        fitter.push(row);
    }
    fitter.finish()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bench::{PathFacts, PerGain};
    use crate::fit::rtt::COUNTER_BITS;

    const MODULUS: i128 = 1 << COUNTER_BITS;
    const CABLE_PS: f64 = 6100.0;
    const ATTEN_SLOPE_PS_PER_DB: f64 = 0.5;
    const K_REF_PS: f64 = 2800.0;
    /// True DUT K per gain index: design §4 demo truth, TX 1500 + RX 900 / 1150 / 1400.
    const K_DUT_PS: [f64; 3] = [2400.0, 2650.0, 2900.0];
    const CLOCK_PPM: f64 = 8.0;
    const TURNAROUND_TICKS: i64 = 120_000_000;
    const EXCHANGE_SPACING_PS: i64 = 2_000_000_000;
    const BURST_SPACING_PS: i64 = 100_000_000_000;

    fn deembed() -> Deembed {
        let path = PathFacts {
            cable_delay_ps: CABLE_PS,
            fixed_loss_db: 8.0,
            atten_delay_ps_per_db: ATTEN_SLOPE_PS_PER_DB,
        };
        Deembed::new(&path, PerGain::Same(K_REF_PS))
    }

    fn on_counter(start: u64, elapsed_ps: i64) -> u64 {
        (start as i128 + elapsed_ps as i128).rem_euclid(MODULUS) as u64
    }

    /// Closed-form timestamps of one exchange. The responder's clock is true time, the DUT's runs
    /// `CLOCK_PPM` fast and replies `TURNAROUND_TICKS` of its own clock after arrival; both
    /// counters start shortly before the wrap so bursts cross it. `late_ps` delays the
    /// responder's detection of the reply (a gross outlier in t4 only).
    #[allow(clippy::too_many_arguments)]
    fn exchange(
        point: u32,
        burst: u32,
        seq: u32,
        atten_db: f64,
        gain: u32,
        depart_ps: i64,
        late_ps: f64,
    ) -> Exchange {
        let r = 1.0 + CLOCK_PPM * 1e-6;
        let resp_start = (MODULUS - 7_000_000_000) as u64;
        let init_start = (MODULUS - 400_000_000_000) as u64;
        let k_dut = K_DUT_PS[gain as usize];
        let total_delay_ps = 2.0 * (CABLE_PS + ATTEN_SLOPE_PS_PER_DB * atten_db) + K_REF_PS + k_dut;
        let outbound_ps = total_delay_ps / 2.0;
        let t1 = on_counter(resp_start, depart_ps);
        let t2 = on_counter(
            init_start,
            (r * (depart_ps as f64 + outbound_ps)).round() as i64,
        );
        let t3 = on_counter(t2, TURNAROUND_TICKS);
        let back_ps = depart_ps as f64 + total_delay_ps + TURNAROUND_TICKS as f64 / r + late_ps;
        let t4 = on_counter(resp_start, back_ps.round() as i64);
        Exchange {
            stage: "sweep".into(),
            point,
            burst,
            seq,
            atten_db,
            center_mhz: 5180,
            bw_mhz: 80,
            t1_ps: Some(t1),
            t2_ps: Some(t2),
            t3_ps: Some(t3),
            t4_ps: Some(t4),
            dut_gain: Some(gain),
            dut_rssi_dbm: Some(-50.0),
            ref_gain: Some(0),
            temp_c: None,
            status: STATUS_OK.into(),
            ..Exchange::default()
        }
    }

    /// A sweep: point p at 20·p dB sits in gain state p; `bursts` bursts of `per_burst`
    /// exchanges; every 37th exchange (counted over the whole run) detected 20 ns late.
    fn sweep(bursts: u32, per_burst: u32) -> (Vec<Exchange>, [u64; 3]) {
        let mut rows = Vec::new();
        let mut outliers = [0u64; 3];
        let mut count = 0u64;
        for point in 0..3u32 {
            for burst in 0..bursts {
                for seq in 0..per_burst {
                    count += 1;
                    let late = if count % 37 == 0 {
                        outliers[point as usize] += 1;
                        20_000.0
                    } else {
                        0.0
                    };
                    let depart = (point * bursts + burst) as i64 * BURST_SPACING_PS
                        + seq as i64 * EXCHANGE_SPACING_PS;
                    rows.push(exchange(
                        point,
                        burst,
                        seq,
                        20.0 * point as f64,
                        point,
                        depart,
                        late,
                    ));
                }
            }
        }
        (rows, outliers)
    }

    /// `x` as a device that does its own timing reports it: the true round trip (the
    /// synthetic bench's closed form) as an RTT, or as a range with `applied_k_ps` removed.
    fn device_timed(x: &Exchange, applied_k_ps: Option<f64>, late_ps: f64) -> Exchange {
        let gain = x.dut_gain.expect("a gain") as usize;
        let rtt_ps = 2.0 * (CABLE_PS + ATTEN_SLOPE_PS_PER_DB * x.atten_db)
            + K_REF_PS
            + K_DUT_PS[gain]
            + late_ps;
        let mut y = Exchange {
            t1_ps: None,
            t2_ps: None,
            t3_ps: None,
            t4_ps: None,
            ..x.clone()
        };
        match applied_k_ps {
            // d = c/2 · (RTT − K_app) (design §6), in mm.
            Some(k) => y.range_mm = Some(crate::fit::rtt::range_m_from_rtt_ps(rtt_ps - k) * 1e3),
            None => y.rtt_ps = Some(rtt_ps),
        }
        y
    }

    #[test]
    fn rows_the_device_timed_give_the_table_counters_give() {
        let (rows, _) = sweep(6, 10);
        let stamps = fit(deembed(), FitOptions::default(), &rows);
        // Every 37th exchange of the counter sweep was 20 ns late: the same here.
        let late = |i: usize| if (i + 1) % 37 == 0 { 20_000.0 } else { 0.0 };
        for applied in [None, Some(2_650.0), Some(-400.0)] {
            let timed: Vec<Exchange> = rows
                .iter()
                .enumerate()
                .map(|(i, x)| device_timed(x, applied, late(i)))
                .collect();
            let result = fit(
                deembed().with_applied_k(applied),
                FitOptions::default(),
                &timed,
            );
            assert_eq!(result.rows.len(), 3, "{applied:?}");
            for (got, want) in result.rows.iter().zip(&stamps.rows) {
                // Truth of the synthetic bench, and the counters' own answer.
                let truth = K_DUT_PS[got.gain_index as usize];
                assert!((got.delay_ps - truth).abs() < 1e-6, "{applied:?}: {got:?}");
                assert!((got.delay_ps - want.delay_ps).abs() < 0.5);
                assert_eq!(got.n_rejected, want.n_rejected, "{applied:?}");
                assert_eq!(got.n_bursts, 6);
            }
            let s = &result.summary;
            assert_eq!((s.rows_device_rtt, s.rows_unusable), (180, 0));
            assert_eq!(s.bursts, 18);
            assert_eq!(s.bursts_fallback_ratio, 0);
        }
    }

    #[test]
    fn a_range_without_its_applied_k_is_counted_and_unused() {
        let (rows, _) = sweep(2, 4);
        let ranged: Vec<Exchange> = rows
            .iter()
            .map(|x| device_timed(x, Some(2_000.0), 0.0))
            .collect();
        let result = fit(deembed(), FitOptions::default(), &ranged);
        assert!(result.rows.is_empty());
        let s = &result.summary;
        assert_eq!((s.rows_without_applied_k, s.rows_unusable), (24, 24));
        // The same rows with the K given are all used; verification sees them the same way.
        let d = deembed().with_applied_k(Some(2_000.0));
        let delays = burst_delays(&d, &ranged[..4], 1.0);
        for (x, k) in ranged[..4].iter().zip(delays) {
            let truth = K_DUT_PS[x.dut_gain.unwrap() as usize];
            assert!(k.is_some_and(|k| (k - truth).abs() < 1e-6), "{k:?}");
        }
        assert_eq!(burst_delays(&deembed(), &ranged[..4], 1.0), vec![None; 4]);
    }

    #[test]
    fn one_row_per_burst_makes_each_burst_its_own_cluster() {
        // Burst averages: one row per burst, 16 frames behind each, spread 3 ps between bursts.
        let (rows, _) = sweep(12, 1);
        let spread = [
            2.0, -3.0, 1.0, 4.0, -2.0, 0.0, -4.0, 3.0, -1.0, 1.5, -0.5, 0.0,
        ];
        let averaged: Vec<Exchange> = rows
            .iter()
            .enumerate()
            .map(|(i, x)| Exchange {
                frames: 16,
                ..device_timed(x, None, spread[i % 12])
            })
            .collect();
        let result = fit(deembed(), FitOptions::default(), &averaged);
        for row in &result.rows {
            assert_eq!((row.n_used, row.n_bursts), (12, 12));
            // With one sample per cluster the cluster-robust error is the plain s/√n (up to its
            // small-sample factor √(G/(G−1))), on G − 1 = 11 degrees of freedom.
            let s = crate::fit::stats::sample_sd(&spread).unwrap();
            let plain = s / 12f64.sqrt();
            let t = crate::fit::stats::t975(11.0).unwrap();
            let ratio = row.ci95_ps / (t * plain);
            assert!((0.99..=1.05).contains(&ratio), "{ratio}");
        }
    }

    #[test]
    fn noise_free_sweep_recovers_k_per_gain() {
        let (rows, outliers) = sweep(6, 10);
        let result = fit(deembed(), FitOptions::default(), &rows);
        assert_eq!(result.rows.len(), 3);
        for (gain, row) in result.rows.iter().enumerate() {
            assert_eq!(row.gain_index, gain as u32);
            // Known truth of the synthetic bench (closed-form timestamps, no noise).
            assert!(
                (row.delay_ps - K_DUT_PS[gain]).abs() < 0.5,
                "gain {gain}: {}",
                row.delay_ps
            );
            assert_eq!(row.n_rejected, outliers[gain], "gain {gain}");
            assert_eq!(row.n_used + row.n_rejected, 60);
            assert_eq!(row.n_bursts, 6);
            assert!(
                row.ci95_ps.is_finite() && row.ci95_ps < 1.0,
                "{}",
                row.ci95_ps
            );
            assert_eq!(row.source, RowSource::Measured);
        }
        let s = &result.summary;
        assert_eq!(s.rows_pushed, 180);
        assert_eq!(s.rows_unusable, 0);
        assert_eq!(s.bursts, 18);
        assert_eq!(s.bursts_fallback_ratio, 0);
        assert_eq!(s.cells_single_burst, 0);
        assert_eq!(s.cells_skipped, 0);
        let ppm = s.median_clock_offset_ppm.unwrap_or(f64::NAN);
        assert!((ppm - CLOCK_PPM).abs() < 1e-3, "{ppm}");
    }

    #[test]
    fn early_and_late_outliers_are_rejected_and_nothing_else() {
        // Rejection is two-sided: exchanges detected 20 ns early (K low) go as surely as those
        // 20 ns late. Each cell's count of rejected exchanges is the planted count, and its K
        // is the noise-free truth: keeping one planted exchange, or dropping a clean one in its
        // place, would move a cell's mean of 60 by 20 ns / 60 = 333 ps.
        let (mut rows, _) = sweep(6, 10);
        let mut planted = [0u64; 3];
        for (i, row) in rows.iter_mut().enumerate() {
            // Every row made again: the sweep's own late ones become clean.
            let late_ps = match i % 23 {
                5 => -20_000.0,
                17 => 20_000.0,
                _ => 0.0,
            };
            planted[row.point as usize] += u64::from(late_ps != 0.0);
            let depart = (row.point * 6 + row.burst) as i64 * BURST_SPACING_PS
                + row.seq as i64 * EXCHANGE_SPACING_PS;
            *row = exchange(
                row.point,
                row.burst,
                row.seq,
                row.atten_db,
                row.point,
                depart,
                late_ps,
            );
        }
        let result = fit(deembed(), FitOptions::default(), &rows);
        assert_eq!(result.rows.len(), 3);
        for (gain, row) in result.rows.iter().enumerate() {
            assert_eq!(row.n_rejected, planted[gain], "gain {gain}");
            assert_eq!(row.n_used, 60 - planted[gain], "gain {gain}");
            assert!(
                (row.delay_ps - K_DUT_PS[gain]).abs() < 0.5,
                "gain {gain}: {}",
                row.delay_ps
            );
        }
    }

    #[test]
    fn the_rejection_scale_is_the_normal_sd_of_a_mad() {
        // Gaussian jitter of σ = 100 ps on K (clipped at 3σ), exchanges at ±4σ and gross ones
        // at ±8σ. A cut of 5 scaled MADs (MAD × 1/Φ⁻¹(3/4) ≈ σ) keeps the ±4σ ones and rejects
        // the gross ones alone; a cut of 5 raw MADs (≈ 3.4σ) would take the ±4σ ones too.
        // Jitter from a seeded normal (rand_distr), over 20 seeds.
        use rand::SeedableRng;
        use rand_distr::Distribution;
        let jitter = rand_distr::Normal::new(0.0, 100.0).expect("normal");
        for seed in 0..20u64 {
            let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
            let mut rows = Vec::new();
            let mut gross = 0u64;
            for burst in 0..20u32 {
                for seq in 0..50u32 {
                    let i = burst * 50 + seq;
                    let sample: f64 = jitter.sample(&mut rng);
                    let sign = if i % 2 == 0 { 1.0 } else { -1.0 };
                    let late_ps = match i % 41 {
                        3 => sign * 400.0,
                        7 => {
                            gross += 1;
                            sign * 800.0
                        }
                        _ => sample.clamp(-300.0, 300.0),
                    };
                    let depart = burst as i64 * BURST_SPACING_PS + seq as i64 * EXCHANGE_SPACING_PS;
                    rows.push(exchange(0, burst, seq, 0.0, 0, depart, late_ps));
                }
            }
            let result = fit(deembed(), FitOptions::default(), &rows);
            assert_eq!(result.rows[0].n_rejected, gross, "seed {seed}");
        }
    }

    #[test]
    fn outliers_also_shift_the_naive_mean() {
        // Guards the test above: without rejection the 20 ns late detections move the mean.
        let (rows, _) = sweep(6, 10);
        let keep_all = FitOptions {
            reject_mad: f64::INFINITY,
        };
        let result = fit(deembed(), keep_all, &rows);
        assert!(result.rows.iter().all(|r| r.n_rejected == 0));
        assert!(result
            .rows
            .iter()
            .any(|r| (r.delay_ps - K_DUT_PS[r.gain_index as usize]).abs() > 100.0));
    }

    #[test]
    fn cells_follow_reported_gain_not_sweep_point() {
        // One attenuation setting at an AGC switch point: the DUT alternates gain 1 and 2.
        let mut rows = Vec::new();
        for burst in 0..4u32 {
            for seq in 0..10u32 {
                let gain = 1 + seq % 2;
                let depart = burst as i64 * BURST_SPACING_PS + seq as i64 * EXCHANGE_SPACING_PS;
                rows.push(exchange(0, burst, seq, 25.0, gain, depart, 0.0));
            }
        }
        let result = fit(deembed(), FitOptions::default(), &rows);
        let gains: Vec<u32> = result.rows.iter().map(|r| r.gain_index).collect();
        assert_eq!(gains, vec![1, 2]);
        for row in &result.rows {
            assert!((row.delay_ps - K_DUT_PS[row.gain_index as usize]).abs() < 0.5);
            assert_eq!(row.n_used, 20);
            assert_eq!(row.n_bursts, 4);
        }
    }

    #[test]
    fn fallbacks_and_bad_rows_are_counted() {
        let mut rows = Vec::new();
        // Burst 0: three good exchanges in gain 0.
        for seq in 0..3u32 {
            rows.push(exchange(
                0,
                0,
                seq,
                0.0,
                0,
                seq as i64 * EXCHANGE_SPACING_PS,
                0.0,
            ));
        }
        // Burst 1: one usable exchange (falls back to burst 0's ratio), one lost, one without t3.
        let base = BURST_SPACING_PS;
        rows.push(exchange(0, 1, 0, 0.0, 0, base, 0.0));
        let mut lost = exchange(0, 1, 1, 0.0, 0, base + EXCHANGE_SPACING_PS, 0.0);
        lost.status = "lost".into();
        rows.push(lost);
        let mut no_t3 = exchange(0, 1, 2, 0.0, 0, base + 2 * EXCHANGE_SPACING_PS, 0.0);
        no_t3.t3_ps = None;
        rows.push(no_t3);
        // Burst 2: gain 1 in one burst only (single-burst cell); reference gain 5 unknown once.
        for seq in 0..4u32 {
            let depart = 2 * BURST_SPACING_PS + seq as i64 * EXCHANGE_SPACING_PS;
            let mut x = exchange(1, 0, seq, 20.0, 1, depart, 0.0);
            if seq == 3 {
                x.ref_gain = Some(5);
            }
            rows.push(x);
        }
        // Burst 3: a lone gain-2 exchange (cell skipped, burst falls back).
        rows.push(exchange(2, 0, 0, 40.0, 2, 3 * BURST_SPACING_PS, 0.0));

        let mut d = deembed();
        d.reference_delay = PerGain::Each(vec![K_REF_PS]);
        let result = fit(d, FitOptions::default(), &rows);
        let s = &result.summary;
        assert_eq!(s.rows_pushed, 11);
        assert_eq!(s.rows_unusable, 2);
        assert_eq!(s.rows_without_reference, 1);
        assert_eq!(s.bursts, 4);
        assert_eq!(s.bursts_fallback_ratio, 2);
        assert_eq!(s.cells_single_burst, 1);
        assert_eq!(s.cells_skipped, 1);
        let gains: Vec<u32> = result.rows.iter().map(|r| r.gain_index).collect();
        assert_eq!(gains, vec![0, 1]);
        // The fallback burst borrowed burst 0's ratio, so its exchange is still corrected.
        assert!((result.rows[0].delay_ps - K_DUT_PS[0]).abs() < 0.5);
        assert_eq!(result.rows[0].n_used, 4);
        assert_eq!(result.rows[0].n_bursts, 2);
        assert_eq!(result.rows[1].n_used, 3);
        assert_eq!(result.rows[1].n_bursts, 1);
    }

    #[test]
    fn identical_samples_keep_everything_at_the_median() {
        // Scaled MAD 0: nothing equal to the median may be rejected.
        let d = Deembed {
            cable_delay_ps: 0.0,
            atten_delay_ps_per_db: 0.0,
            reference_delay: PerGain::Same(0.0),
            applied_k_ps: None,
            measured: None,
        };
        let rows: Vec<Exchange> = (0..2u32)
            .flat_map(|burst| {
                (0..5u32).map(move |seq| {
                    let t1 = 1_000_000_000 * (seq as u64 + 10 * burst as u64);
                    let mut x = exchange(0, burst, seq, 0.0, 0, 0, 0.0);
                    x.t1_ps = Some(t1);
                    x.t2_ps = Some(t1 + 100);
                    x.t3_ps = Some(t1 + 200);
                    x.t4_ps = Some(t1 + 3_000);
                    x
                })
            })
            .collect();
        let result = fit(d, FitOptions::default(), &rows);
        assert_eq!(result.rows.len(), 1);
        let row = &result.rows[0];
        assert_eq!(row.n_used, 10);
        assert_eq!(row.n_rejected, 0);
        assert!((row.delay_ps - 2_900.0).abs() < 1e-9);
        assert_eq!(row.ci95_ps, 0.0);
    }

    #[test]
    fn interval_counts_bursts_not_exchanges() {
        // Each burst carries a shared offset (identical within the burst): the exchanges of a
        // burst are one piece of evidence, so the interval must be that of G = 8 burst means,
        // t975(7)·s_b/√8, not the s/√n that treats 80 exchanges as independent.
        let burst_offsets_ps = [-60.0, -20.0, 0.0, 20.0, 60.0, 40.0, -40.0, 0.0];
        let mut rows = Vec::new();
        for (burst, &offset) in burst_offsets_ps.iter().enumerate() {
            for seq in 0..10u32 {
                let depart = burst as i64 * BURST_SPACING_PS + seq as i64 * EXCHANGE_SPACING_PS;
                rows.push(exchange(0, burst as u32, seq, 0.0, 0, depart, offset));
            }
        }
        let result = fit(deembed(), FitOptions::default(), &rows);
        assert_eq!(result.rows.len(), 1);
        let row = &result.rows[0];
        assert_eq!((row.n_used, row.n_rejected, row.n_bursts), (80, 0, 8));
        let s_b = sample_sd(&burst_offsets_ps).unwrap_or(f64::NAN);
        let expect = t975(7.0).unwrap_or(f64::NAN) * s_b / 8f64.sqrt();
        assert!(
            (row.ci95_ps - expect).abs() < 0.01 * expect,
            "{} vs {expect}",
            row.ci95_ps
        );
        let naive = t975(79.0).unwrap_or(f64::NAN) * row.sd_ps / 80f64.sqrt();
        assert!(
            row.ci95_ps > 2.0 * naive,
            "{} vs naive {naive}",
            row.ci95_ps
        );
    }

    /// Rows with something for every part of a fit to do: three points of bursts whose clock
    /// ratios differ, three bandwidths, seven temperatures, outliers, an unusable row, and lone
    /// exchanges (bursts without a ratio of their own) early, in the middle (one in a cell
    /// that has no delays before it) and last.
    fn varied_rows() -> Vec<Exchange> {
        let (mut rows, _) = sweep(6, 10);
        for (i, row) in rows.iter_mut().enumerate() {
            let skew = u64::from(row.seq * (row.point + 1) * 1000);
            row.t2_ps = row.t2_ps.map(|t| t + skew);
            row.t3_ps = row.t3_ps.map(|t| t + skew);
            if row.burst % 2 == 0 {
                row.bw_mhz = 40;
            }
            row.temp_c = Some(20.0 + (i % 7) as f64);
        }
        rows[33].status = "lost".into();
        // A cell first filled after a lone exchange in it: 160 MHz, gain state 2.
        for row in rows.iter_mut().filter(|r| r.point == 2 && r.burst % 3 == 0) {
            row.bw_mhz = 160;
        }
        for (at, burst) in [(20, 100), (95, 101), (150, 102), (rows.len(), 103)] {
            let lone = Exchange {
                burst,
                ..rows[at - 1].clone()
            };
            rows.insert(at, lone);
        }
        rows[95].bw_mhz = 160;
        rows[95].dut_gain = Some(2);
        rows
    }

    /// No rejection: every delay, a lone exchange's too, counts in its cell's mean.
    const KEEP_ALL: FitOptions = FitOptions { reject_mad: 1e12 };

    /// A kept delay to the bit: (delay bits, burst, temperature bits).
    type KeptBits = (u64, u32, u32);

    /// Every cell's delays as kept, cells in key order, once the last burst is closed.
    fn kept_delays(fitter: &mut Fitter) -> Vec<(CellKey, Vec<KeptBits>)> {
        fitter.close_burst();
        let mut cells: Vec<_> = fitter
            .cells
            .list
            .iter()
            .map(|(cell, segments)| {
                let samples = segments.iter().flat_map(Segment::numbered);
                let kept = samples.map(|s| (s.k_ps.to_bits(), s.burst, s.temp_c.to_bits()));
                (*cell, kept.collect())
            })
            .collect();
        cells.sort_by_key(|&(cell, _)| cell);
        cells
    }

    /// A fitter per part of `rows` (split at the given row indices), appended in turn: the
    /// later ones first, so a continuing fitter takes one over too.
    fn fitter_in_parts(rows: &[Exchange], cuts: &[usize]) -> Fitter {
        let bounds: Vec<usize> = std::iter::once(0)
            .chain(cuts.iter().copied())
            .chain(std::iter::once(rows.len()))
            .collect();
        let mut fitters: Vec<Fitter> = bounds
            .windows(2)
            .enumerate()
            .map(|(i, part)| {
                let mut fitter = if i == 0 {
                    Fitter::new(deembed(), KEEP_ALL)
                } else {
                    Fitter::continuing(deembed(), KEEP_ALL)
                };
                for row in &rows[part[0]..part[1]] {
                    fitter.push(row);
                }
                fitter
            })
            .collect();
        while fitters.len() > 1 {
            let last = fitters.pop().expect("two or more");
            fitters.last_mut().expect("one or more").append(last);
        }
        fitters.pop().expect("one")
    }

    #[test]
    fn a_fit_in_parts_appended_is_the_fit_in_one_to_the_bit() {
        // The reference is the fit of all rows by one fitter; split at every burst boundary
        // (and at two at once) the appended parts must give the same table, drift and counts,
        // bursts without their own ratio included (they take the median of every earlier
        // burst's, which a continuing fitter learns only when appended).
        let rows = varied_rows();
        let mut one = Fitter::new(deembed(), KEEP_ALL);
        for row in &rows {
            one.push(row);
        }
        let delays = kept_delays(&mut one);
        let whole = one.finish();
        assert!(whole.summary.bursts_fallback_ratio >= 4);
        assert!(!whole.drift.is_empty());
        let boundaries: Vec<usize> = (1..rows.len())
            .filter(|&i| (rows[i].point, rows[i].burst) != (rows[i - 1].point, rows[i - 1].burst))
            .collect();
        assert!(boundaries.len() > 20);
        // Each cell's delays in file order too, so every sum runs as in one fitter.
        let cut_sets = boundaries.iter().map(|&cut| vec![cut]);
        let pairs = boundaries.windows(7).map(|w| vec![w[0], w[6]]);
        for cuts in cut_sets.chain(pairs) {
            let mut parts = fitter_in_parts(&rows, &cuts);
            assert_eq!(kept_delays(&mut parts), delays, "cuts at rows {cuts:?}");
            assert_eq!(parts.finish(), whole, "cuts at rows {cuts:?}");
        }
    }

    #[test]
    fn cells_summarised_on_two_threads_match_one_pass_over_the_cells_in_order() {
        // The reference is how the table was computed before cells got a second thread: one
        // pass over the cells in key order, one set of temperature bins. Six cells (two
        // bandwidths by three gain states), seven temperatures each, so both threads get cells
        // and every cell has drift bins; a lone burst in a cell of its own at 20 MHz.
        let (mut rows, _) = sweep(6, 10);
        for (i, row) in rows.iter_mut().enumerate() {
            if row.burst % 2 == 0 {
                row.bw_mhz = 40;
            }
            row.temp_c = Some(20.0 + (i % 7) as f64);
        }
        let lone = exchange(3, 0, 0, 0.0, 0, 0, 0.0);
        rows.extend((0..5).map(|seq| Exchange {
            bw_mhz: 20,
            seq,
            ..lone.clone()
        }));
        let mut fitter = Fitter::new(deembed(), FitOptions::default());
        for row in &rows {
            fitter.push(row);
        }
        fitter.close_burst();
        let (mut temps, mut scratch) = (TempBins::default(), Scratch::default());
        let (mut want, mut single_bursts, mut skipped) = (Vec::new(), 0, 0);
        let mut cells = fitter.cells.list.clone();
        cells.sort_unstable_by_key(|&(cell, _)| cell);
        for (cell, samples) in &cells {
            let mut notes = CellNotes::default();
            let options = FitOptions::default();
            let row = cell_row(
                *cell,
                samples,
                options,
                &mut temps,
                &mut scratch,
                &mut notes,
            );
            match row {
                Some(row) => want.push(row),
                None => skipped += 1,
            }
            single_bursts += u64::from(notes.single_burst);
        }
        let got = fitter.finish();
        assert_eq!(got.rows.len(), 7);
        assert_eq!(got.rows, want);
        assert_eq!(got.drift.len(), 6);
        assert_eq!(got.drift, temps.drift());
        assert_eq!(got.summary.cells_single_burst, single_bursts);
        assert_eq!(got.summary.cells_skipped, skipped);
    }
}
