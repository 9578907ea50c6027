//! `taucal check`'s plan preview: its bench-time estimate against what a dry run on the
//! simulated bench actually takes (the run's manifest `bench_time_s`).

use crate::support::{repo, Taucal};

/// The estimate `check` prints, in seconds.
fn estimated_s(stdout: &str) -> f64 {
    stdout
        .lines()
        .find_map(|l| l.strip_prefix("estimated bench time: "))
        .and_then(|rest| rest.split(" s").next())
        .and_then(|n| n.parse().ok())
        .unwrap_or_else(|| panic!("no estimate in:\n{stdout}"))
}

fn bench_time_s(recipe: &str, extra: &[&str]) -> f64 {
    let out = Taucal::new()
        .args(["run", recipe, "--out", "r"])
        .args(extra.iter().copied())
        .run();
    assert!(out.code == 0 || out.code == 1, "{}", out.stderr);
    let m: toml::Table = toml::from_str(&out.read("r/manifest.toml")).expect("manifest");
    m["bench_time_s"].as_float().expect("bench_time_s")
}

fn check(recipe: &str, extra: &[&str]) -> String {
    let out = Taucal::new()
        .args(["check", recipe])
        .args(extra.iter().copied())
        .run();
    out.expect_code(0);
    out.stdout
}

#[test]
fn a_fully_declared_recipe_is_estimated_to_the_millisecond() {
    // Fixed points, fixed bursts, no script: everything is known before the run, so the
    // estimate must equal the simulated bench's virtual time (up to float rounding).
    let recipe = "\
[recipe]
name = \"fixed\"
[[stage]]
name = \"map\"
kind = \"gainmap\"
center_mhz = 5180
bw_mhz = 80
atten_db = { from = 20.0, to = 80.0, step = 5.0 }
frames = 8
settle_ms = 30.0
[[stage]]
name = \"s\"
kind = \"sweep\"
center_mhz = 5180
bw_mhz = 40
atten_db = [30.0, 30.0, 60.0]
bursts = 3
frames = 20
settle_ms = 12.5
";
    let dir = tempfile::tempdir().expect("tempdir");
    let path = dir.path().join("fixed.toml");
    std::fs::write(&path, recipe).expect("write");
    let path = path.display().to_string();
    let stdout = check(&path, &[]);
    assert!(!stdout.contains("lower bound"), "{stdout}");
    let est = estimated_s(&stdout);
    let real = bench_time_s(&path, &[]);
    assert!((est - real).abs() < 1e-3, "estimate {est} s, run {real} s");
}

#[test]
fn the_demo_recipe_estimate_is_within_ten_percent_of_its_dry_run() {
    let recipe = repo("recipes/rx-gain-sweep.toml");
    let stdout = check(&recipe, &[]);
    assert!(stdout.contains("a lower bound"), "{stdout}");
    assert!(stdout.contains("`top-up`"), "{stdout}");
    let est = estimated_s(&stdout);
    let real = bench_time_s(&recipe, &[]);
    assert!(
        est <= real && (real - est) / real < 0.10,
        "estimate {est} s, run {real} s"
    );
}

#[test]
fn an_adaptive_recipe_is_estimated_as_a_lower_bound() {
    let recipe = repo("recipes/factory-golden.toml");
    let stdout = check(&recipe, &[]);
    assert!(
        stdout.contains("adaptive: counted at 10 bursts"),
        "{stdout}"
    );
    let est = estimated_s(&stdout);
    let real = bench_time_s(&recipe, &[]);
    assert!(est <= real + 1e-9, "estimate {est} s, run {real} s");
}

#[test]
fn a_real_bench_timing_table_changes_the_estimate() {
    let bench = std::fs::read_to_string(repo("recipes/benches/sim-demo.toml"))
        .expect("bench")
        .replace(
            "[path]",
            "[timing]\nburst_setup_ms = 50.0\nframe_interval_us = 2000.0\natten_switch_ms = 20.0\n\n[path]",
        );
    let out = Taucal::new()
        .file("b.toml", &bench)
        .args([
            "check",
            &repo("recipes/rx-gain-sweep.toml"),
            "--bench",
            "b.toml",
        ])
        .run();
    out.expect_code(0);
    // A simulated bench spends its [sim] timing, so that is what the estimate uses.
    assert!(
        out.stdout.contains("timing from the simulation's"),
        "{}",
        out.stdout
    );
    let bad = bench.replace("atten_switch_ms = 20.0", "atten_switch_ms = -1.0");
    let out = Taucal::new()
        .file("b.toml", &bad)
        .args([
            "check",
            &repo("recipes/rx-gain-sweep.toml"),
            "--bench",
            "b.toml",
        ])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr.contains("timing.atten_switch_ms"),
        "{}",
        out.stderr
    );
}

#[test]
fn check_counts_in_plain_words_and_numbers_stages_as_the_run_does() {
    let recipe = "[recipe]\nname = \"words\"\n\
                  [[stage]]\nname = \"one\"\nkind = \"sweep\"\ncenter_mhz = 5180\nbw_mhz = 80\n\
                  atten_db = [40.0]\nbursts = 1\nframes = 2\n\
                  [[stage]]\nname = \"s\"\nkind = \"script\"\ncenter_mhz = 5180\nbw_mhz = 80\n\
                  script = \"burst(4);\"\n";
    let out = Taucal::new()
        .file("w.toml", recipe)
        .args(["check", "w.toml"])
        .run();
    out.expect_code(0);
    for line in [
        "stage 1/2 `one` sweep on 5180 MHz / 80 MHz: 1 point 40..40 dB, 1 burst × 2 exchanges each",
        "  plan: 1 point, 1 burst, 2 exchanges, ",
        "stage 2/2 `s` script (1 line)",
        "plan: 2 stages, 1 point, 2 exchanges\n",
        "timing from the simulation's [sim.ftm] and [sim.attenuator]",
    ] {
        assert!(out.stdout.contains(line), "no {line:?} in\n{}", out.stdout);
    }
    assert!(!out.stdout.contains("stage 0"), "{}", out.stdout);

    // A soak records nothing: its time, not "0 points".
    let soak = check(&repo("recipes/overnight-soak.toml"), &[]);
    assert!(soak.contains(", no exchanges (soak: "), "{soak}");
    assert!(!soak.contains(" 0 points"), "{soak}");

    // A bench of real instruments without [timing] is estimated with the defaults, and says so.
    let served = check(
        &repo("recipes/rx-gain-sweep.toml"),
        &["--bench", &repo("recipes/benches/sim-served.toml")],
    );
    assert!(
        served.contains("timing by default (the bench file has no [timing])"),
        "{served}"
    );
    assert!(!served.contains("the bench's [timing]"), "{served}");
}
