//! The demo recipe end to end through the real binary.

use crate::support::{repo, Taucal};

const EXCHANGES_HEADER: &str = "stage,point,burst,seq,atten_db,center_mhz,bw_mhz,t1_ps,t2_ps,t3_ps,t4_ps,dut_gain,dut_rssi_dbm,ref_gain,temp_c,status,time_s,rtt_ps,range_mm,frames";
const CALTABLE_HEADER: &str =
    "center_mhz,bw_mhz,gain_index,delay_ps,ci95_ps,n_used,n_rejected,source,\
                               u_stat_ps,u_bench_ps,u_comb_ps,dof,k,expanded_ps";

fn manifest(text: &str) -> toml::Table {
    toml::from_str(text).expect("manifest is TOML")
}

#[test]
fn demo_without_bench_says_simulated_and_writes_the_contract_files() {
    let out = Taucal::new()
        .args(["run", &repo("recipes/rx-gain-sweep.toml"), "--out", "demo"])
        .run();
    out.expect_code(0);
    assert!(
        out.stderr.contains("built-in sim-demo bench"),
        "{}",
        out.stderr
    );
    assert!(out.stderr.contains("SIMULATED"), "{}", out.stderr);
    let ex = out.read("demo/exchanges.csv");
    assert_eq!(ex.lines().next(), Some(EXCHANGES_HEADER));
    assert!(ex.lines().count() > 2000, "{} rows", ex.lines().count());
    let table = out.read("demo/caltable.csv");
    assert_eq!(table.lines().next(), Some(CALTABLE_HEADER));
    assert_eq!(table.lines().count(), 4, "three gain states:\n{table}");
    let budget = out.read("demo/budget.csv");
    assert_eq!(
        budget.lines().next(),
        Some("center_mhz,bw_mhz,gain_index,component,type,distribution,sensitivity,u_ps,contribution_ps,dof")
    );
    assert_eq!(
        budget.lines().count(),
        1 + 3 * 4,
        "four components a cell:\n{budget}"
    );
    let m = manifest(&out.read("demo/manifest.toml"));
    assert_eq!(m["status"].as_str(), Some("completed"));
    let bench_s = m["bench_time_s"].as_float().expect("bench_time_s");
    let wall_s = m["wall_time_s"].as_float().expect("wall_time_s");
    assert!(
        bench_s > 1.0 && wall_s > 0.0,
        "bench {bench_s} s, wall {wall_s} s"
    );
    assert_eq!(m["seed"].as_integer(), Some(1));
    assert_eq!(m["caltable_version"].as_integer(), Some(2));
    assert_eq!(m["recipe"]["sha256"].as_str().map(str::len), Some(64));
    assert_eq!(m["bench"]["simulated"].as_bool(), Some(true));
    assert!(!out.read("demo/run.log").is_empty());
    assert_eq!(
        out.read("demo/gainmap.csv").lines().next(),
        Some(
            "center_mhz,bw_mhz,gain_index,atten_min_db,atten_max_db,rx_power_min_dbm,rx_power_max_dbm,\
             next_gain_index,switch_rising_db,switch_rising_ci95_db,switch_falling_db,\
             switch_falling_ci95_db,hysteresis_db,hysteresis_ci95_db,hysteresis_resolved,states"
        )
    );
    assert_eq!(
        out.read("demo/verify.csv").lines().next(),
        Some("center_mhz,bw_mhz,atten_db,rx_power_dbm,equiv_distance_m,n,range_error_single_m,range_error_table_m")
    );
}

#[test]
fn the_same_seed_gives_the_same_exchanges_and_another_seed_does_not() {
    let run = |seed: &str, dir: &str| {
        let o = Taucal::new()
            .args([
                "run",
                &repo("recipes/rx-gain-sweep.toml"),
                "--seed",
                seed,
                "--out",
                dir,
            ])
            .run();
        o.expect_code(0);
        o.read(&format!("{dir}/exchanges.csv"))
    };
    let a = run("11", "a");
    let b = run("11", "b");
    let c = run("12", "c");
    assert_eq!(a, b);
    assert_ne!(a, c);
}

#[test]
fn set_overrides_a_variable() {
    let count_points = |extra: &[&str]| {
        let mut args = vec![
            "run".to_string(),
            repo("recipes/rx-gain-sweep.toml"),
            "--out".into(),
            "r".into(),
        ];
        args.extend(extra.iter().map(|s| s.to_string()));
        let o = Taucal::new().args(args).run();
        o.expect_code(0);
        let m = manifest(&o.read("r/manifest.toml"));
        m["counts"]["points"].as_integer().expect("points")
    };
    let default = count_points(&[]);
    let coarse = count_points(&["--set", "map_step_db=2.0"]);
    assert!(
        coarse < default,
        "map step 2 dB: {coarse} points, 1 dB: {default}"
    );
}

#[test]
fn a_missed_acceptance_limit_exits_1_with_the_data_written() {
    let recipe = std::fs::read_to_string(repo("recipes/rx-gain-sweep.toml"))
        .expect("demo recipe")
        .replace("max_ci95_ps = 60.0", "max_ci95_ps = 0.5");
    let out = Taucal::new()
        .file("strict.toml", &recipe)
        .args(["run", "strict.toml", "--out", "s"])
        .run();
    out.expect_code(1);
    assert!(out.stdout.contains("NOT MET"), "{}", out.stdout);
    let m = manifest(&out.read("s/manifest.toml"));
    assert_eq!(m["status"].as_str(), Some("completed"));
    assert!(out.read("s/caltable.csv").lines().count() > 1);
}

#[test]
fn a_failing_script_stops_the_run_with_exit_3_and_keeps_the_data() {
    let recipe = r#"
[recipe]
name = "script-fault"

[[stage]]
name = "sweep"
kind = "sweep"
center_mhz = 5180
bw_mhz = 80
atten_db = [40.0]
frames = 8

[[stage]]
name = "bad-step"
kind = "script"
center_mhz = 5180
bw_mhz = 80
script = '''
set_atten(40.0);
burst(8);
set_atten(12.0);
'''
"#;
    let out = Taucal::new()
        .file("fault.toml", recipe)
        .args(["run", "fault.toml", "--out", "f"])
        .run();
    out.expect_code(3);
    assert!(
        out.stderr.contains("fault.toml line 21, column 1:"),
        "{}",
        out.stderr
    );
    assert!(out.stderr.contains("max_input_dbm"), "{}", out.stderr);
    let m = manifest(&out.read("f/manifest.toml"));
    assert_eq!(m["status"].as_str(), Some("failed"));
    let rows = out.read("f/exchanges.csv").lines().count();
    assert_eq!(
        rows,
        1 + 8 + 8,
        "the sweep's and the script's bursts are kept"
    );
}

#[test]
fn an_endless_script_is_stopped_at_its_line() {
    let recipe = r#"
[recipe]
name = "runaway"

[[stage]]
name = "spin"
kind = "script"
center_mhz = 5180
bw_mhz = 80
script = '''
let n = 0;
loop {
    n += 1;
}
'''
"#;
    let out = Taucal::new()
        .file("spin.toml", recipe)
        .args(["run", "spin.toml", "--out", "x"])
        .run();
    out.expect_code(3);
    assert!(out.stderr.contains("endless loop"), "{}", out.stderr);
    assert!(out.stderr.contains("spin.toml line 1"), "{}", out.stderr);
}
