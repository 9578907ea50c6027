//! `exchanges.csv` record versions through the real binary: new runs write version 2, and
//! version 1 files (the recorded demo run) still fit, report and resume as before.

use crate::support::{contract_columns, repo, Taucal};

const V1_HEADER: &str = "stage,point,burst,seq,atten_db,center_mhz,bw_mhz,t1_ps,t2_ps,t3_ps,\
                         t4_ps,dut_gain,dut_rssi_dbm,ref_gain,temp_c,status";

const DEMO: &str = "demo-data/rx-gain-sweep";

fn manifest(text: &str) -> toml::Table {
    toml::from_str(text).expect("manifest is TOML")
}

#[test]
fn a_run_writes_version_2_with_bench_time_rising_and_one_frame_per_exchange() {
    let out = Taucal::new()
        .args(["run", &repo("recipes/rx-gain-sweep.toml"), "--out", "r"])
        .run();
    out.expect_code(0);
    let text = out.read("r/exchanges.csv");
    let mut lines = text.lines();
    assert_eq!(
        lines.next(),
        Some(format!("{V1_HEADER},time_s,rtt_ps,range_mm,frames").as_str())
    );
    let m = manifest(&out.read("r/manifest.toml"));
    assert_eq!(m["record_version"].as_integer(), Some(2));
    let bench_time_s = m["bench_time_s"].as_float().expect("bench_time_s");
    let mut last: Option<(String, f64)> = None;
    let mut bursts = 0;
    for line in lines {
        let f: Vec<&str> = line.split(',').collect();
        assert_eq!(f.len(), 20, "{line}");
        assert_eq!(f[19], "1", "one frame per exchange: {line}");
        assert_eq!(
            (f[17], f[18]),
            ("", ""),
            "timestamps, no RTT or range: {line}"
        );
        // Written to the microsecond.
        assert_eq!(f[16].split('.').nth(1).map(str::len), Some(6), "{line}");
        let time_s: f64 = f[16].parse().expect("time_s");
        let burst = f[..3].join(",");
        if let Some((last_burst, last_time)) = &last {
            if *last_burst == burst {
                assert_eq!(time_s, *last_time, "one time per burst: {line}");
            } else {
                assert!(time_s > *last_time, "later bursts, later times: {line}");
                bursts += 1;
            }
        }
        assert!(
            time_s <= bench_time_s,
            "{time_s} within the run's {bench_time_s} s"
        );
        last = Some((burst, time_s));
    }
    assert!(bursts > 100, "{bursts} bursts");

    // The report's drift axis is that bench time.
    let report = Taucal::in_dir(out.dir).args(["report", "r"]).run();
    report.expect_code(0);
    let page = report.read("r/report.html");
    assert!(
        page.contains("as the bench clock recorded it"),
        "drift caption"
    );
}

#[test]
fn fit_of_the_version_1_demo_file_prints_the_table_recorded_with_it() {
    // The fixture stays version 1: its table was written by the version-1 writer's run.
    let out = Taucal::new()
        .with_repo(&["demo-data"])
        .args(["fit", &format!("{DEMO}/exchanges.csv")])
        .run();
    out.expect_code(0);
    assert_eq!(
        out.read(&format!("{DEMO}/exchanges.csv")).lines().next(),
        Some(V1_HEADER)
    );
    // The table's own columns; the budget's are appended since caltable layout 2.
    assert_eq!(
        contract_columns(&out.stdout),
        contract_columns(&out.read(&format!("{DEMO}/caltable.csv")))
    );
}

#[test]
fn the_same_exchanges_in_either_version_fit_to_the_same_table() {
    let v1 = std::fs::read_to_string(repo(&format!("{DEMO}/exchanges.csv"))).expect("demo");
    let mut v2 = String::new();
    for (i, line) in v1.lines().enumerate() {
        let appended = match i {
            0 => ",time_s,rtt_ps,range_mm,frames".to_string(),
            _ => format!(",{:.6},,,1", i as f64 * 0.002),
        };
        v2.push_str(line);
        v2.push_str(&appended);
        v2.push('\n');
    }
    let out = Taucal::new()
        .file("v1/exchanges.csv", &v1)
        .file("v2/exchanges.csv", &v2)
        .args(["fit", "v1/exchanges.csv", "--out", "v1"])
        .run();
    out.expect_code(0);
    let out = Taucal::in_dir(out.dir)
        .args(["fit", "v2/exchanges.csv", "--out", "v2"])
        .run();
    out.expect_code(0);
    let table = out.read("v1/caltable.csv");
    assert!(table.lines().count() > 3, "{table}");
    assert_eq!(out.read("v2/caltable.csv"), table);
}

#[test]
fn a_version_1_run_resumes_in_version_1_to_the_same_record() {
    // The recorded demo run, cut back as a run killed two thirds through would leave it: its
    // journal to the 120th checkpoint, its record to some rows past it, its status running.
    let setup = Taucal::new().with_repo(&["recipes", DEMO]);
    let dir = setup.dir().join(DEMO);
    let whole = std::fs::read_to_string(dir.join("exchanges.csv")).expect("exchanges");
    let journal = std::fs::read_to_string(dir.join("journal.log")).expect("journal");
    let kept: Vec<&str> = journal.lines().take(120).collect();
    let rows: usize = kept
        .last()
        .and_then(|l| l.split_whitespace().find_map(|w| w.strip_prefix("rows=")))
        .and_then(|r| r.parse().ok())
        .expect("a checkpoint");
    let cut: Vec<&str> = whole.lines().take(1 + rows + 9).collect();
    assert!(cut.len() < whole.lines().count());
    std::fs::write(dir.join("journal.log"), kept.join("\n") + "\n").expect("journal");
    std::fs::write(dir.join("exchanges.csv"), cut.join("\n") + "\n").expect("exchanges");
    let text = std::fs::read_to_string(dir.join("manifest.toml")).expect("manifest");
    assert!(!text.contains("record_version"), "a manifest of version 1");
    std::fs::write(
        dir.join("manifest.toml"),
        text.replace("status = \"completed\"", "status = \"running\""),
    )
    .expect("manifest");
    std::fs::remove_file(dir.join("caltable.csv")).expect("table");

    let resumed = setup.args(["resume", DEMO]).run();
    resumed.expect_code(0);
    let again = resumed.read(&format!("{DEMO}/exchanges.csv"));
    assert_eq!(again.lines().next(), Some(V1_HEADER));
    assert!(again == whole, "the resumed record is the recorded one");
    let m = manifest(&resumed.read(&format!("{DEMO}/manifest.toml")));
    assert_eq!(m["record_version"].as_integer(), Some(1));
    assert_eq!(m["status"].as_str(), Some("completed"));
    assert_eq!(
        contract_columns(&resumed.read(&format!("{DEMO}/caltable.csv"))),
        contract_columns(
            &std::fs::read_to_string(repo(&format!("{DEMO}/caltable.csv"))).expect("table")
        )
    );

    // Its report still draws drift over the counters' time.
    let report = Taucal::in_dir(resumed.dir).args(["report", DEMO]).run();
    report.expect_code(0);
    assert!(report
        .read(&format!("{DEMO}/report.html"))
        .contains("from the reference's timestamps"));
}

#[test]
fn a_resumed_record_whose_header_is_not_the_manifests_version_is_refused() {
    // A version 2 record under a manifest of version 1 (one without `record_version`): the
    // file was replaced; nothing is touched.
    let setup = Taucal::new().with_repo(&["recipes", DEMO]);
    let dir = setup.dir().join(DEMO);
    let text = std::fs::read_to_string(dir.join("manifest.toml")).expect("manifest");
    std::fs::write(
        dir.join("manifest.toml"),
        text.replace("status = \"completed\"", "status = \"running\""),
    )
    .expect("manifest");
    let v2 = format!("{V1_HEADER},time_s,rtt_ps,range_mm,frames\n");
    std::fs::write(dir.join("exchanges.csv"), &v2).expect("exchanges");
    let resumed = setup.args(["resume", DEMO]).run();
    resumed.expect_code(2);
    assert!(
        resumed.stderr.contains(
            "the header is record version 2, but the manifest says the run records version 1"
        ),
        "{}",
        resumed.stderr
    );
    assert_eq!(resumed.read(&format!("{DEMO}/exchanges.csv")), v2);
}
