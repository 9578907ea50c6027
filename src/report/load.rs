//! The loader: a run directory (and the bench it ran on) into a [`ReportData`]. All file reading
//! for the report happens here, so the plots and the page are pure functions of the data.

use super::drift_plot::BenchTime;
use super::{
    BudgetLine, BurstPoint, CellSpread, GainMapRow, LevelGains, ReportData, ReportError,
    VerifyPoint,
};
use crate::bench::Bench;
use crate::data::run_dir::files;
use crate::data::{read_exchanges, Exchange, Manifest};
use crate::fit::rtt::COUNTER_BITS;
use crate::fit::state_labels::StateCollector;
use crate::fit::stats::median;
use crate::fit::{burst_delays, read_caltable, Deembed, TableRow};
use serde::Deserialize;
use std::collections::BTreeMap;
use std::path::Path;

/// Reads what the report shows from `dir`. `manifest.toml` and `exchanges.csv` must be there;
/// `caltable.csv`, `gainmap.csv` and `verify.csv` are shown when present and listed as absent
/// otherwise.
pub fn load(dir: &Path, bench: &Bench) -> Result<ReportData, ReportError> {
    let manifest_path = required(dir, files::MANIFEST)?;
    let manifest = Manifest::read(&manifest_path).map_err(|e| ReportError::Read {
        path: manifest_path.display().to_string(),
        message: e.to_string(),
    })?;
    let exchanges_path = required(dir, files::EXCHANGES)?;
    let read_err = |path: &Path, message: String| ReportError::Read {
        path: path.display().to_string(),
        message,
    };
    let mut rows: Vec<Exchange> = Vec::new();
    for row in
        read_exchanges(&exchanges_path).map_err(|e| read_err(&exchanges_path, e.to_string()))?
    {
        rows.push(row.map_err(|e| read_err(&exchanges_path, e.to_string()))?);
    }
    let mut absent = Vec::new();
    let table_path = dir.join(files::CALTABLE);
    let table = if table_path.is_file() {
        let file =
            std::fs::File::open(&table_path).map_err(|e| read_err(&table_path, e.to_string()))?;
        read_caltable(file).map_err(|e| read_err(&table_path, e.to_string()))?
    } else {
        absent.push(files::CALTABLE);
        Vec::new()
    };
    let budget = optional_csv::<BudgetLine>(dir, files::BUDGET, &mut absent)?;
    let gainmap = optional_csv::<GainMapRow>(dir, files::GAINMAP, &mut absent)?;
    let verify = optional_csv::<VerifyPoint>(dir, files::VERIFY, &mut absent)?;
    Ok(assemble(
        Written {
            manifest,
            table,
            budget,
            gainmap,
            verify,
            absent,
        },
        rows,
        bench,
    ))
}

/// What a run directory holds besides its exchanges, read or (for a run under way) made so far.
#[derive(Debug, Clone)]
pub struct Written {
    /// The run's manifest.
    pub manifest: Manifest,
    /// The calibration table.
    pub table: Vec<TableRow>,
    /// Each cell's uncertainty budget.
    pub budget: Vec<BudgetLine>,
    /// Gain-state plateaus.
    pub gainmap: Vec<GainMapRow>,
    /// Verification rows.
    pub verify: Vec<VerifyPoint>,
    /// Optional files not there.
    pub absent: Vec<&'static str>,
}

/// The report's data from the run's files and its exchanges: everything drawn from the rows
/// (spreads, burst medians, levels) is derived here. Pure, so a page of a run still under way
/// is drawn as the finished report is.
pub fn assemble(written: Written, mut rows: Vec<Exchange>, bench: &Bench) -> ReportData {
    let Written {
        manifest,
        table,
        budget,
        gainmap,
        verify,
        absent,
    } = written;
    let deembed = Deembed::new(&bench.path, bench.reference.delay_ps.clone())
        .with_measured(bench.measured_path.clone())
        .with_applied_k(manifest.fit.applied_k_ps.or(bench.applied_k_ps()));
    label_inferred(&mut rows, &deembed, &manifest.fit.verify_stages);
    let (times, bench_time) = bench_times_s(&rows);
    let mut cells: BTreeMap<(u32, u32, u32), Vec<f64>> = BTreeMap::new();
    let mut bursts = Vec::new();
    for (range, is_fit) in burst_ranges(&rows, &manifest.fit.verify_stages) {
        let burst = &rows[range.clone()];
        // A NaN fallback leaves out bursts too short to estimate their own clock rate, rather
        // than guessing one for them.
        let delays = burst_delays(&deembed, burst, f64::NAN);
        let mut by_gain: BTreeMap<u32, Vec<f64>> = BTreeMap::new();
        for (x, k) in burst.iter().zip(&delays) {
            if let (Some(k), Some(g)) = (k, x.dut_gain) {
                by_gain.entry(g).or_default().push(*k);
                if is_fit {
                    cells
                        .entry((x.center_mhz, x.bw_mhz, g))
                        .or_default()
                        .push(*k);
                }
            }
        }
        let time_s = times[range.start..range.end]
            .iter()
            .flatten()
            .copied()
            .next();
        let temp_c = burst.iter().find_map(|x| x.temp_c);
        for (gain_index, mut ks) in by_gain {
            if let (Some(time_s), Some(k)) = (time_s, median(&mut ks)) {
                bursts.push(BurstPoint {
                    time_s,
                    gain_index,
                    median_k_ps: k,
                    temp_c,
                    verify: !is_fit,
                });
            }
        }
    }
    let cells = cells
        .into_iter()
        .map(|((center_mhz, bw_mhz, gain_index), k_ps)| CellSpread {
            center_mhz,
            bw_mhz,
            gain_index,
            k_ps,
        })
        .collect();
    ReportData {
        manifest,
        table,
        budget,
        gainmap,
        verify,
        cells,
        bursts,
        bench_time,
        levels: level_gains(&rows, bench),
        absent,
    }
}

/// Gives the rows of a DUT that reports no gain index their inferred states, as the table's
/// fit did, so the report's plots show the states the table holds.
fn label_inferred(rows: &mut [Exchange], deembed: &Deembed, verify_stages: &[String]) {
    let mut collector = StateCollector::new(deembed.clone(), verify_stages);
    for x in rows.iter() {
        collector.push(x);
        if collector.reported_gain() {
            return;
        }
    }
    if let Some(labels) = collector.finish() {
        rows.iter_mut().for_each(|x| labels.apply(x));
    }
}

fn required(dir: &Path, name: &'static str) -> Result<std::path::PathBuf, ReportError> {
    let path = dir.join(name);
    if path.is_file() {
        Ok(path)
    } else {
        Err(ReportError::Missing {
            dir: dir.display().to_string(),
            file: name,
        })
    }
}

fn optional_csv<T: for<'de> Deserialize<'de>>(
    dir: &Path,
    name: &'static str,
    absent: &mut Vec<&'static str>,
) -> Result<Vec<T>, ReportError> {
    let path = dir.join(name);
    if !path.is_file() {
        absent.push(name);
        return Ok(Vec::new());
    }
    let err = |message: String| ReportError::Read {
        path: path.display().to_string(),
        message,
    };
    let mut rdr = csv::Reader::from_path(&path).map_err(|e| err(e.to_string()))?;
    rdr.deserialize()
        .map(|r| r.map_err(|e| err(e.to_string())))
        .collect()
}

/// Index ranges of consecutive rows of one burst, and whether the burst fits the table (not a
/// verification stage's).
fn burst_ranges(
    rows: &[Exchange],
    verify_stages: &[String],
) -> Vec<(std::ops::Range<usize>, bool)> {
    let mut out: Vec<(std::ops::Range<usize>, bool)> = Vec::new();
    for (i, x) in rows.iter().enumerate() {
        match out.last_mut() {
            Some((r, _))
                if rows[r.start].stage == x.stage
                    && rows[r.start].point == x.point
                    && rows[r.start].burst == x.burst =>
            {
                r.end = i + 1
            }
            _ => out.push((i..i + 1, !verify_stages.contains(&x.stage))),
        }
    }
    out
}

/// Bench time of each exchange, and where it came from: the rows' own `time_s` where the
/// record has it (version 2), else the reference's counter (see [`counter_times_s`]).
fn bench_times_s(rows: &[Exchange]) -> (Vec<Option<f64>>, BenchTime) {
    if rows.iter().any(|x| x.time_s.is_some()) {
        (rows.iter().map(|x| x.time_s).collect(), BenchTime::Recorded)
    } else {
        (counter_times_s(rows), BenchTime::Counter)
    }
}

/// Bench time of each exchange, seconds since the first: the reference's departure counter t1,
/// unwrapped. The counter only moves forward, so each step is the forward distance modulo 2^48;
/// a pause longer than one wrap (281 s) between two exchanges would fold, which the report says.
fn counter_times_s(rows: &[Exchange]) -> Vec<Option<f64>> {
    let modulus = 1u64 << COUNTER_BITS;
    let mut last: Option<u64> = None;
    let mut elapsed_ps: u64 = 0;
    rows.iter()
        .map(|x| {
            let t1 = x.t1_ps? % modulus;
            if let Some(prev) = last {
                elapsed_ps += t1.wrapping_sub(prev) % modulus;
            }
            last = Some(t1);
            Some(elapsed_ps as f64 * 1e-12)
        })
        .collect()
}

/// Usable exchanges per attenuation and reported gain state, over the whole run.
fn level_gains(rows: &[Exchange], bench: &Bench) -> Vec<LevelGains> {
    // Millidecibel keys: attenuator settings are on a coarser grid than that.
    let mut by_level: BTreeMap<(u32, u32, i64), BTreeMap<u32, u64>> = BTreeMap::new();
    for x in rows.iter().filter(|x| x.is_usable()) {
        if let Some(g) = x.dut_gain {
            let key = (x.center_mhz, x.bw_mhz, (x.atten_db * 1000.0).round() as i64);
            *by_level.entry(key).or_default().entry(g).or_insert(0) += 1;
        }
    }
    by_level
        .into_iter()
        .map(|((center_mhz, bw_mhz, mdb), counts)| LevelGains {
            center_mhz,
            bw_mhz,
            rx_dbm: bench.dut_rx_dbm(mdb as f64 / 1000.0),
            counts,
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A row of burst `burst` whose reference departed at counter `t1_ps`, recorded at bench
    /// time `time_s` where given.
    fn row(burst: u32, t1_ps: u64, time_s: Option<f64>) -> Exchange {
        Exchange {
            stage: "sweep".into(),
            burst,
            t1_ps: Some(t1_ps),
            time_s,
            ..Exchange::default()
        }
    }

    #[test]
    fn recorded_bench_time_is_the_axis_where_the_counter_misses_a_settle_wait() {
        // Two bursts 1 ms apart on the reference's counter, with a 2 s settle wait between
        // them that the counter did not see: the recorded bench time keeps the wait.
        let rows = [
            row(0, 5_000_000_000, Some(0.25)),
            row(0, 5_001_000_000, Some(0.25)),
            row(1, 5_002_000_000, Some(2.26)),
        ];
        let (times, source) = bench_times_s(&rows);
        assert_eq!(source, BenchTime::Recorded);
        assert_eq!(times, vec![Some(0.25), Some(0.25), Some(2.26)]);
    }

    #[test]
    fn a_record_without_bench_time_falls_back_to_the_unwrapped_counter() {
        // Known answer: 48-bit counters (IEEE 802.11-2016 FTM TOD/TOA fields) wrap at 2^48 ps;
        // 1 ps before the wrap to 2 ps after it is 3 ps, and 10^12 ps is 1 s.
        let wrap = 1u64 << 48;
        let rows = [
            row(0, wrap - 1, None),
            row(0, 2, None),
            row(1, 1_000_000_000_002, None),
        ];
        let (times, source) = bench_times_s(&rows);
        assert_eq!(source, BenchTime::Counter);
        let want = [0.0, 3e-12, 1.000_000_000_003];
        assert_eq!(times.len(), want.len());
        for (got, want) in times.iter().zip(want) {
            let got = got.expect("a time");
            assert!(
                (got - want).abs() <= 1e-15 * want.max(1e-12),
                "{got} vs {want}"
            );
        }
    }
}
