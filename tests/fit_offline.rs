//! `taucal fit` on a run's exchanges reproduces the run's table.

use crate::support::{repo, root, Taucal};

fn table(text: &str) -> Vec<Vec<String>> {
    text.lines()
        .skip(1)
        .map(|l| l.split(',').map(str::to_string).collect())
        .collect()
}

#[test]
fn fit_reproduces_the_runs_table_to_a_hundredth_of_a_picosecond() {
    let run = Taucal::new()
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--seed",
            "5",
            "--out",
            "run",
        ])
        .run();
    run.expect_code(0);
    let original = run.read("run/caltable.csv");
    let refit = Taucal::in_dir(run.dir)
        .args([
            "fit",
            "run/exchanges.csv",
            "--bench",
            &repo("recipes/benches/sim-demo.toml"),
            "--out",
            "refit",
        ])
        .run();
    refit.expect_code(0);
    let again = refit.read("refit/caltable.csv");
    let (a, b) = (table(&original), table(&again));
    assert_eq!(a.len(), b.len());
    assert!(!a.is_empty());
    for (x, y) in a.iter().zip(&b) {
        assert_eq!(x[..3], y[..3], "same cell");
        for col in [3, 4] {
            let (p, q): (f64, f64) = (
                x[col].parse().expect("number"),
                y[col].parse().expect("number"),
            );
            assert!((p - q).abs() <= 0.01, "column {col}: {p} vs {q}");
        }
        assert_eq!(x[5..], y[5..], "same counts and source");
    }
    // Agreeing with itself says nothing about being right: the refit table against the truth
    // declared in recipes/benches/sim-demo.toml (K = tx_delay_ps 1500 + rx_delay_ps
    // [900, 1150, 1400]), within twice each row's 95 % half-width (about 4 sigma).
    for row in &b {
        let gain: usize = row[2].parse().expect("gain");
        let truth_ps = 1500.0 + [900.0, 1150.0, 1400.0][gain];
        let (k, ci): (f64, f64) = (row[3].parse().expect("k"), row[4].parse().expect("ci"));
        assert!(
            (k - truth_ps).abs() <= 2.0 * ci,
            "gain {gain}: {k} ± {ci} ps vs {truth_ps}"
        );
    }
}

#[test]
fn fit_prints_the_table_to_stdout_without_out() {
    let run = Taucal::new()
        .args(["run", &repo("recipes/rx-gain-sweep.toml"), "--out", "run"])
        .run();
    run.expect_code(0);
    let original = run.read("run/caltable.csv");
    let refit = Taucal::in_dir(run.dir)
        .args(["fit", "run/exchanges.csv"])
        .run();
    refit.expect_code(0);
    assert_eq!(refit.stdout, original);
    assert!(
        refit.stderr.contains("built-in sim-demo bench"),
        "{}",
        refit.stderr
    );
}

#[test]
fn quiet_keeps_stderr_to_warnings_and_settings_name_their_source() {
    // `--quiet`: only warnings and errors on stderr, for run, fit and export alike.
    let run = Taucal::new()
        .args(["run", &repo("recipes/rx-gain-sweep.toml"), "--out", "run"])
        .args(["--quiet"])
        .run();
    run.expect_code(0);
    assert_eq!(run.stderr, "", "run --quiet");
    let original = run.read("run/caltable.csv");
    let fit = Taucal::in_dir(run.dir)
        .args(["fit", "run/exchanges.csv", "--out", "refit", "--quiet"])
        .run();
    fit.expect_code(0);
    assert_eq!(fit.stderr, "", "fit --quiet");
    let export = Taucal::in_dir(fit.dir)
        .args([
            "export", "run", "--format", "json", "--out", "k.json", "--quiet",
        ])
        .run();
    export.expect_code(0);
    assert_eq!(export.stderr, "", "export --quiet");
    // The threshold in force is the one reported, with where it came from.
    let two = Taucal::in_dir(export.dir)
        .args(["fit", "run/exchanges.csv", "--reject-mad", "2"])
        .run();
    two.expect_code(0);
    assert!(
        two.stderr.contains("reject_mad 2 (--reject-mad); verification stages left out: verify (the run's manifest)"),
        "{}",
        two.stderr
    );
    for (k, words) in [
        (
            "1.99",
            "--reject-mad 1.99 would reject much of a clean normal sample",
        ),
        ("inf", "--reject-mad inf is not a finite number"),
        ("nan", "--reject-mad NaN is not a finite number"),
    ] {
        let out = Taucal::new()
            .args(["fit", "x.csv", "--reject-mad", k])
            .run();
        out.expect_code(2);
        assert!(out.stderr.contains(words), "{k}: {}", out.stderr);
        assert!(
            out.stderr.contains("use 2.0 or more"),
            "{k}: {}",
            out.stderr
        );
    }
    // Without its manifest, the file's stages are all fitted, and the warning says which;
    // naming the verification stage gives the run's table again.
    std::fs::create_dir(two.path("alone")).expect("dir");
    std::fs::copy(
        two.path("run/exchanges.csv"),
        two.path("alone/exchanges.csv"),
    )
    .expect("copy");
    let alone = Taucal::in_dir(two.dir)
        .args(["fit", "alone/exchanges.csv", "--quiet"])
        .run();
    alone.expect_code(0);
    assert!(
        alone
            .stderr
            .contains("no manifest.toml beside alone/exchanges.csv")
            && alone
                .stderr
                .contains("every stage was fitted: map, calibrate, top-up, verify"),
        "{}",
        alone.stderr
    );
    assert_ne!(alone.stdout, original);
    let named = Taucal::in_dir(alone.dir)
        .args([
            "fit",
            "alone/exchanges.csv",
            "--verify-stage",
            "verify",
            "--quiet",
        ])
        .run();
    named.expect_code(0);
    assert_eq!(named.stderr, "");
    assert_eq!(named.stdout, original);
}

#[test]
fn fit_takes_the_bench_the_run_used_and_refuses_one_changed_since() {
    // Without --bench, a run on another bench is refitted with that bench (the demo's path
    // delays would shift every K by thousands of ps), and only while its file is unchanged.
    let bench = std::fs::read_to_string(root().join("recipes/benches/sim-marlet40.toml"))
        .expect("bench")
        .replace("reports_gain = false", "reports_gain = true");
    let run = Taucal::new()
        .file("bench.toml", &bench)
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--bench",
            "bench.toml",
            "--out",
            "run",
        ])
        .run();
    run.expect_code(0);
    let original = run.read("run/caltable.csv");
    let refit = Taucal::in_dir(run.dir)
        .args(["fit", "run/exchanges.csv"])
        .run();
    refit.expect_code(0);
    assert_eq!(refit.stdout, original);
    assert!(
        refit.stderr.contains("bench bench.toml"),
        "{}",
        refit.stderr
    );

    let changed = bench.replace("cable_delay_ps = ", "cable_delay_ps = 1");
    assert_ne!(changed, bench);
    let out = Taucal::in_dir(refit.dir)
        .file("bench.toml", &changed)
        .args(["fit", "run/exchanges.csv"])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr.contains("has changed since the run") && out.stderr.contains("--bench"),
        "{}",
        out.stderr
    );
}
