//! The gain map's switch points and hysteresis against the simulator's declared AGC truth, with
//! noisy level measurements, on benches that are not the demo's: bias near zero and 95 %
//! intervals that cover about 95 % of the time, over many seeds.

use std::collections::BTreeMap;
use taucal::bench::PathFacts;
use taucal::fit::gainmap::{analyse, count_step, MapPoint, Pass};
use taucal::fit::level_spread::LevelSpread;
use taucal::sim::{BurstRequest, SimBench, SimTruth};

struct Bench {
    name: &'static str,
    thresholds_dbm: &'static [f64],
    hysteresis_db: f64,
    rssi_noise_db: f64,
    step_db: f64,
    frames: u32,
}

const TX_DBM: f64 = 12.0;
const LOSS_DB: f64 = 6.0;

fn truth(b: &Bench) -> SimTruth {
    let states = b.thresholds_dbm.len() + 1;
    let rx: Vec<String> = (0..states).map(|g| format!("{}", 800 + 200 * g)).collect();
    let thresholds: Vec<String> = b.thresholds_dbm.iter().map(|t| format!("{t:.1}")).collect();
    toml::from_str(&format!(
        r#"
        tx_power_dbm = {TX_DBM}
        [dut]
        tx_delay_ps = 1400.0
        rx_delay_ps = [{}]
        gain_thresholds_dbm = [{}]
        gain_hysteresis_db = {}
        rssi_noise_db = {}
        [reference]
        delay_ps = 2700.0
        "#,
        rx.join(", "),
        thresholds.join(", "),
        b.hysteresis_db,
        b.rssi_noise_db
    ))
    .expect("truth parses")
}

/// A gain map as the runner takes one: one burst per point, attenuation rising over the range
/// and then falling, steps counted across points.
fn map_points(b: &Bench, seed: u64, from_db: f64, to_db: f64) -> Vec<MapPoint> {
    let path = PathFacts {
        cable_delay_ps: 5000.0,
        fixed_loss_db: LOSS_DB,
        atten_delay_ps_per_db: 0.0,
    };
    let mut sim = SimBench::new(&truth(b), &path, seed).expect("valid truth");
    let n = ((to_db - from_db) / b.step_db).round() as u32;
    let rising = (0..=n).map(|i| (Pass::Rising, from_db + b.step_db * f64::from(i)));
    let falling = (0..=n)
        .rev()
        .map(|i| (Pass::Falling, from_db + b.step_db * f64::from(i)));
    let mut last = None;
    let mut now_ps = 0u64;
    rising
        .chain(falling)
        .map(|(pass, atten_db)| {
            sim.set_atten_db(atten_db);
            let out = sim.run_burst(
                now_ps,
                &BurstRequest {
                    frames: b.frames,
                    center_mhz: 5180,
                    bw_mhz: 80,
                },
            );
            now_ps += out.duration_ps + 50_000_000_000;
            let mut p = MapPoint {
                pass,
                atten_db,
                ok_by_gain: BTreeMap::new(),
                steps: BTreeMap::new(),
                rssi: LevelSpread::default(),
            };
            for x in &out.exchanges {
                let gain = x.dut_gain.filter(|_| x.status == "ok");
                count_step(&mut last, gain, &mut p.steps);
                if let Some(g) = gain {
                    *p.ok_by_gain.entry(g).or_insert(0) += 1;
                    p.rssi
                        .push(x.dut_rssi_dbm.expect("an ok exchange reports its level"));
                }
            }
            p
        })
        .collect()
}

/// True attenuations of each threshold's switch up (attenuation rising) and back.
fn true_switches(b: &Bench) -> Vec<(f64, f64)> {
    b.thresholds_dbm
        .iter()
        .map(|t| {
            let center = TX_DBM - LOSS_DB - t;
            (
                center + b.hysteresis_db / 2.0,
                center - b.hysteresis_db / 2.0,
            )
        })
        .collect()
}

struct Tally {
    n: u32,
    bias_sum: f64,
    covered: u32,
    old_sum: f64,
    resolved: u32,
}

fn survey(b: &Bench, seeds: u64) -> Vec<(Tally, Tally, Tally)> {
    let truths = true_switches(b);
    let lo = truths.iter().map(|t| t.1).fold(f64::INFINITY, f64::min) - 12.0;
    let hi = truths.iter().map(|t| t.0).fold(f64::NEG_INFINITY, f64::max) + 12.0;
    let new = || Tally {
        n: 0,
        bias_sum: 0.0,
        covered: 0,
        old_sum: 0.0,
        resolved: 0,
    };
    let mut out: Vec<(Tally, Tally, Tally)> =
        truths.iter().map(|_| (new(), new(), new())).collect();
    for seed in 0..seeds {
        let map = analyse(&map_points(b, 1000 + seed, lo, hi));
        assert_eq!(map.switches.len(), truths.len(), "{}: seed {seed}", b.name);
        for ((s, (up, down)), t) in map.switches.iter().zip(&truths).zip(out.iter_mut()) {
            let Some(fit) = s.fit else {
                panic!(
                    "{} seed {seed} {:?} {:?}",
                    b.name,
                    s,
                    map_points(b, 1000 + seed, lo, hi)
                        .iter()
                        .map(|p| (p.atten_db, p.steps.clone()))
                        .collect::<Vec<_>>()
                )
            };
            let (u, d, h) = (
                fit.up_db.expect("up"),
                fit.down_db.expect("down"),
                fit.hysteresis_db.expect("hysteresis"),
            );
            for (tally, est, truth, old) in [
                (&mut t.0, u, up, s.rising_db),
                (&mut t.1, d, down, s.falling_db),
                (
                    &mut t.2,
                    h,
                    &(up - down),
                    s.rising_db.zip(s.falling_db).map(|(r, f)| r - f),
                ),
            ] {
                tally.n += 1;
                tally.bias_sum += est.value_db - truth;
                tally.covered += u32::from((est.value_db - truth).abs() <= est.ci95_db);
                tally.old_sum += old.expect("seen crossing") - truth;
            }
            t.2.resolved += u32::from(fit.resolved_hysteresis_db().is_some());
        }
    }
    out
}

/// Benches unlike the demo's (whose AGC has 2 dB of hysteresis behind 1 dB of RSSI noise, mapped
/// at 1 dB steps with 8 exchanges per point).
fn benches() -> [Bench; 4] {
    [
        Bench {
            name: "two switches, 3 dB hysteresis, 1 dB noise, 1 dB steps, 8 exchanges",
            thresholds_dbm: &[-35.0, -60.0],
            hysteresis_db: 3.0,
            rssi_noise_db: 1.0,
            step_db: 1.0,
            frames: 8,
        },
        Bench {
            name: "4 dB hysteresis, 0.6 dB noise, 0.5 dB steps, 16 exchanges",
            thresholds_dbm: &[-28.0],
            hysteresis_db: 4.0,
            rssi_noise_db: 0.6,
            step_db: 0.5,
            frames: 16,
        },
        Bench {
            name: "no hysteresis, 1 dB noise",
            thresholds_dbm: &[-40.0],
            hysteresis_db: 0.0,
            rssi_noise_db: 1.0,
            step_db: 1.0,
            frames: 8,
        },
        Bench {
            name: "2 dB hysteresis, 1.5 dB noise, coarse 2 dB steps, 4 exchanges",
            thresholds_dbm: &[-40.0],
            hysteresis_db: 2.0,
            rssi_noise_db: 1.5,
            step_db: 2.0,
            frames: 4,
        },
    ]
}

#[test]
fn switch_points_and_hysteresis_are_unbiased_and_their_intervals_cover() {
    // 400 seeds per bench: a 95 % coverage rate is then known to about ±1.1 % (binomial sd).
    let seeds = 400;
    for b in &benches() {
        for (i, (up, down, h)) in survey(b, seeds).iter().enumerate() {
            let rate = |t: &Tally| f64::from(t.covered) / f64::from(t.n);
            let bias = |t: &Tally| t.bias_sum / f64::from(t.n);
            let what = format!("{}, switch {i}", b.name);
            for (dir, t) in [("up", up), ("down", down), ("hysteresis", h)] {
                assert!(
                    (0.88..=0.99).contains(&rate(t)),
                    "{what}, {dir}: coverage {}",
                    rate(t)
                );
                assert!(bias(t).abs() <= 0.25, "{what}, {dir}: bias {} dB", bias(t));
            }
            let resolved = f64::from(h.resolved) / f64::from(h.n);
            if b.hysteresis_db == 0.0 {
                // No hysteresis to find: it is stated as found in few runs (a 2.5 % one-sided
                // tail of the interval, give or take).
                assert!(resolved <= 0.05, "{what}: resolved in {resolved}");
            } else {
                // The first crossings read the band narrower by over a dB on these benches;
                // the fitted hysteresis does not.
                assert!(bias(h) - h.old_sum / f64::from(h.n) > 1.0, "{what}");
            }
            if b.hysteresis_db >= 3.0 {
                assert!(resolved >= 0.9, "{what}: resolved in {resolved}");
            }
        }
    }
}
