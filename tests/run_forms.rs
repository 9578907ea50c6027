//! Every report form end to end through the real binary: `taucal run` on benches that are not
//! the demo's, each DUT reporting as one kind of real device does (raw timestamps, per-frame RTT,
//! burst-averaged RTT, burst-averaged range with the device's own K removed), then `taucal fit`
//! and `taucal report` on the run directory. The truth is the simulator's declared K per gain
//! state (`[sim.dut]` TX + RX delay); the check is that each table holds it within its interval.

use crate::instruments::Server;
use crate::support::{assert_tables_agree, csv_numbers, repo, root, Taucal};
use taucal::bench::Bench;

/// A shipped simulated bench's text, its DUT reporting `form` and its gain index.
fn bench_reporting(file: &str, form: &str) -> String {
    let text =
        std::fs::read_to_string(root().join("recipes/benches").join(file)).expect("bench file");
    let mut out = String::new();
    for line in text.lines() {
        let key = line.split('=').next().unwrap_or("").trim();
        match key {
            "reports" => out.push_str(&format!("reports = \"{form}\"\n")),
            "reports_gain" => out.push_str("reports_gain = true\n"),
            // A device removes its own K only from the ranges it reports.
            "applied_k_ps" if form != "range_burst" => {}
            _ => {
                out.push_str(line);
                out.push('\n');
            }
        }
    }
    out
}

/// Column `name` of every data row of a CSV text.
fn column<'a>(csv: &'a str, name: &str) -> Vec<&'a str> {
    let mut lines = csv.lines();
    let header: Vec<&str> = lines.next().expect("header").split(',').collect();
    let at = header
        .iter()
        .position(|h| *h == name)
        .unwrap_or_else(|| panic!("no column {name} in {header:?}"));
    lines.map(|l| l.split(',').nth(at).unwrap_or("")).collect()
}

/// Checks a run's table against the bench's truth: three states, each K within 2.5 × its 95 %
/// half-width of the declared one (a deterministic seed, so the margin is for honesty across
/// forms, not for flakiness).
fn assert_table_holds_truth(bench: &Bench, table: &str, what: &str) {
    let truth = bench.sim.as_ref().expect("simulated bench");
    let rows = csv_numbers(table);
    assert_eq!(rows.len(), 3, "{what}: three gain states\n{table}");
    for r in rows {
        let (gain, k_ps, ci95_ps) = (r[2] as u32, r[3], r[4]);
        let want = truth.dut_k_ps(gain).expect("gain state in truth");
        assert!(
            ci95_ps > 0.0 && ci95_ps < 60.0,
            "{what} gain {gain}: ±{ci95_ps}"
        );
        assert!(
            (k_ps - want).abs() <= 2.5 * ci95_ps,
            "{what} gain {gain}: {k_ps:.1} ± {ci95_ps:.1} ps against the declared {want} ps"
        );
    }
}

#[test]
fn every_report_form_runs_fits_and_reports_end_to_end_and_holds_the_truth() {
    // The Marlet-40 and Vellisk-5 benches: other gain tables, thresholds and path delays than the
    // demo's (K = 1320 + [780, 1010, 1290] ps and 1650 + [940, 1180, 1460] ps).
    for (file, form) in [
        ("sim-marlet40.toml", "timestamps"),
        ("sim-marlet40.toml", "rtt_frames"),
        ("sim-marlet40.toml", "rtt_burst"),
        ("sim-vellisk5.toml", "rtt_burst"),
        ("sim-vellisk5.toml", "range_burst"),
    ] {
        let what = format!("{file} reporting {form}");
        let text = bench_reporting(file, form);
        let out = Taucal::new()
            .file("bench.toml", &text)
            .args([
                "run",
                &repo("recipes/rx-gain-sweep.toml"),
                "--bench",
                "bench.toml",
                "--out",
                "run",
            ])
            .run();
        out.expect_code(0);
        let bench = Bench::load(&out.path("bench.toml")).expect("bench loads");

        // The record says what the device reported, and nothing it did not.
        let ex = out.read("run/exchanges.csv");
        let filled = |name: &str| column(&ex, name).iter().filter(|v| !v.is_empty()).count();
        let ok = column(&ex, "status").iter().filter(|s| **s == "ok").count();
        assert!(ok > 300, "{what}: {ok} rows ok");
        let frames: Vec<u32> = column(&ex, "frames")
            .iter()
            .map(|f| f.parse().expect("frames"))
            .collect();
        match form {
            "timestamps" => {
                assert!(filled("t1_ps") >= ok, "{what}");
                assert_eq!((filled("rtt_ps"), filled("range_mm")), (0, 0), "{what}");
                assert!(frames.iter().all(|f| *f == 1), "{what}");
            }
            "rtt_frames" => {
                assert_eq!((filled("t1_ps"), filled("range_mm")), (0, 0), "{what}");
                assert!(filled("rtt_ps") >= ok, "{what}");
                assert!(frames.iter().all(|f| *f == 1), "{what}");
            }
            "rtt_burst" => {
                assert_eq!((filled("t1_ps"), filled("range_mm")), (0, 0), "{what}");
                assert!(filled("rtt_ps") >= ok, "{what}");
                assert!(frames.iter().any(|f| *f > 1), "{what}: burst averages");
            }
            _ => {
                assert_eq!((filled("t1_ps"), filled("rtt_ps")), (0, 0), "{what}");
                assert!(filled("range_mm") >= ok, "{what}");
                assert!(frames.iter().any(|f| *f > 1), "{what}: burst averages");
            }
        }
        assert!(
            filled("dut_gain") >= ok,
            "{what}: the gain index is reported"
        );
        let manifest: toml::Table = toml::from_str(&out.read("run/manifest.toml")).expect("toml");
        assert_eq!(manifest["record_version"].as_integer(), Some(2), "{what}");

        let table = out.read("run/caltable.csv");
        assert_table_holds_truth(&bench, &table, &what);
        assert!(
            out.read("run/verify.csv").lines().count() > 5,
            "{what}: a verification"
        );

        // Offline: the fit of the recorded run gives the run's table, and the report renders.
        let out = Taucal::in_dir(out.dir)
            .args(["fit", "run/exchanges.csv", "--out", "refit"])
            .run();
        out.expect_code(0);
        assert_tables_agree(&table, &out.read("refit/caltable.csv"));
        let out = Taucal::in_dir(out.dir).args(["report", "run"]).run();
        out.expect_code(0);
        assert!(
            out.read("run/report.html").contains("Calibration table"),
            "{what}: the report names its table"
        );
    }
}

/// The served Vellisk-5 bench with its DUT role bound to `dut` through the driver in `drivers`.
fn served_vellisk(attenuator: &str, dut: &str, applied_k: Option<f64>) -> String {
    let text = std::fs::read_to_string(root().join("recipes/benches/sim-vellisk5-served.toml"))
        .expect("served bench");
    let text = text
        .replace("tcp:127.0.0.1:5025", attenuator)
        .replace("tcp:127.0.0.1:5026", dut)
        .replace(
            "drivers_dir = \"../../drivers\"",
            "drivers_dir = \"drivers\"",
        );
    match applied_k {
        Some(k) => text.replacen("[dut]\n", &format!("[dut]\napplied_k_ps = {k:?}\n"), 1),
        None => text,
    }
}

#[test]
fn a_range_device_whose_k_nobody_states_is_refused_before_it_runs_and_runs_once_the_bench_states_it(
) {
    // The shipped Vellisk-5 driver reads the K the phone reports with each distance; a copy that
    // does not capture it (firmware that prints no K) leaves the ranges without a known K.
    // Served with its gain index, so the table's cells are the simulator's states.
    let served = tempfile::tempdir().expect("tempdir");
    let truth_file = served.path().join("vellisk5.toml");
    std::fs::write(
        &truth_file,
        bench_reporting("sim-vellisk5.toml", "range_burst"),
    )
    .expect("write");
    let server = Server::start_bench(
        &truth_file.display().to_string(),
        &["attenuator=tcp:127.0.0.1:0", "dut=tcp:127.0.0.1:0"],
    );
    let driver =
        std::fs::read_to_string(root().join("drivers/fenwhistle-vellisk5.toml")).expect("driver");
    // It also reads the gain index this simulated phone appends (` g=N`).
    let blind = driver
        .replace("kapp_ps=(?P<applied_k>", "kapp_ps=(?:")
        .replace(
            "st=(?P<status>[a-z_]+)$",
            "st=(?P<status>[a-z_]+) g=(?P<gain>\\d+)$",
        );
    assert_eq!(
        blind.matches("(?P<gain>").count() + blind.matches("kapp_ps=(?:").count(),
        2,
        "the driver captures the phone's K, and no gain"
    );
    let attenuator_driver =
        std::fs::read_to_string(root().join("drivers/brackwater-tidegate95.toml"))
            .expect("attenuator driver");
    let (attenuator, dut) = (server.address("attenuator"), server.address("dut"));
    let run = |applied_k: Option<f64>| {
        Taucal::new()
            .file("drivers/fenwhistle-vellisk5.toml", &blind)
            .file("drivers/brackwater-tidegate95.toml", &attenuator_driver)
            .file("bench.toml", &served_vellisk(&attenuator, &dut, applied_k))
            .args([
                "run",
                &repo("recipes/rx-gain-sweep.toml"),
                "--bench",
                "bench.toml",
                "--out",
                "run",
            ])
            .run()
    };

    // Refused before anything runs, at the bench's DUT role, saying what to declare.
    let out = run(None);
    assert_eq!(out.code, 2, "{}", out.stderr);
    assert!(!out.stderr.contains("panicked"), "{}", out.stderr);
    assert!(
        out.stderr.contains("bench.toml")
            && out.stderr.contains("roles.dut.driver")
            && out.stderr.contains("applied_k_ps under [dut]"),
        "the error names the file, the key and what to declare:\n{}",
        out.stderr
    );
    assert!(!out.has_dir("run"), "nothing ran");

    // The phone's factory K, as its maker states it (the bench's `[sim.dut] applied_k_ps`).
    let out = run(Some(2700.0));
    out.expect_code(0);
    let bench = Bench::load(&truth_file).expect("bench");
    assert_table_holds_truth(
        &bench,
        &out.read("run/caltable.csv"),
        "served Vellisk-5, K from the bench",
    );
    // The unit is the serial its identity reply names (the driver's `serial` capture): a
    // served bench is not simulated as far as the runner knows.
    let manifest: toml::Table = toml::from_str(&out.read("run/manifest.toml")).expect("toml");
    assert_eq!(manifest["unit_serial"].as_str(), Some("FW-V5-88341"));
    // The refit finds the K where the run did: in the bench its manifest names.
    let table = out.read("run/caltable.csv");
    let out = Taucal::in_dir(out.dir)
        .args(["fit", "run/exchanges.csv", "--out", "refit"])
        .run();
    out.expect_code(0);
    assert_tables_agree(&table, &out.read("refit/caltable.csv"));
}
