//! Points that follow the unit (the `cells` stage of `recipes/factory-quick.toml`), studied on a
//! bench that is not the demo's (`tests/data/points-study/bench.toml`): four gain states, the
//! middle two only 6 dB wide, and units whose AGC switches up to ±4 dB from the golden
//! sample's. Every cell must reach the target, at no more than 1.15 times the exchanges an
//! oracle that knew each cell's spread would spend, with intervals that still cover 95 %; the
//! golden sample's fixed points (`tests/data/points-study/golden.toml`) leave cells wide on the
//! same units.

use crate::support::sweep::Sweep;
use crate::support::{repo, root, Taucal};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};
use taucal::bench::Bench;
use taucal::fit::stats::t975;
use taucal::fit::{fit, Deembed, FitOptions};
use taucal::recipe::Plan;
use taucal::runner::ledger::NoLedger;
use taucal::runner::request::RunRequest;
use taucal::runner::run::execute;
use taucal::runner::Unobserved;
use taucal::sim::SimTruth;

const STUDY_BENCH: &str = "tests/data/points-study/bench.toml";
const STUDY_GOLDEN: &str = "tests/data/points-study/golden.toml";
const FACTORY_QUICK: &str = "recipes/factory-quick.toml";
const TARGET_PS: f64 = 50.0;
const FRAMES: u32 = 16;
/// Bursts over which the oracle measures a cell's spread: 200 give its variance to about 10 %
/// a cell (√(2/199)), and the study sums thousands of cells.
const ORACLE_BURSTS: u32 = 200;

/// factory-quick's map moved to the study bench's switch points (36..48 dB, ±4 dB, and the
/// hysteresis): its variables, as `--set` would give them.
const STUDY_MAP: [&str; 3] = ["map_from_db=26", "map_to_db=58", "map_step_db=2"];

fn study_bench() -> Bench {
    Bench::load(&root().join(STUDY_BENCH)).expect("study bench loads")
}

/// The study's unit `i`: the golden sample with every switch point moved by the same amount,
/// spread evenly over ±4 dB of attenuation (a golden-ratio sequence, so any run of units covers
/// the range).
fn shift_db(i: u64) -> f64 {
    ((i as f64 * 0.618_033_988_75) % 1.0) * 8.0 - 4.0
}

/// `base`'s truth with its switch points `shift_db` later in attenuation (so the thresholds
/// `shift_db` lower in receive level).
fn unit_truth(base: &SimTruth, shift_db: f64) -> SimTruth {
    let mut t = base.clone();
    for th in &mut t.dut.gain_thresholds_dbm {
        *th -= shift_db;
    }
    t
}

/// What one unit's run gave: its cells (gain, delay, half-width), exchanges, and its truth.
struct UnitRun {
    cells: Vec<(u32, f64, f64)>,
    exchanges: u64,
    truth: SimTruth,
}

/// `each(i)` for every `i` in `0..count`, on two threads, in order of `i`.
fn on_two_threads<T: Send>(count: u64, each: impl Fn(u64) -> T + Sync) -> Vec<T> {
    let next = AtomicUsize::new(0);
    let out: Mutex<Vec<Option<T>>> = Mutex::new((0..count).map(|_| None).collect());
    std::thread::scope(|scope| {
        for _ in 0..2 {
            scope.spawn(|| loop {
                let i = next.fetch_add(1, Ordering::SeqCst) as u64;
                if i >= count {
                    break;
                }
                let got = each(i);
                out.lock().expect("not poisoned")[i as usize] = Some(got);
            });
        }
    });
    out.into_inner()
        .expect("not poisoned")
        .into_iter()
        .map(|r| r.expect("every one ran"))
        .collect()
}

/// Runs `plan` on every unit `0..units` of the study bench (in-process, virtual time), unit
/// `i` with seed `seed0 + i`.
fn run_units(plan: &Plan, units: u64, seed0: u64) -> Vec<UnitRun> {
    let base = study_bench();
    let golden = base.sim.clone().expect("simulated");
    let dir = tempfile::tempdir().expect("temporary directory");
    on_two_threads(units, |i| {
        let truth = unit_truth(&golden, shift_db(i));
        let mut bench = base.clone();
        bench.sim = Some(truth.clone());
        let request = RunRequest {
            plan: plan.clone(),
            bench: Arc::new(bench),
            overrides: Vec::new(),
            out: Some(dir.path().join(format!("unit-{i}"))),
            seed: Some(seed0 + i),
            realtime: false,
            resume: None,
            unit: Some(format!("STUDY-{i}")),
            station: "study".into(),
            seat: None,
            attenuator: None,
        };
        let report =
            execute(request, |_| {}, Box::new(Unobserved), &mut NoLedger).expect("the run starts");
        assert!(report.failure.is_none(), "unit {i}: {:?}", report.failure);
        let cells = report
            .fit
            .as_ref()
            .expect("a table")
            .rows
            .iter()
            .map(|r| (r.gain_index, r.delay_ps, r.ci95_ps))
            .collect();
        UnitRun {
            cells,
            exchanges: report.manifest.counts.exchanges,
            truth,
        }
    })
}

fn load(recipe: &str, overrides: &[&str]) -> Plan {
    let overrides: Vec<String> = overrides.iter().map(|s| s.to_string()).collect();
    taucal::recipe::load(&root().join(recipe), &overrides, &study_bench()).expect("recipe loads")
}

/// The attenuation where state `g` of `truth` holds however the AGC came to it: between the
/// switch into it with attenuation rising and the switch out of it with attenuation falling
/// (each threshold's band is `gain_hysteresis_db` wide); the end states run to the bench's
/// usable limits.
fn true_mid_plateau_db(bench: &Bench, truth: &SimTruth, g: usize) -> f64 {
    let half = truth.dut.gain_hysteresis_db / 2.0;
    // Receive level falls dB for dB with attenuation.
    let atten = |t: f64| bench.dut_rx_dbm(0.0) - t;
    let (lo_usable, hi_usable) = bench.usable_atten_db().expect("usable range");
    let th = &truth.dut.gain_thresholds_dbm;
    let lo = if g == 0 {
        lo_usable
    } else {
        atten(th[g - 1]) + half
    };
    let hi = if g == th.len() {
        hi_usable
    } else {
        atten(th[g]) - half
    };
    (lo + hi) / 2.0
}

/// c4(n): E[s] = c4·σ for a normal sample of n (Montgomery, Introduction to Statistical
/// Quality Control, appendix: c4(2) = 0.7979, c4(10) = 0.9727; checked below).
fn c4(n: u32) -> f64 {
    use statrs::function::gamma::ln_gamma;
    let n = f64::from(n);
    (2.0 / (n - 1.0)).sqrt() * (ln_gamma(n / 2.0) - ln_gamma((n - 1.0) / 2.0)).exp()
}

/// The oracle's exchanges for one cell: it knows the true spread σ of a burst's mean (measured
/// on the simulator at the cell's true mid-plateau over [`ORACLE_BURSTS`] bursts, through the table's own
/// estimator) and takes the fewest bursts whose expected half-width, t(n−1)·c4(n)·σ/√n, is
/// within the target.
fn oracle_exchanges(bench: &Bench, truth: &SimTruth, g: usize, seed: u64) -> f64 {
    let db = true_mid_plateau_db(bench, truth, g);
    let sweep = Sweep {
        stage: "oracle",
        center_mhz: 5180,
        bw_mhz: 80,
        frames: FRAMES,
        bursts: ORACLE_BURSTS,
        gap_ps: 20_000_000_000,
    };
    let rows = sweep.run(truth, &bench.path, seed, [db]);
    let deembed = Deembed::new(&bench.path, bench.reference.delay_ps.clone());
    let table = fit(deembed, FitOptions::default(), &rows);
    let cell = table
        .rows
        .iter()
        .find(|r| r.gain_index == g as u32)
        .expect("the oracle's point holds its state");
    let sigma_burst =
        cell.ci95_ps / t975(cell.stat_dof).expect("t") * (cell.n_bursts as f64).sqrt();
    let n = (2..100_000u32)
        .find(|&n| {
            t975(f64::from(n - 1)).expect("t") * c4(n) * sigma_burst / f64::from(n).sqrt()
                <= TARGET_PS
        })
        .expect("a finite count");
    f64::from(n * FRAMES)
}

/// The Wilson score interval of `k` successes in `n` at 95 % (Wilson 1927; Agresti & Coull,
/// The American Statistician 52 (1998) 119–126).
fn wilson(k: u64, n: u64) -> (f64, f64) {
    wilson_at(k, n, 0.95)
}

/// The Wilson score interval at confidence `level`.
fn wilson_at(k: u64, n: u64, level: f64) -> (f64, f64) {
    use statrs::distribution::{ContinuousCDF, Normal};
    let z = Normal::standard().inverse_cdf(0.5 + level / 2.0);
    let (k, n) = (k as f64, n as f64);
    let p = k / n;
    let centre = (p + z * z / (2.0 * n)) / (1.0 + z * z / n);
    let half = z / (1.0 + z * z / n) * (p * (1.0 - p) / n + z * z / (4.0 * n * n)).sqrt();
    (centre - half, centre + half)
}

#[test]
fn the_helpers_match_their_references() {
    // c4: Montgomery's table (from memory): c4(2) = 0.7979, c4(10) = 0.9727, c4(25) = 0.9896.
    for (n, want) in [(2, 0.7979), (10, 0.9727), (25, 0.9896)] {
        assert!((c4(n) - want).abs() < 1e-4, "c4({n}) = {}", c4(n));
    }
    // Wilson, 950 of 1000, from the formula by hand: centre (0.95 + 1.96²/2000)/(1 + 1.96²/1000)
    // = 0.948278, half-width 1.96/(1 + 1.96²/1000)·√(0.95·0.05/1000 + 1.96²/(4·1000²)) = 0.013592.
    let (lo, hi) = wilson(950, 1000);
    assert!(
        (lo - 0.93469).abs() < 2e-5 && (hi - 0.96187).abs() < 2e-5,
        "{lo} {hi}"
    );
    // At 98.75 %, z = 2.4977 (normal table, common practice): 371 of 400 reach 0.9537 (by hand).
    let (_, hi) = wilson_at(371, 400, 0.9875);
    assert!((hi - 0.9537).abs() < 2e-4, "{hi}");
    // The study's shifts cover ±4 dB and stay within it.
    let shifts: Vec<f64> = (0..200).map(shift_db).collect();
    assert!(shifts.iter().all(|s| s.abs() <= 4.0));
    assert!(shifts.iter().any(|s| *s > 3.5) && shifts.iter().any(|s| *s < -3.5));
}

#[test]
fn following_the_unit_reaches_the_target_in_every_cell_at_oracle_cost_with_honest_intervals() {
    let units = 400;
    let plan = load(FACTORY_QUICK, &STUDY_MAP);
    let runs = run_units(&plan, units, 50_000);
    let bench = study_bench();
    let (mut cells, mut covered, mut widest) = (0u64, 0u64, 0.0f64);
    // Per gain state: (cells, covered); a state fed from a moved or straddling point must not
    // hide behind the others.
    let mut by_state = [(0u64, 0u64); 4];
    let mut spent = 0.0;
    for (i, run) in runs.iter().enumerate() {
        let states = run.truth.dut.rx_delay_ps.len();
        let gains: Vec<u32> = run.cells.iter().map(|c| c.0).collect();
        assert_eq!(
            gains,
            (0..states as u32).collect::<Vec<_>>(),
            "unit {i} (shift {:.2} dB): every state measured",
            shift_db(i as u64)
        );
        for &(g, delay_ps, ci95_ps) in &run.cells {
            let truth_ps = run.truth.dut_k_ps(g).expect("true K");
            let hit = u64::from((delay_ps - truth_ps).abs() <= ci95_ps);
            cells += 1;
            covered += hit;
            by_state[g as usize].0 += 1;
            by_state[g as usize].1 += hit;
            widest = widest.max(ci95_ps);
        }
        spent += run.exchanges as f64;
    }
    let oracle: f64 = on_two_threads(units, |i| {
        let truth = &runs[i as usize].truth;
        (0..truth.dut.rx_delay_ps.len())
            .map(|g| oracle_exchanges(&bench, truth, g, 900_000 + i))
            .sum::<f64>()
    })
    .iter()
    .sum();
    let share = covered as f64 / cells as f64;
    let (lo, hi) = wilson(covered, cells);
    let ratio = spent / oracle;
    let states: Vec<String> = by_state
        .iter()
        .enumerate()
        .map(|(g, &(n, k))| {
            let (lo, hi) = wilson(k, n);
            format!("state {g} {k}/{n} ({lo:.3}..{hi:.3})")
        })
        .collect();
    eprintln!(
        "points that follow the unit, {units} units, {cells} cells: widest half-width {widest:.1} ps; \
         coverage {covered}/{cells} = {share:.4} (Wilson 95 % {lo:.3}..{hi:.3}; {}); \
         {:.0} exchanges per unit against the oracle's {:.0}: ratio {ratio:.3}",
        states.join(", "),
        spent / units as f64,
        oracle / units as f64
    );
    assert!(cells >= 1600, "{cells} cells");
    assert!(widest <= TARGET_PS, "a cell ended at ±{widest} ps");
    // Coverage short of 95 % would put 95 % above the Wilson interval; conservative intervals
    // may lie above it. Overall, and state by state at 1 − 5 %/4 (Bonferroni: four looks at
    // the same 5 % risk).
    assert!(hi >= 0.95, "coverage {share:.4} ({lo:.3}..{hi:.3})");
    for (g, &(n, k)) in by_state.iter().enumerate() {
        let (_, hi) = wilson_at(k, n, 1.0 - 0.05 / by_state.len() as f64);
        assert!(hi >= 0.95, "state {g}: {k}/{n} covered");
    }
    assert!(ratio <= 1.15, "ratio {ratio:.3}");
}

#[test]
fn the_golden_samples_fixed_points_leave_a_cell_wide_where_following_the_unit_does_not() {
    // Units across the ±4 dB of switch-point spread, the same seeds for both recipes.
    let units = 24;
    let golden = run_units(&load(STUDY_GOLDEN, &[]), units, 70_000);
    let following = run_units(&load(FACTORY_QUICK, &STUDY_MAP), units, 70_000);
    let worst = |runs: &[UnitRun]| {
        runs.iter()
            .enumerate()
            .flat_map(|(i, r)| {
                let states = r.truth.dut.rx_delay_ps.len() as u32;
                // A state with no cell at all counts as infinitely wide.
                (0..states).map(move |g| {
                    let ci = r
                        .cells
                        .iter()
                        .find(|c| c.0 == g)
                        .map_or(f64::INFINITY, |c| c.2);
                    (ci, i, g)
                })
            })
            .max_by(|a, b| a.0.total_cmp(&b.0))
            .expect("cells")
    };
    let (golden_ci, unit, g) = worst(&golden);
    let (following_ci, ..) = worst(&following);
    eprintln!(
        "golden fixed points: widest cell ±{golden_ci:.1} ps (unit {unit}, shift {:.2} dB, state \
         {g}); following the unit: ±{following_ci:.1} ps",
        shift_db(unit as u64)
    );
    assert!(
        golden_ci > TARGET_PS,
        "fixed points left no cell wide: {golden_ci}"
    );
    assert!(following_ci <= TARGET_PS, "{following_ci}");
}

#[test]
fn factory_quick_maps_the_demo_unit_and_check_estimates_its_stage() {
    let check = Taucal::new().args(["check", &repo(FACTORY_QUICK)]).run();
    check.expect_code(0);
    assert!(
        check
            .stdout
            .contains("cells on 5180 MHz / 80 MHz: a map of 16 points 26..71 dB each way")
            && check
                .stdout
                .contains("then a point for each of 3 gain states"),
        "{}",
        check.stdout
    );
    let out = Taucal::new()
        .args(["run", &repo(FACTORY_QUICK), "--seed", "4", "--out", "q"])
        .run();
    out.expect_code(0);
    // The estimate is a lower bound: the map as it will run, one pilot per state.
    let estimated_s: f64 = check
        .stdout
        .split("estimated bench time: ")
        .nth(1)
        .and_then(|r| r.split(" s").next())
        .and_then(|x| x.parse().ok())
        .expect("an estimate");
    let manifest: toml::Table = toml::from_str(&out.read("q/manifest.toml")).expect("manifest");
    let real_s = manifest["bench_time_s"].as_float().expect("bench time");
    assert!(
        estimated_s <= real_s && real_s < 3.0 * estimated_s,
        "estimate {estimated_s} s, run {real_s} s"
    );
    let table = crate::support::csv_numbers(&out.read("q/caltable.csv"));
    assert_eq!(table.len(), 3);
    assert!(table.iter().all(|r| r[4] <= TARGET_PS), "{table:?}");
    // The unit's own map is in gainmap.csv: its switches near the demo truth's 37 and 62 dB
    // (-30 and -55 dBm at 15 dBm less 8 dB of loss), within the coarse map's 3 dB steps.
    let map = crate::support::csv_numbers(&out.read("q/gainmap.csv"));
    assert_eq!(map.len(), 3, "{map:?}");
    for (row, centre) in map.iter().zip([37.0, 62.0]) {
        let (rising, falling) = (row[8], row[10]);
        assert!(
            (rising - centre).abs() <= 3.0 && (falling - centre).abs() <= 3.0,
            "{row:?}"
        );
    }
}

const GOOD_CELLS: &str = r#"[recipe]
name = "cells-probe"

[[stage]]
name = "calibrate"
kind = "cells"
center_mhz = 5180
bw_mhz = 80
map_db = { from = 26.0, to = 71.0, step = 3.0 }
bursts = 10
frames = 16
target_ci95_ps = 50.0
max_bursts = 200
"#;

#[test]
fn bad_cells_keys_are_refused_at_their_key_and_line() {
    let good = Taucal::new()
        .file("r.toml", GOOD_CELLS)
        .args(["check", "r.toml"])
        .run();
    good.expect_code(0);
    for (from, to, key, words) in [
        (
            "map_db = { from = 26.0, to = 71.0, step = 3.0 }",
            "map_db = [50.0, 40.0, 60.0]",
            "`stage.0.map_db`",
            "does not rise point by point",
        ),
        (
            "map_db = { from = 26.0, to = 71.0, step = 3.0 }",
            "map_db = [40.0, 50.0]",
            "`stage.0.map_db`",
            "fewer than 3 points",
        ),
        (
            // The demo bench's DUT takes at most -10 dBm: 15 - 8 - 10 = -3 dBm is refused.
            "map_db = { from = 26.0, to = 71.0, step = 3.0 }",
            "map_db = [10.0, 40.0, 60.0]",
            "`stage.0.map_db`",
            "dBm",
        ),
        (
            "target_ci95_ps = 50.0\n",
            "",
            "`stage.0`",
            "needs `target_ci95_ps`",
        ),
        (
            "max_bursts = 200",
            "max_bursts = 5",
            "`stage.0.max_bursts`",
            "below the 10 pilot bursts",
        ),
        ("bursts = 10", "bursts = 1", "`stage.0.bursts`", "from 2 to"),
        (
            "max_bursts = 200",
            "max_bursts = 200\nmargin_db = 40.0",
            "`stage.0.margin_db`",
            "give 0 to 30 dB",
        ),
        (
            "max_bursts = 200",
            "max_bursts = 200\nmap_bursts = 0",
            "`stage.0.map_bursts`",
            "from 1 to 100",
        ),
        (
            "max_bursts = 200",
            "max_bursts = 200\natten_db = [40.0]",
            "`stage.0.atten_db`",
            "does not belong in a cells stage",
        ),
    ] {
        assert!(GOOD_CELLS.contains(from), "{from}");
        let bad = GOOD_CELLS.replacen(from, to, 1);
        for cmd in ["check", "run"] {
            let out = Taucal::new()
                .file("r.toml", &bad)
                .args([cmd, "r.toml"])
                .run();
            out.expect_code(2);
            assert!(
                out.stderr.contains("r.toml line ") && out.stderr.contains(key),
                "{cmd} {to}: wanted {key} at a line in\n{}",
                out.stderr
            );
            assert!(
                out.stderr.contains(words),
                "{cmd} {to}: wanted {words:?} in\n{}",
                out.stderr
            );
            assert!(!out.has_dir("runs"), "{cmd}: a run directory was created");
        }
    }
}

/// The shipped four-slot station with each slot's unit switching elsewhere: the gain
/// thresholds of `[[sim.slot]]` number `i` (in file order) become `thresholds[i]`.
fn station_with_thresholds(thresholds: &[[f64; 2]; 4]) -> String {
    let text =
        std::fs::read_to_string(root().join("recipes/benches/sim-station4.toml")).expect("bench");
    let mut seen = 0usize;
    text.lines()
        .map(|line| {
            if !line.starts_with("gain_thresholds_dbm = ") {
                return format!("{line}\n");
            }
            seen += 1;
            // The first is [sim.dut], the golden sample; the slots follow.
            match seen.checked_sub(2).and_then(|i| thresholds.get(i)) {
                Some([a, b]) => format!("gain_thresholds_dbm = [{a:.1}, {b:.1}]\n"),
                None => format!("{line}\n"),
            }
        })
        .collect()
}

#[test]
fn each_slot_of_a_station_maps_and_follows_its_own_unit() {
    // Units switching 4 dB early, 4 dB late, on the golden sample, and 3 dB apart from each
    // other's states: receive level is 15 - 8 - A dBm on this station.
    let thresholds = [
        [-26.0, -51.0],
        [-34.0, -59.0],
        [-30.0, -55.0],
        [-27.0, -58.0],
    ];
    let out = Taucal::new()
        .file("b.toml", &station_with_thresholds(&thresholds))
        .args([
            "run",
            &repo(FACTORY_QUICK),
            "--bench",
            "b.toml",
            "--out",
            "st",
        ])
        .run();
    out.expect_code(0);
    for (slot, [first, second]) in ["a", "b", "c", "d"].iter().zip(thresholds) {
        let map = crate::support::csv_numbers(&out.read(&format!("st/slot-{slot}/gainmap.csv")));
        assert_eq!(map.len(), 3, "slot {slot}: {map:?}");
        for (row, threshold_dbm) in map.iter().zip([first, second]) {
            let centre_db = 7.0 - threshold_dbm;
            let seen_db = (row[8] + row[10]) / 2.0;
            assert!(
                (seen_db - centre_db).abs() <= 2.0,
                "slot {slot}: switch seen at {seen_db} dB, its unit's at {centre_db} dB"
            );
        }
        let table = crate::support::csv_numbers(&out.read(&format!("st/slot-{slot}/caltable.csv")));
        assert!(
            table.len() == 3 && table.iter().all(|r| r[4] <= TARGET_PS),
            "slot {slot}: {table:?}"
        );
    }
}
