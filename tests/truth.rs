//! Truth recovery and interval coverage: the simulator's declared truth against the fitter's
//! table, on benches that are not the demo's (other gain tables, clock offsets up to ±25 ppm,
//! up to 5 % outliers, wrapping counters, a reference with two gain states).

use crate::support::bench::TestBench;
use crate::support::sweep::Sweep;
use taucal::bench::{PathFacts, PerGain};
use taucal::data::Exchange;
use taucal::fit::{Deembed, FitOptions, FitResult, Fitter};
use taucal::sim::SimTruth;

struct Case {
    name: &'static str,
    /// The simulated truth: the base test bench at 15 dBm with this DUT and reference.
    dut: &'static str,
    reference: &'static str,
    path: PathFacts,
    /// The reference K the fitter is told.
    reference_k: PerGain,
    bw_mhz: u32,
}

impl Case {
    fn truth(&self) -> SimTruth {
        TestBench::base()
            .tx_power_dbm(15.0)
            .sim_dut(self.dut)
            .sim_reference(self.reference)
            .truth()
    }
}

fn cases() -> Vec<Case> {
    vec![
        Case {
            name: "two states, +25 ppm, 5 % outliers",
            dut: "tx_delay_ps = 1200.0
                rx_delay_ps = [700.0, 1300.0]
                gain_thresholds_dbm = [-45.0]
                clock_ppm = 25.0
                jitter_ps = 250.0
                outlier_rate = 0.05",
            reference: "delay_ps = 3100.0",
            path: PathFacts {
                cable_delay_ps: 4000.0,
                fixed_loss_db: 8.0,
                atten_delay_ps_per_db: 0.0,
            },
            reference_k: PerGain::Same(3100.0),
            bw_mhz: 80,
        },
        Case {
            name: "four states with hysteresis, -25 ppm, attenuator delay",
            dut: "tx_delay_ps = 1700.0
                rx_delay_ps = [850.0, 1000.0, 1250.0, 1600.0]
                gain_thresholds_dbm = [-25.0, -42.0, -60.0]
                gain_hysteresis_db = 3.0
                clock_ppm = -25.0
                jitter_ps = 400.0
                outlier_rate = 0.02",
            reference: "delay_ps = 2500.0",
            path: PathFacts {
                cable_delay_ps: 9000.0,
                fixed_loss_db: 8.0,
                atten_delay_ps_per_db: 0.8,
            },
            reference_k: PerGain::Same(2500.0),
            bw_mhz: 40,
        },
        Case {
            name: "reference with two gain states, 20 MHz, large burst offsets",
            dut: "tx_delay_ps = 1500.0
                rx_delay_ps = [900.0, 1150.0, 1400.0]
                gain_thresholds_dbm = [-30.0, -55.0]
                clock_ppm = -11.0
                jitter_ps = 300.0
                outlier_rate = 0.01
                burst_offset_ps = 60.0",
            reference: "delay_ps = [2800.0, 2950.0]
                gain_thresholds_dbm = [-40.0]",
            path: PathFacts {
                cable_delay_ps: 6100.0,
                fixed_loss_db: 8.0,
                atten_delay_ps_per_db: 0.0,
            },
            reference_k: PerGain::Each(vec![2800.0, 2950.0]),
            bw_mhz: 20,
        },
    ]
}

/// Sweeps 17..89 dB in `step_db` steps with `bursts` bursts of 16 per point.
fn simulate(case: &Case, seed: u64, step_db: f64, bursts: u32) -> (SimTruth, Vec<Exchange>) {
    let truth = case.truth();
    // Bursts spaced 200 ms apart, so an hour-long counter span is not needed for wraps: the
    // counters start at random 48-bit values.
    let sweep = Sweep {
        stage: "sweep",
        center_mhz: 5180,
        bw_mhz: case.bw_mhz,
        frames: 16,
        bursts,
        gap_ps: 200_000_000_000,
    };
    let points = (0..)
        .map(|i| 17.0 + step_db * f64::from(i))
        .take_while(|atten| *atten <= 89.0);
    let rows = sweep.run(&truth, &case.path, seed, points);
    (truth, rows)
}

fn fit(case: &Case, rows: &[Exchange]) -> FitResult {
    let deembed = Deembed::new(&case.path, case.reference_k.clone());
    let mut f = Fitter::new(deembed, FitOptions::default());
    for r in rows {
        f.push(r);
    }
    f.finish()
}

#[test]
fn every_measured_cell_recovers_the_true_k() {
    for case in cases() {
        for seed in [1, 2, 3] {
            let (truth, rows) = simulate(&case, seed, 2.0, 4);
            let result = fit(&case, &rows);
            let states = truth.dut.rx_delay_ps.len();
            assert_eq!(
                result.rows.len(),
                states,
                "{}: every gain state measured",
                case.name
            );
            for row in &result.rows {
                let k = truth.dut_k_ps(row.gain_index).expect("true K");
                let err = row.delay_ps - k;
                // 2 × the 95 % half-width is about 4 standard errors.
                assert!(
                    err.abs() <= 2.0 * row.ci95_ps,
                    "{} seed {seed} gain {}: {:.1} ps vs truth {k} (±{:.1})",
                    case.name,
                    row.gain_index,
                    row.delay_ps,
                    row.ci95_ps
                );
                assert!(
                    row.ci95_ps < 80.0,
                    "{}: interval {:.1} ps",
                    case.name,
                    row.ci95_ps
                );
            }
        }
    }
}

#[test]
fn outliers_are_rejected_and_counted() {
    let cases = cases();
    let (_, rows) = simulate(&cases[0], 9, 2.0, 4);
    let result = fit(&cases[0], &rows);
    let rejected: u64 = result.rows.iter().map(|r| r.n_rejected).sum();
    let used: u64 = result.rows.iter().map(|r| r.n_used).sum();
    // 5 % of exchanges lock to a late path at the DUT: roughly that share must go.
    let share = rejected as f64 / (rejected + used) as f64;
    assert!((0.03..0.08).contains(&share), "rejected share {share:.3}");
}

#[test]
fn about_95_percent_of_the_95_percent_intervals_contain_the_truth() {
    let cases = cases();
    let (mut inside, mut total) = (0u32, 0u32);
    for seed in 0..120u64 {
        let case = &cases[(seed % 3) as usize];
        let (truth, rows) = simulate(case, 1000 + seed, 4.0, 3);
        for row in fit(case, &rows).rows {
            let k = truth.dut_k_ps(row.gain_index).expect("true K");
            total += 1;
            if (row.delay_ps - k).abs() <= row.ci95_ps {
                inside += 1;
            }
        }
    }
    let share = f64::from(inside) / f64::from(total);
    eprintln!("coverage of the 95 % intervals: {inside}/{total} = {share:.3}");
    // Binomial: with ~360 intervals at p = 0.95, 3 sigma is ±0.035.
    assert!(total >= 300, "{total} intervals");
    assert!(
        (0.915..=0.985).contains(&share),
        "coverage {share:.3} over {total} intervals"
    );
}
