//! `taucal fit` on a run's exchanges reproduces the run's table.

use crate::support::{repo, Taucal};

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
