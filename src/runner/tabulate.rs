//! From an exchanges file to a calibration table (and verification inputs): the one path both
//! `taucal run` and `taucal fit` take, so they agree to the last digit.
//!
//! A file whose rows report no DUT gain index is read twice: once to infer the gain states
//! from K's plateaus against receive level ([`crate::fit::state_labels`]), then to fit with
//! each row labelled by its inferred state; its table rows are marked `inferred`.

use crate::bench::{Bench, BenchUncertainty};
use crate::data::csv_io::ExchangeRows;
use crate::data::file_parts::{split_at_bursts, PartReader};
use crate::data::manifest::write_atomic;
use crate::data::{read_exchanges, Exchange, ReadError};
use crate::fit::model::{fill_table, ModelOptions};
use crate::fit::predict::{with_predicted_rows, PredictModel};
use crate::fit::state_labels::{StateCollector, StateLabels};
use crate::fit::verify::Checked;
use crate::fit::{burst_delays, caltable, Deembed, FitOptions, FitResult, Fitter, RowSource};
use crate::in_turn::in_turn;
use std::io::Read;
use std::path::Path;
use std::sync::atomic::{AtomicBool, Ordering};

/// How the table is fitted.
#[derive(Debug, Clone, PartialEq)]
pub struct FitSettings {
    /// Rejection threshold, scaled MADs.
    pub reject_mad: f64,
    /// Stages whose exchanges verify the table instead of fitting it.
    pub verify_stages: Vec<String>,
    /// The DUT's number of gain states: unmeasured states get modelled rows.
    pub gain_states: Option<u32>,
    /// The K a range-reporting DUT removed from its ranges; when `None`, the bench's.
    pub applied_k_ps: Option<f64>,
    /// The population model that predicts the cells not measured.
    pub predict: Option<PredictModel>,
}

/// The table, and the verification exchanges judged one by one.
pub struct Tabulated {
    /// The fitted table.
    pub fit: FitResult,
    /// Verification exchanges, de-embedded.
    pub checked: Vec<Checked>,
    /// The inferred gain states, when the DUT reported none.
    pub inferred: Option<StateLabels>,
}

/// Files from this size up are fitted in parts on every core at once (when there are two or
/// more): below it the fit takes a few tens of milliseconds anyway.
const SPLIT_FROM_BYTES: u64 = 8 << 20;

/// Parts per thread: the threads take parts in turn, so one that runs slower (a busy
/// neighbour on its core) takes fewer, and all end within about a part of each other.
const PARTS_PER_THREAD: usize = 4;

/// The most threads a fit uses: every part holds its file open until it is read, so parts are
/// kept to a few dozen however many cores there are.
const MAX_THREADS: usize = 16;

/// Streams `exchanges` through the fitter with the bench's path and reference delays; rows of
/// verification stages are set aside and de-embedded burst by burst instead.
pub fn fit_file(
    exchanges: &Path,
    bench: &Bench,
    settings: &FitSettings,
) -> Result<Tabulated, ReadError> {
    fit_file_split_from(exchanges, bench, settings, SPLIT_FROM_BYTES)
}

/// [`fit_file`], splitting files of `split_from` bytes or more.
fn fit_file_split_from(
    exchanges: &Path,
    bench: &Bench,
    settings: &FitSettings,
    split_from: u64,
) -> Result<Tabulated, ReadError> {
    let deembed = Deembed::new(&bench.path, bench.reference.delay_ps.clone())
        .with_measured(bench.measured_path.clone())
        .with_applied_k(settings.applied_k_ps.or(bench.applied_k_ps()));
    let options = FitOptions {
        reject_mad: settings.reject_mad,
    };
    let labels = infer_labels(exchanges, &deembed, settings)?;
    let labels = labels.as_ref();
    let threads = std::thread::available_parallelism().map_or(1, |n| n.get().min(MAX_THREADS));
    let in_parts = (threads > 1)
        .then(|| split_at_bursts(exchanges, split_from, threads * PARTS_PER_THREAD))
        .flatten()
        .and_then(|parts| fit_parts(parts, threads, &deembed, options, settings, labels));
    let (fitter, bursts) = match in_parts {
        Some(done) => done,
        None => {
            let mut fitter = Fitter::new(deembed.clone(), options);
            let bursts = feed(
                &mut read_exchanges(exchanges)?,
                &mut fitter,
                settings,
                labels,
            )?;
            (fitter, bursts)
        }
    };
    let mut fit = fitter.finish();
    if fit.summary.rows_judged_late > 0 {
        // Kept by the rejection window but more likely late paths than the core: say so, so
        // a bench with near multipath is seen as one.
        tracing::info!(
            "{} rows judged late (a late side beside the core of their cells)",
            fit.summary.rows_judged_late
        );
    }
    if labels.is_some() {
        for row in &mut fit.rows {
            row.source = RowSource::Inferred;
        }
    }
    if let Some(n) = settings.gain_states {
        let wanted: Vec<u32> = (0..n).collect();
        match fill_table(&fit.rows, &wanted, ModelOptions::default()) {
            Ok(rows) => fit.rows = rows,
            Err(e) => tracing::warn!(
                "unmeasured gain states left out of the table, not modelled: {e}. Measure them, \
                 or more states, so that a model can be chosen and checked"
            ),
        }
    }
    if let Some(model) = &settings.predict {
        match with_predicted_rows(model, &fit.rows) {
            Ok(rows) => fit.rows = rows,
            Err(e) => tracing::warn!(
                "unmeasured cells left out of the table, not predicted: {e}. The population \
                 model does not fit this unit's measured cells; rebuild it with `taucal fleet plan`"
            ),
        }
    }
    let fallback = 1.0 + fit.summary.median_clock_offset_ppm.unwrap_or(0.0) * 1e-6;
    let mut checked = Vec::new();
    for burst in &bursts {
        for (x, k) in burst.iter().zip(burst_delays(&deembed, burst, fallback)) {
            if let (Some(k_ps), Some(gain_index)) = (k, x.dut_gain) {
                checked.push(Checked {
                    center_mhz: x.center_mhz,
                    bw_mhz: x.bw_mhz,
                    atten_db: x.atten_db,
                    gain_index,
                    k_ps,
                });
            }
        }
    }
    Ok(Tabulated {
        fit,
        checked,
        inferred: labels.cloned(),
    })
}

/// The inferred state of every burst when no usable row of the file reports a DUT gain index;
/// `None` (after reading only up to the first that does) otherwise.
fn infer_labels(
    exchanges: &Path,
    deembed: &Deembed,
    settings: &FitSettings,
) -> Result<Option<StateLabels>, ReadError> {
    let mut collector = StateCollector::new(deembed.clone(), &settings.verify_stages);
    let mut rows = read_exchanges(exchanges)?;
    let mut row = Exchange::default();
    while rows.read_into(&mut row)? {
        collector.push(&row);
        if collector.reported_gain() {
            return Ok(None);
        }
    }
    let labels = collector.finish();
    if let Some(l) = &labels {
        for ((center_mhz, bw_mhz), states) in &l.channels {
            let switches: Vec<String> = states
                .switches
                .iter()
                .map(|s| format!("{} → {} at {:.2} dB", s.below, s.below + 1, s.atten_db))
                .collect();
            tracing::info!(
                "no DUT gain index reported: {} gain states inferred from K on {center_mhz} MHz / \
                 {bw_mhz} MHz{}{}",
                states.states.len(),
                if switches.is_empty() {
                    ""
                } else {
                    ", switching "
                },
                switches.join(", ")
            );
        }
        if l.near_switch_bursts > 0 {
            tracing::info!(
                "{} bursts next to an inferred switch left out of the table: their state is unsure",
                l.near_switch_bursts
            );
        }
        if l.unsure_verify_bursts > 0 {
            tracing::warn!(
                "{} verification bursts not judged: their levels lie where the inferred state is \
                 unsure (around a switch); a finer gain map (more frames a point) narrows that",
                l.unsure_verify_bursts
            );
        }
    }
    Ok(labels)
}

/// Verification bursts: consecutive rows of one burst of a verification stage.
type Bursts = Vec<Vec<Exchange>>;

/// Gives `rows` to `fitter`, setting verification stages' rows aside burst by burst; rows
/// without a gain index take their inferred state from `labels`.
fn feed<R: Read>(
    rows: &mut ExchangeRows<R>,
    fitter: &mut Fitter,
    settings: &FitSettings,
    labels: Option<&StateLabels>,
) -> Result<Bursts, ReadError> {
    let mut bursts: Bursts = Vec::new();
    // One row reused for the whole file: no allocation per exchange.
    let mut row = Exchange::default();
    while rows.read_into(&mut row)? {
        if let Some(l) = labels {
            l.apply(&mut row);
        }
        if settings.verify_stages.contains(&row.stage) {
            match bursts.last_mut() {
                Some(b)
                    if b[0].stage == row.stage
                        && b[0].point == row.point
                        && b[0].burst == row.burst =>
                {
                    b.push(row.clone())
                }
                _ => bursts.push(vec![row.clone()]),
            }
        } else {
            fitter.push(&row);
        }
    }
    Ok(bursts)
}

/// Fits the parts of a file on `threads` threads (this one and more), each taking the next
/// part not yet taken, then appends the parts' fitters in file order; `None` if any part met
/// anything but plain lines (an error, or a quote that may have hidden a line end from a cut),
/// so that the file is read whole, as one reader reports it.
///
/// On two cores this is what makes a large fit fast: each thread reads, parses and fits whole
/// parts, with nothing handed between threads row by row (2M rows: 0.405 s median against
/// 0.500 s for one reading thread feeding one fitting thread). With four parts per thread, a
/// thread slowed by a busy neighbour takes fewer (2M rows: 0.375 s median against 0.400 s
/// with one part per thread; eight per thread measured the same as four).
fn fit_parts(
    parts: Vec<ExchangeRows<PartReader>>,
    threads: usize,
    deembed: &Deembed,
    options: FitOptions,
    settings: &FitSettings,
    labels: Option<&StateLabels>,
) -> Option<(Fitter, Bursts)> {
    // A part that is not plain fails the whole split: the parts not yet taken are skipped.
    let failed = AtomicBool::new(false);
    let (fitted, _) = in_turn(
        parts.into_iter().enumerate().collect(),
        threads,
        "fit-parts",
        || (),
        |(), (i, rows)| {
            if failed.load(Ordering::Relaxed) {
                return None;
            }
            let fitter = if i == 0 {
                Fitter::new(deembed.clone(), options)
            } else {
                Fitter::continuing(deembed.clone(), options)
            };
            let done = fit_part(rows, fitter, settings, labels);
            failed.fetch_or(done.is_none(), Ordering::Relaxed);
            done
        },
    );
    let mut fitted = fitted.into_iter();
    let (mut fitter, mut bursts) = fitted.next()??;
    for part in fitted {
        let (later, later_bursts) = part?;
        fitter.append(later);
        bursts.extend(later_bursts);
    }
    Some((fitter, bursts))
}

/// One part of [`fit_parts`]: `None` unless every line was plain.
fn fit_part<R: Read>(
    mut rows: ExchangeRows<R>,
    mut fitter: Fitter,
    settings: &FitSettings,
    labels: Option<&StateLabels>,
) -> Option<(Fitter, Bursts)> {
    let bursts = feed(&mut rows, &mut fitter, settings, labels).ok()?;
    // Parts wait for each other: growth room held meanwhile would add to the peak.
    fitter.shrink_to_fit();
    rows.all_plain().then_some((fitter, bursts))
}

/// The table as `caltable.csv` text, with each cell's budget from the bench's uncertainties.
pub fn caltable_text(result: &FitResult, bench: &BenchUncertainty) -> std::io::Result<Vec<u8>> {
    let mut out = Vec::new();
    caltable::write_caltable(&mut out, &result.rows, bench).map_err(std::io::Error::other)?;
    Ok(out)
}

/// Writes `caltable.csv` atomically.
pub fn write_table(
    path: &Path,
    result: &FitResult,
    bench: &BenchUncertainty,
) -> std::io::Result<()> {
    write_atomic(path, &caltable_text(result, bench)?)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::{ExchangeWriter, RecordSink, Taken};
    use crate::sim::{BurstRequest, SimBench};

    /// A file from the demo bench's simulator: a sweep stage over its three gain states and a
    /// verification stage in turn, with lost exchanges, and bursts left with one usable
    /// exchange (no clock ratio of their own).
    fn simulated_file(path: &Path, bench: &Bench, rounds: u32) {
        let truth = bench.sim.as_ref().expect("the demo bench is simulated");
        let mut sim = SimBench::new(truth, &bench.path, 11).expect("simulator");
        let mut writer = ExchangeWriter::create(path).expect("file");
        let mut bench_ps = 0;
        for round in 0..rounds {
            for (stage, attens) in [
                ("sweep", [24.0, 50.0, 75.0]),
                ("verify", [30.0, 60.0, 70.0]),
            ] {
                for (point, atten_db) in attens.into_iter().enumerate() {
                    sim.set_atten_db(atten_db);
                    let request = BurstRequest {
                        frames: 8,
                        center_mhz: 5180,
                        bw_mhz: 20,
                    };
                    let outcome = sim.run_burst(bench_ps, &request);
                    bench_ps += outcome.duration_ps;
                    let at = Taken {
                        stage,
                        point: point as u32,
                        burst: round,
                        atten_db,
                        center_mhz: 5180,
                        bw_mhz: 20,
                        temp_c: sim.dut_temp_c(),
                        time_s: Some(bench_ps as f64 * 1e-12),
                    };
                    let lone = (round + point as u32) % 17 == 0;
                    let rows: Vec<Exchange> = outcome
                        .exchanges
                        .into_iter()
                        .enumerate()
                        .map(|(seq, x)| {
                            let mut row = Exchange::recorded(&at, seq as u32, x);
                            if (lone && seq > 0) || (seq == 3 && round % 5 == 0) {
                                row.status = "lost".into();
                            }
                            row
                        })
                        .collect();
                    writer.write_burst(&rows).expect("written");
                }
            }
        }
    }

    /// The demo bench and a [`simulated_file`] of `rounds` rounds in a temporary directory.
    fn demo_and_file(rounds: u32) -> (Bench, tempfile::TempDir, std::path::PathBuf) {
        let bench = Bench::built_in().expect("demo bench");
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("exchanges.csv");
        simulated_file(&path, &bench, rounds);
        (bench, dir, path)
    }

    #[test]
    fn a_file_fitted_in_parts_gives_what_one_pass_gives_to_the_bit() {
        // Reference: the same file fitted in one pass, never split.
        let (bench, _dir, path) = demo_and_file(300);
        let settings = FitSettings {
            reject_mad: 5.0,
            verify_stages: vec!["verify".into()],
            gain_states: Some(4),
            predict: None,
            applied_k_ps: None,
        };
        let one = fit_file_split_from(&path, &bench, &settings, u64::MAX).expect("fit");
        assert!(one.fit.summary.bursts_fallback_ratio >= 30);
        assert!(!one.checked.is_empty());
        // The split is taken: no part meets anything but plain lines.
        let deembed = Deembed::new(&bench.path, bench.reference.delay_ps.clone());
        let options = FitOptions { reject_mad: 5.0 };
        let mut whole = Fitter::new(deembed.clone(), options);
        let whole_bursts = feed(
            &mut read_exchanges(&path).expect("open"),
            &mut whole,
            &settings,
            None,
        );
        let whole_bursts = whole_bursts.expect("plain rows");
        let whole = format!("{:?}", whole.finish());
        for (parts, threads) in [(2, 2), (8, 2), (5, 3), (3, 1)] {
            let split = split_at_bursts(&path, 0, parts).expect("a split");
            let (fitter, bursts) =
                fit_parts(split, threads, &deembed, options, &settings, None).expect("plain parts");
            assert_eq!(format!("{:?}", fitter.finish()), whole, "{parts} parts");
            assert_eq!(bursts, whole_bursts, "{parts} parts");
        }
        let split = fit_file_split_from(&path, &bench, &settings, 0).expect("fit");
        // As Debug text: shortest round-trip numbers, so equal to the bit, and a modelled
        // row's NaN spread equals itself.
        assert_eq!(format!("{:?}", split.fit), format!("{:?}", one.fit));
        assert_eq!(split.checked, one.checked);
    }

    #[test]
    fn a_gainless_file_gets_inferred_states_alike_in_parts_and_in_one_pass() {
        // The demo bench's file with every gain index blanked, as a device reporting none
        // would have written it: the table comes from inferred states, marked so, with the
        // same cells and K (within the intervals) as the indexed file, and a split fit
        // agrees with one pass to the bit.
        let (bench, _dir, path) = demo_and_file(300);
        let settings = FitSettings {
            reject_mad: 5.0,
            verify_stages: vec!["verify".into()],
            gain_states: None,
            predict: None,
            applied_k_ps: None,
        };
        let indexed = fit_file_split_from(&path, &bench, &settings, u64::MAX).expect("fit");
        assert!(indexed.inferred.is_none());
        let text = std::fs::read_to_string(&path).expect("read");
        let mut lines = text.lines();
        let header = lines.next().expect("header");
        let gain_col = header
            .split(',')
            .position(|c| c == "dut_gain")
            .expect("dut_gain column");
        let blanked: Vec<String> = std::iter::once(header.to_string())
            .chain(lines.map(|l| {
                let mut cells: Vec<&str> = l.split(',').collect();
                cells[gain_col] = "";
                cells.join(",")
            }))
            .collect();
        std::fs::write(&path, blanked.join("\n") + "\n").expect("write");
        let one = fit_file_split_from(&path, &bench, &settings, u64::MAX).expect("fit");
        let split = fit_file_split_from(&path, &bench, &settings, 0).expect("fit");
        assert_eq!(format!("{:?}", split.fit), format!("{:?}", one.fit));
        assert_eq!(split.checked, one.checked);
        assert!(one.inferred.is_some());
        assert_eq!(one.fit.rows.len(), indexed.fit.rows.len());
        for (a, b) in one.fit.rows.iter().zip(&indexed.fit.rows) {
            assert_eq!(
                (a.gain_index, a.source),
                (b.gain_index, RowSource::Inferred)
            );
            assert!(
                (a.delay_ps - b.delay_ps).abs() <= a.ci95_ps.max(b.ci95_ps),
                "{a:?} vs {b:?}"
            );
        }
        // Every verification level (30, 60, 70 dB) lies between fitted points (24, 50, 75 dB)
        // that hold different states: the level cannot tell the state there, so none is judged.
        assert!(!indexed.checked.is_empty());
        assert!(one.checked.is_empty());
        assert!(one.inferred.is_some_and(|l| l.unsure_verify_bursts == 900));
    }

    #[test]
    fn a_bad_row_in_any_part_is_reported_as_one_pass_reports_it() {
        // Reference: the error of the one-pass reader, with its line and column.
        let (bench, _dir, path) = demo_and_file(60);
        let text = std::fs::read_to_string(&path).expect("read");
        let settings = FitSettings {
            reject_mad: 5.0,
            verify_stages: Vec::new(),
            gain_states: None,
            predict: None,
            applied_k_ps: None,
        };
        let lines = text.lines().count();
        for bad_line in [10, lines - 10] {
            let broken: Vec<String> = text
                .lines()
                .enumerate()
                .map(|(i, l)| {
                    if i + 1 == bad_line {
                        l.replacen(",5180,", ",51x0,", 1)
                    } else {
                        l.to_string()
                    }
                })
                .collect();
            std::fs::write(&path, broken.join("\n") + "\n").expect("write");
            let one = fit_file_split_from(&path, &bench, &settings, u64::MAX).err();
            let split = fit_file_split_from(&path, &bench, &settings, 0).err();
            let one = one.expect("an error").to_string();
            assert!(one.contains(&format!(":{bad_line}:")), "{one}");
            assert_eq!(split.map(|e| e.to_string()), Some(one));
        }
    }
}
