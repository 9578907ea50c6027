//! Devices that report as real ones do (design §6): a burst-average station served by
//! `taucal sim serve` and read through its shipped driver, and K recovered from every form on
//! benches other than the demo's, with the burst-averaged form's intervals checked for coverage
//! over many seeds.

use crate::instruments::Server;
use crate::support::{repo, root};
use std::time::Duration;
use taucal::bench::Bench;
use taucal::data::{Exchange, Taken};
use taucal::fit::{fit, Deembed, FitOptions};
use taucal::sim::{BurstRequest, DutReports, SimBench};

#[test]
fn a_served_burst_average_station_reports_one_averaged_row_per_burst_through_its_driver() {
    use taucal::instrument::driven_console::DrivenConsole;
    use taucal::instrument::driver_file::{DriverFile, DriverKind};
    use taucal::instrument::transport::{Address, Link};
    use taucal::instrument::{BurstSpec, RangingDevice};
    use taucal::recipe::Channel;
    let server = Server::start_bench(
        &repo("recipes/benches/sim-marlet40.toml"),
        &["attenuator=tcp:127.0.0.1:0", "dut=tcp:127.0.0.1:0"],
    );
    let driver = match DriverFile::load(&root().join("drivers"), "harrowdene-marlet40") {
        Ok(DriverFile {
            kind: DriverKind::RangingConsole(c),
            ..
        }) => *c,
        _ => panic!("the shipped Marlet-40 driver loads"),
    };
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .expect("runtime");
    rt.block_on(async {
        let link = |role: &str| {
            let address = Address::parse(&server.address(role)).expect("address");
            Link::new(address, "\r\n", Duration::from_secs(5))
        };
        // Mid-plateau of the station's gain state 1: 15 − 7 − 48 = −40 dBm.
        let mut attenuator = link("attenuator");
        attenuator.send("DAMP:SETT 48").await.expect("set");
        assert_eq!(attenuator.query("DAMP:SETT?").await.expect("read"), "48.0");
        let mut dut = DrivenConsole::new("dut", driver, link("dut"));
        let id = dut.identify().await.expect("identify");
        assert!(id.contains("Marlet-40,HW-M40-000217"), "{id}");
        let spec = BurstSpec {
            frames: 16,
            channel: Channel {
                center_mhz: 5180,
                bw_mhz: 80,
            },
        };
        for _ in 0..5 {
            let rows = dut.burst(&spec).await.expect("burst");
            assert_eq!(rows.len(), 1, "one summary per burst: {rows:?}");
            let x = &rows[0];
            assert_eq!(x.status, "ok");
            assert!(x.frames > 1 && x.frames <= 16, "{x:?}");
            assert!(x.rtt_ps.is_some_and(|r| r > 10_000.0), "{x:?}");
            assert_eq!((x.t1_ps, x.dut_gain, x.range_mm), (None, None, None));
        }
    });
}

/// The bench file's truth and facts.
fn bench(name: &str) -> Bench {
    Bench::load(&root().join("recipes/benches").join(name)).expect("bench loads")
}

/// Rows of `bursts` bursts at each of `attens_db`, as the DUT reports them, `frames` a burst.
fn simulated_rows(
    bench: &Bench,
    form: DutReports,
    seed: u64,
    attens_db: &[f64],
    bursts: u32,
    frames: u32,
) -> Vec<Exchange> {
    let mut truth = bench.sim.clone().expect("a simulated bench");
    truth.dut.reports = form;
    // The fitter groups by the gain state a row reports; plateaus without one are not yet
    // inferred, so these runs report it.
    truth.dut.reports_gain = true;
    if form != DutReports::RangeBurst {
        truth.dut.applied_k_ps = None;
    }
    let mut sim = SimBench::new(&truth, &bench.path, seed).expect("truth");
    let request = BurstRequest {
        frames,
        center_mhz: 5180,
        bw_mhz: 80,
    };
    let (mut rows, mut now_ps) = (Vec::new(), 0u64);
    for (point, atten_db) in attens_db.iter().enumerate() {
        sim.set_atten_db(*atten_db);
        for burst in 0..bursts {
            let out = sim.run_burst(now_ps, &request);
            now_ps += out.duration_ps + 20_000_000_000;
            let at = Taken {
                stage: "cal",
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
    rows
}

/// The fitted table's (gain, K, ci95) for rows of `bench`.
fn fitted(bench: &Bench, rows: &[Exchange]) -> Vec<(u32, f64, f64)> {
    let applied_k_ps = bench.sim.as_ref().and_then(|s| s.dut.applied_k_ps);
    let deembed =
        Deembed::new(&bench.path, bench.reference.delay_ps.clone()).with_applied_k(applied_k_ps);
    fit(deembed, FitOptions::default(), rows)
        .rows
        .iter()
        .map(|r| (r.gain_index, r.delay_ps, r.ci95_ps))
        .collect()
}

#[test]
fn every_form_recovers_the_true_k_of_every_gain_state() {
    // Truths in recipes/benches/sim-marlet40.toml (K = 1320 + [780, 1010, 1290] ps, thresholds
    // −28/−52 dBm after 7 dB fixed loss) and sim-vellisk5.toml (K = 1650 + [940, 1180, 1460] ps,
    // thresholds −33/−57 dBm after 9 dB): mid-plateau points of each gain state.
    for (file, attens_db, forms) in [
        (
            "sim-marlet40.toml",
            [10.0, 48.0, 70.0],
            vec![DutReports::RttFrames, DutReports::RttBurst],
        ),
        (
            "sim-vellisk5.toml",
            [14.0, 52.0, 74.0],
            vec![DutReports::RangeBurst, DutReports::RttBurst],
        ),
    ] {
        let b = bench(file);
        let truth = b.sim.clone().expect("sim");
        for form in forms {
            let rows = simulated_rows(&b, form, 7, &attens_db, 30, 16);
            let table = fitted(&b, &rows);
            assert_eq!(table.len(), 3, "{file} {form:?}: {table:?}");
            for (gain, k, ci95) in table {
                let want = truth.dut_k_ps(gain).expect("gain in table");
                assert!(
                    ci95 > 0.0 && ci95 < 60.0,
                    "{file} {form:?} gain {gain}: ±{ci95}"
                );
                assert!(
                    (k - want).abs() <= 2.0 * ci95,
                    "{file} {form:?} gain {gain}: {k:.1} ± {ci95:.1} ps against {want}"
                );
            }
        }
    }
}

#[test]
fn burst_averaged_intervals_cover_the_truth_about_95_percent_of_the_time() {
    // 120 seeds × 3 gain states of the Marlet-40 bench (not the demo's), 12 bursts of 16 frames
    // per state: each row is one burst's average, so the interval rests on 11 degrees of
    // freedom between bursts (design §6).
    let b = bench("sim-marlet40.toml");
    let truth = b.sim.clone().expect("sim");
    let (mut inside, mut total) = (0u32, 0u32);
    for seed in 1000..1120 {
        let rows = simulated_rows(&b, DutReports::RttBurst, seed, &[10.0, 48.0, 70.0], 12, 16);
        for (gain, k, ci95) in fitted(&b, &rows) {
            total += 1;
            if (k - truth.dut_k_ps(gain).expect("gain")).abs() <= ci95 {
                inside += 1;
            }
        }
    }
    let share = f64::from(inside) / f64::from(total);
    eprintln!("burst-averaged coverage: {inside}/{total} = {share:.3}");
    assert_eq!(total, 360);
    // The brief's band; binomial sd at p = 0.95, n = 360 is 0.011, so 93–97 % is ±1.8 sd.
    assert!((0.93..=0.97).contains(&share), "coverage {share:.3}");
}
