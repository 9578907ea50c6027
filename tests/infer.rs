//! Gain states inferred for devices that report no gain index (design §6), measured over many
//! seeds of the simulated Marlet-40 and Vellisk-5 benches (not the demo's): a one-state device
//! is not split, a three-state device with hysteresis gets its states and switch levels, and a
//! run on a gainless bench gives an `inferred` table that covers the truth as the indexed form
//! of the same exchanges does, and a verification verdict.

use crate::support::{repo, root, Taucal};
use taucal::bench::Bench;
use taucal::data::{Exchange, ExchangeWriter, RecordSink, Taken};
use taucal::fit::state_labels::StateCollector;
use taucal::fit::{Deembed, RowSource};
use taucal::runner::tabulate::{fit_file, FitSettings};
use taucal::sim::{BurstRequest, DutReports, SimBench, SimTruth};

/// The bench file's facts and truth.
fn bench(name: &str) -> Bench {
    Bench::load(&root().join("recipes/benches").join(name)).expect("bench loads")
}

/// One stage of a simulated file: its name, attenuations in the order visited, bursts per
/// visit and frames per burst.
struct Stage<'a> {
    name: &'a str,
    attens_db: Vec<f64>,
    bursts: u32,
    frames: u32,
}

/// The rows the DUT of `truth` reports for `stages`, in order, one point per visit.
fn simulate(bench: &Bench, truth: &SimTruth, seed: u64, stages: &[Stage]) -> Vec<Exchange> {
    let mut sim = SimBench::new(truth, &bench.path, seed).expect("truth");
    let (mut rows, mut now_ps) = (Vec::new(), 0u64);
    for stage in stages {
        let request = BurstRequest {
            frames: stage.frames,
            center_mhz: 5180,
            bw_mhz: 80,
        };
        for (point, atten_db) in stage.attens_db.iter().enumerate() {
            sim.set_atten_db(*atten_db);
            for burst in 0..stage.bursts {
                let out = sim.run_burst(now_ps, &request);
                now_ps += out.duration_ps + 5_000_000_000;
                let at = Taken {
                    stage: stage.name,
                    point: point as u32,
                    burst,
                    atten_db: *atten_db,
                    center_mhz: 5180,
                    bw_mhz: 80,
                    temp_c: None,
                    time_s: Some(now_ps as f64 * 1e-12),
                };
                let report = sim.report(out.exchanges, &request);
                rows.extend(
                    report
                        .rows
                        .into_iter()
                        .enumerate()
                        .map(|(seq, x)| Exchange::recorded(&at, seq as u32, x)),
                );
            }
        }
    }
    rows
}

/// `from` to `to` dB in `step` dB steps, inclusive.
fn steps(from: f64, to: f64, step: f64) -> Vec<f64> {
    let n = ((to - from) / step).round() as usize;
    (0..=n).map(|i| from + step * i as f64).collect()
}

/// Up then down, as a gain-map stage sweeps.
fn up_and_down(from: f64, to: f64, step: f64) -> Vec<f64> {
    let up = steps(from, to, step);
    up.iter().chain(up.iter().rev().skip(1)).copied().collect()
}

/// The de-embedding a run uses: the bench's path and reference, and the K a range device
/// removed, as it reports it.
fn deembed(bench: &Bench, truth: &SimTruth) -> Deembed {
    Deembed::new(&bench.path, bench.reference.delay_ps.clone())
        .with_applied_k(truth.dut.applied_k_ps)
}

/// The inferred states of the one channel of `rows`.
fn inferred(
    bench: &Bench,
    truth: &SimTruth,
    rows: &[Exchange],
) -> taucal::fit::infer_states::InferredStates {
    let mut c = StateCollector::new(deembed(bench, truth), &[]);
    for x in rows {
        c.push(x);
    }
    let labels = c.finish().expect("no gain index reported: states inferred");
    labels.channels.into_values().next().expect("one channel")
}

#[test]
fn a_one_state_device_is_not_split_in_98_percent_of_seeds() {
    // The Marlet-40 bench made a one-state device (no thresholds), reporting every frame's RTT
    // (late detections and all): a plain sweep of the usable range, 2 bursts of 16 a point.
    let b = bench("sim-marlet40.toml");
    let mut truth = b.sim.clone().expect("simulated");
    truth.dut.gain_thresholds_dbm = Vec::new();
    truth.dut.rx_delay_ps = vec![1010.0];
    truth.dut.reports = DutReports::RttFrames;
    let stages = [Stage {
        name: "sweep",
        attens_db: steps(18.0, 88.0, 2.0),
        bursts: 2,
        frames: 16,
    }];
    let seeds = 200;
    let mut split = 0;
    for seed in 0..seeds {
        let rows = simulate(&b, &truth, seed, &stages);
        let states = inferred(&b, &truth, &rows);
        if states.states.len() != 1 {
            split += 1;
            eprintln!("seed {seed}: {:?}", states.states);
        }
    }
    eprintln!("one-state device: false split in {split} of {seeds} seeds");
    assert!(
        f64::from(split) <= 0.02 * seeds as f64,
        "{split} of {seeds} seeds split one state"
    );
}

/// Seeds of `truth` (mapped up and down in `step_db` steps, 2 bursts of `frames` a point) in
/// which three states are found, each switch within the step plus the hysteresis of its
/// threshold; and the worst switch error among those.
fn placed(b: &Bench, truth: &SimTruth, step_db: f64, frames: u32, seeds: u64) -> (u32, f64) {
    let band_db = truth.dut.gain_hysteresis_db;
    let stages = [Stage {
        name: "map",
        attens_db: up_and_down(16.0, 86.0, step_db),
        bursts: 2,
        frames,
    }];
    let (mut right, mut worst_db) = (0, 0.0f64);
    for seed in 0..seeds {
        let rows = simulate(b, truth, 100 + seed, &stages);
        let states = inferred(b, truth, &rows);
        let errors: Vec<f64> = states
            .switches
            .iter()
            .zip(&truth.dut.gain_thresholds_dbm)
            .map(|(s, t)| (b.dut_rx_dbm(s.atten_db) - t).abs())
            .collect();
        if states.states.len() == 3 && errors.iter().all(|e| *e <= step_db + band_db) {
            right += 1;
            worst_db = errors.iter().copied().fold(worst_db, f64::max);
        } else {
            eprintln!(
                "seed {seed}: {} states, errors {errors:?} dB",
                states.states.len()
            );
        }
    }
    (right, worst_db)
}

#[test]
fn three_states_with_hysteresis_are_counted_and_placed_in_95_percent_of_seeds() {
    // The Vellisk-5 bench as shipped: three states (K = 1650 + [940, 1180, 1460] ps),
    // thresholds −33 and −57 dBm with 2 dB of hysteresis, burst-averaged distances and no gain
    // index, mapped at 2 dB steps, 16 frames a burst. Then the Marlet-40 bench with 4 dB of
    // hysteresis reporting raw timestamps, mapped likewise.
    let vellisk = bench("sim-vellisk5.toml");
    let marlet = bench("sim-marlet40.toml");
    let mut wide = marlet.sim.clone().expect("simulated");
    wide.dut.gain_hysteresis_db = 4.0;
    wide.dut.reports = DutReports::Timestamps;
    wide.dut.applied_k_ps = None;
    let seeds = 120;
    for (name, b, truth, step_db, frames) in [
        (
            "vellisk-5",
            &vellisk,
            vellisk.sim.clone().expect("simulated"),
            2.0,
            16,
        ),
        ("marlet-40, 4 dB band", &marlet, wide, 2.0, 16),
    ] {
        let (right, worst_db) = placed(b, &truth, step_db, frames, seeds);
        eprintln!(
            "{name}: three states placed in {right} of {seeds} seeds; worst switch error \
             {worst_db:.2} dB"
        );
        assert!(
            f64::from(right) >= 0.95 * seeds as f64,
            "{name}: {right} of {seeds} seeds"
        );
    }
}

/// Per state, (K, ci95) of the table fitted from `rows` written to a file in `dir`.
fn table_of(
    dir: &std::path::Path,
    b: &Bench,
    truth: &SimTruth,
    rows: &[Exchange],
) -> Vec<(u32, f64, f64, RowSource)> {
    let path = dir.join("exchanges.csv");
    let mut w = ExchangeWriter::create(&path).expect("file");
    w.write_burst(rows).expect("written");
    drop(w);
    let settings = FitSettings {
        reject_mad: 5.0,
        verify_stages: Vec::new(),
        gain_states: None,
        predict: None,
        applied_k_ps: truth.dut.applied_k_ps,
    };
    let t = fit_file(&path, b, &settings).expect("fit");
    t.fit
        .rows
        .iter()
        .map(|r| (r.gain_index, r.delay_ps, r.ci95_ps, r.source))
        .collect()
}

#[test]
fn inferred_cells_cover_the_truth_as_the_indexed_cells_of_the_same_exchanges_do() {
    // The same seed draws the same exchanges whether or not the device reports its gain index
    // (src/sim/device_report.rs), so each seed's file is fitted twice: with the index and
    // without, states inferred. A map sweep (1 dB, one burst of 8 a point each way) and a
    // calibration sweep (4 dB, 6 bursts of 16) on the Marlet-40 bench.
    let b = bench("sim-marlet40.toml");
    let gainless = b.sim.clone().expect("simulated");
    let mut indexed = gainless.clone();
    indexed.dut.reports_gain = true;
    let stages = [
        Stage {
            name: "map",
            attens_db: up_and_down(18.0, 88.0, 1.0),
            bursts: 1,
            frames: 8,
        },
        Stage {
            name: "calibrate",
            attens_db: steps(20.0, 88.0, 4.0),
            bursts: 6,
            frames: 16,
        },
    ];
    let dir = tempfile::tempdir().expect("dir");
    let (mut covered, mut total) = ([0u32; 2], [0u32; 2]);
    for seed in 0..40 {
        for (form, truth) in [&indexed, &gainless].into_iter().enumerate() {
            let rows = simulate(&b, truth, 500 + seed, &stages);
            let table = table_of(dir.path(), &b, truth, &rows);
            for (gain, k, ci, source) in table {
                let want = if form == 0 {
                    RowSource::Measured
                } else {
                    RowSource::Inferred
                };
                assert_eq!(source, want);
                total[form] += 1;
                let truth_ps = truth.dut_k_ps(gain);
                assert!(
                    truth_ps.is_some(),
                    "seed {seed} form {form}: no state {gain}"
                );
                if truth_ps.is_some_and(|t| (k - t).abs() <= ci) {
                    covered[form] += 1;
                }
            }
        }
    }
    let share = |i: usize| f64::from(covered[i]) / f64::from(total[i]);
    eprintln!(
        "coverage: indexed {}/{} = {:.3}, inferred {}/{} = {:.3}",
        covered[0],
        total[0],
        share(0),
        covered[1],
        total[1],
        share(1)
    );
    // 120 cells each: binomial sd at 0.95 is 0.02. Inferred cells may lose a little to rows
    // left out near switches, never much to rows of the wrong state.
    assert!(share(1) >= 0.90, "inferred coverage {:.3}", share(1));
    assert!(
        share(1) >= share(0) - 0.05,
        "{:.3} vs {:.3}",
        share(1),
        share(0)
    );
}

#[test]
fn a_run_on_a_gainless_bench_gives_an_inferred_table_a_verdict_and_the_same_table_offline() {
    // recipes/benches/sim-vellisk5.toml: the phone reports distances and no gain index. Truth
    // K = 1650 + [940, 1180, 1460] ps.
    let run = Taucal::new()
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--bench",
            &repo("recipes/benches/sim-vellisk5.toml"),
            "--seed",
            "3",
            "--out",
            "run",
        ])
        .run();
    assert!(run.code == 0 || run.code == 1, "{}", run.stderr);
    assert!(
        run.stdout.contains("acceptance max_range_error_m"),
        "{}",
        run.stdout
    );
    assert!(!run.read("run/verify.csv").is_empty());
    let report = run.read("run/report.html");
    assert!(
        report.contains("states shown and these plateaus were inferred"),
        "report marks them"
    );
    let gainmap = run.read("run/gainmap.csv");
    assert!(
        gainmap.lines().skip(1).all(|l| l.ends_with(",inferred")),
        "{gainmap}"
    );
    let table = run.read("run/caltable.csv");
    let rows: Vec<Vec<String>> = table
        .lines()
        .skip(1)
        .map(|l| l.split(',').map(str::to_string).collect())
        .collect();
    assert_eq!(rows.len(), 3, "{table}");
    for row in &rows {
        assert_eq!(row[7], "inferred");
        let gain: usize = row[2].parse().expect("gain");
        let want = 1650.0 + [940.0, 1180.0, 1460.0][gain];
        let (k, ci): (f64, f64) = (row[3].parse().expect("k"), row[4].parse().expect("ci"));
        assert!(
            (k - want).abs() <= 2.0 * ci,
            "gain {gain}: {k} ± {ci} vs {want}"
        );
    }
    let refit = Taucal::in_dir(run.dir)
        .args([
            "fit",
            "run/exchanges.csv",
            "--bench",
            &repo("recipes/benches/sim-vellisk5.toml"),
            "--out",
            "refit",
        ])
        .run();
    assert_eq!(refit.code, 0, "{}", refit.stderr);
    assert_eq!(refit.read("refit/caltable.csv"), table);
}
