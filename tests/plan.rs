//! Reduced calibration plans through the real binary, on simulated fleets of the Dunmere line
//! bench (not the demo's) with its RX spread changed: leave-one-unit-out coverage of the
//! prediction intervals over several seeds, the plan's exchanges against the full recipe's,
//! the acceptance limit met where the population allows it and said plainly where it does not,
//! and a reduced recipe whose `[fit] predict` rows hold the simulated truth.

use crate::support::{repo, Taucal};

const BENCH: &str = "recipes/benches/sim-fleet-line.toml";
const RECIPE: &str = "recipes/factory-golden.toml";
/// factory-golden's mid-plateau attenuation of each gain state.
const MID_PLATEAU_DB: [f64; 3] = [27.0, 49.0, 75.0];
/// Three unbiased stations: the truth file holds the DUT's K, which a biased station's
/// measurements would miss by its path error.
const STATIONS: &str = "line-a,line-b,line-c";

/// The line bench with each gain state's own RX spread set to `rx_sd_ps`, as `bench.toml`.
fn bench(rx_sd_ps: f64) -> String {
    let text = std::fs::read_to_string(repo(BENCH)).expect("bench");
    let line = "rx_delay_sd_ps = 10.0";
    assert!(text.contains(line), "the bench's RX spread line moved");
    text.replace(line, &format!("rx_delay_sd_ps = {rx_sd_ps:.1}"))
}

/// `sim fleet` of `recipe` on a bench with RX spread `rx_sd_ps` into `sqlite:STORE`.
fn fleet(
    t: Taucal,
    recipe: &str,
    rx_sd_ps: f64,
    units: u32,
    seed: u64,
    store: &str,
) -> crate::support::Outcome {
    let units = units.to_string();
    let seed = seed.to_string();
    let url = format!("sqlite:{store}");
    let out = t
        .file("bench.toml", &bench(rx_sd_ps))
        .args([
            "sim",
            "fleet",
            recipe,
            "--bench",
            "bench.toml",
            "--units",
            units.as_str(),
            "--stations",
            STATIONS,
            "--seed",
            seed.as_str(),
            "--store",
            url.as_str(),
            "--out",
            "runs",
            "--truth-out",
            "truth.csv",
        ])
        .run();
    out.expect_code(0);
    out
}

/// `fleet plan --measure 1` with the recipe's limit of ±50 ps and `--validate`, and `extra`.
fn plan(dir: tempfile::TempDir, store: &str, extra: &[&str]) -> crate::support::Outcome {
    let url = format!("sqlite:{store}");
    let out = Taucal::in_dir(dir)
        .args([
            "fleet",
            "plan",
            "--store",
            url.as_str(),
            "--measure",
            "1",
            "--out",
            "model.toml",
            "--max-ci95-ps",
            "50",
            "--validate",
        ])
        .args(extra.iter().copied())
        .run();
    out.expect_code(0);
    out
}

/// The numbers in the `validate:` line that starts with `prefix`.
fn numbers_after(stdout: &str, prefix: &str) -> Vec<f64> {
    let line = stdout
        .lines()
        .find(|l| l.starts_with(prefix))
        .unwrap_or_else(|| panic!("no `{prefix}` line in:\n{stdout}"));
    line[prefix.len()..]
        .split(|c: char| !(c.is_ascii_digit() || c == '.'))
        .filter_map(|w| w.trim_end_matches('.').parse().ok())
        .collect()
}

#[test]
fn leave_one_out_covers_about_95_percent_for_a_third_of_the_exchanges() {
    // RX spread 4 ps per state: the states share the unit-wide and TX parts (25 ps), and one
    // cell measured to about ±47 ps predicts the others to about ±35 ps, within the recipe's
    // ±50 ps. Three fleets of 200 units, 400 intervals each: the pooled coverage
    // has a binomial SE of 0.63 %, so 93–97 % is about ±3 SE around 95 %.
    let (mut covered, mut intervals) = (0.0, 0.0);
    for seed in [31, 32, 33] {
        let out = fleet(Taucal::new(), &repo(RECIPE), 4.0, 200, seed, "f.sqlite");
        let out = plan(out.dir, "f.sqlite", &[]);
        let s = &out.stdout;
        assert!(
            s.contains("every predicted 95 % interval is within the acceptance limit ±50 ps"),
            "seed {seed}:\n{s}"
        );
        let c = numbers_after(s, "validate: leaving each of ");
        assert_eq!(c[0], 200.0, "{s}");
        covered += c[1];
        intervals += c[2];
        let x = numbers_after(s, "validate: exchanges per unit ");
        let ratio = x[0] / x[1];
        assert!(
            ratio <= 0.35,
            "seed {seed}: the plan spends {ratio} of the full recipe\n{s}"
        );
        assert!(ratio > 0.2, "seed {seed}: {ratio}\n{s}");
    }
    let coverage = covered / intervals;
    assert!(
        (0.93..=0.97).contains(&coverage),
        "pooled leave-one-out coverage {coverage} over {intervals} intervals"
    );
}

#[test]
fn a_population_too_spread_to_predict_within_the_limit_is_said_so() {
    // RX spread 30 ps per state: the states share only the unit-wide and TX parts (25 ps),
    // and one cell measured to about ±47 ps predicts the others to about ±72 ps; both
    // predicted cells are reported over the ±50 ps limit.
    let out = fleet(Taucal::new(), &repo(RECIPE), 30.0, 100, 41, "f.sqlite");
    let out = plan(out.dir, "f.sqlite", &[]);
    let over = out
        .stdout
        .lines()
        .filter(|l| l.starts_with("NOT WITHIN LIMIT: ") && l.contains("does not allow better"))
        .count();
    assert_eq!(over, 2, "{}", out.stdout);
}

#[test]
fn a_reduced_recipe_predicts_the_other_states_within_their_intervals() {
    // Plan on one fleet, then calibrate a fresh fleet (another seed) with the plan's reduced
    // recipe: it measures only the chosen state and names the model in [fit] predict. Each
    // predicted row's 95 % interval is checked against the simulator's truth: 100 units, 200
    // intervals, binomial SE 1.5 %, so 90–99 % (the tight 93–97 % check is the pooled
    // leave-one-out one).
    let out = fleet(Taucal::new(), &repo(RECIPE), 4.0, 150, 51, "plan.sqlite");
    let full = repo(RECIPE);
    let out = plan(
        out.dir,
        "plan.sqlite",
        &["--recipe", full.as_str(), "--recipe-out", "reduced.toml"],
    );
    let model = out.read("model.toml");
    let measured: Vec<usize> = model
        .split("[[cell]]")
        .skip(1)
        .filter(|c| c.contains("measure = true"))
        .map(|c| {
            let g = c.lines().find_map(|l| l.strip_prefix("gain_index = "));
            g.and_then(|g| g.trim().parse().ok()).expect("gain_index")
        })
        .collect();
    assert_eq!(measured.len(), 1, "{model}");
    // The reduced recipe keeps the chosen state's mid-plateau point only.
    let reduced = out.read("reduced.toml");
    let point = format!("atten_db = [{:.1}]", MID_PLATEAU_DB[measured[0]]);
    assert!(reduced.contains(&point), "{reduced}");
    assert!(reduced.contains("predict = \"model.toml\""), "{reduced}");
    let out = fleet(
        Taucal::in_dir(out.dir),
        "reduced.toml",
        4.0,
        100,
        52,
        "reduced.sqlite",
    );

    let truth: std::collections::HashMap<(String, u32), f64> = out
        .read("truth.csv")
        .lines()
        .skip(1)
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            (
                (f[0].to_string(), f[4].parse().unwrap()),
                f[5].parse().unwrap(),
            )
        })
        .collect();
    let serials: std::collections::BTreeSet<String> =
        truth.keys().map(|(s, _)| s.clone()).collect();
    let (mut held, mut n) = (0, 0);
    for serial in &serials {
        let table = out.read(&format!("runs/{serial}/caltable.csv"));
        let header: Vec<&str> = table.lines().next().unwrap().split(',').collect();
        let col = |name: &str| header.iter().position(|h| *h == name).unwrap();
        for line in table.lines().skip(1) {
            let f: Vec<&str> = line.split(',').collect();
            if f[col("source")] != "predicted" {
                continue;
            }
            let g: u32 = f[col("gain_index")].parse().unwrap();
            let k: f64 = f[col("delay_ps")].parse().unwrap();
            let ci: f64 = f[col("ci95_ps")].parse().unwrap();
            n += 1;
            if (k - truth[&(serial.clone(), g)]).abs() <= ci {
                held += 1;
            }
        }
    }
    assert_eq!(n, 200, "two predicted rows per unit");
    let coverage = f64::from(held) / f64::from(n);
    assert!((0.90..=0.99).contains(&coverage), "coverage {coverage}");

    // The store keeps the predicted rows, and `store table` carries them out.
    let first = serials.iter().next().unwrap().clone();
    let t = Taucal::in_dir(out.dir)
        .args([
            "store",
            "table",
            first.as_str(),
            "--store",
            "sqlite:reduced.sqlite",
            "--format",
            "csv",
        ])
        .run();
    t.expect_code(0);
    assert_eq!(t.stdout.matches(",predicted").count(), 2, "{}", t.stdout);
}

/// A population model's `[[cell]]`: (center, bw, gain), marked measured, mean, noise SD, its
/// covariance row.
fn model_cell(cell: (u32, u32, u32), measure: bool, mean_ps: f64, noise: f64, cov: &str) -> String {
    format!(
        "[[cell]]\ncenter_mhz = {}\nbw_mhz = {}\ngain_index = {}\nmeasure = {measure}\n\
         mean_ps = {mean_ps:?}\nnoise_sd_ps = {noise:?}\ncov_ps2 = {cov}\n\n",
        cell.0, cell.1, cell.2
    )
}

#[test]
fn check_describes_the_prediction_a_run_would_make() {
    // factory-quick visits 5180 MHz / 80 MHz alone. The model measures gain 0 there and gain 0
    // of 5240 MHz / 40 MHz, which the recipe never visits; gains 1 and 2 of 5180/80 and the
    // unvisited cell are predicted. Expected SDs by the conditional normal (from memory: the
    // true variance Σ_jj − noise_j², less Σ_j0² / Σ_00 for the one conditioning cell, whose
    // own noise stands in its place at the population's level):
    //   gain 1: 2000 − 20² − 1200²/2500 = 1024 ps², SD 32 ps, 1.959964 · 32 = 62.7 ps;
    //   gain 2: uncorrelated, 1700 − 20² = 1300 ps², 1.959964 · 36.06 = 70.7 ps;
    //   5240/40: uncorrelated, 1000 − 25² = 375 ps², 1.959964 · 19.36 = 38.0 ps.
    let model = [
        model_cell(
            (5180, 80, 0),
            true,
            2400.0,
            30.0,
            "[2500.0, 1200.0, 0.0, 0.0]",
        ),
        model_cell(
            (5180, 80, 1),
            false,
            2650.0,
            20.0,
            "[1200.0, 2000.0, 0.0, 0.0]",
        ),
        model_cell(
            (5180, 80, 2),
            false,
            2900.0,
            20.0,
            "[0.0, 0.0, 1700.0, 0.0]",
        ),
        model_cell((5240, 40, 0), true, 2450.0, 25.0, "[0.0, 0.0, 0.0, 1000.0]"),
    ]
    .concat();
    let full = std::fs::read_to_string(repo(RECIPE)).expect("recipe");
    let recipe = full.replace("[accept]", "[fit]\npredict = \"model.toml\"\n\n[accept]");
    let out = Taucal::new()
        .file("r.toml", &recipe)
        .file("model.toml", &model)
        .args(["check", "r.toml", "--bench", &repo(BENCH)])
        .run();
    out.expect_code(0);
    for line in [
        "model.toml (4 cells); the cells it marks measured:",
        "  measured 5180 MHz / 80 MHz gain 0\n",
        "  measured 5240 MHz / 40 MHz gain 0: a channel the recipe does not visit",
        "  predicted 5180 MHz / 80 MHz gain 1: expected 95 % half-width 62.7 ps\n",
        "  predicted 5180 MHz / 80 MHz gain 2: expected 95 % half-width 70.7 ps\n",
        "  predicted 5240 MHz / 40 MHz gain 0: expected 95 % half-width 38.0 ps\n",
    ] {
        assert!(out.stdout.contains(line), "{line:?} in\n{}", out.stdout);
    }
    // Two measured cells correlated beyond ±1 (|1200| > √(1000 · 1000)): a covariance no
    // prediction can use, refused by check, naming the model file, before any run spends its
    // bench time to fail at the fit.
    let broken = [
        model_cell((5180, 80, 0), true, 2400.0, 10.0, "[1000.0, 1200.0, 0.0]"),
        model_cell((5180, 80, 1), true, 2650.0, 10.0, "[1200.0, 1000.0, 0.0]"),
        model_cell((5180, 80, 2), false, 2900.0, 10.0, "[0.0, 0.0, 1000.0]"),
    ]
    .concat();
    let out = Taucal::new()
        .file("r.toml", &recipe)
        .file("model.toml", &broken)
        .args(["check", "r.toml", "--bench", &repo(BENCH)])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr.contains("model.toml") && out.stderr.contains("not positive definite"),
        "{}",
        out.stderr
    );
}

#[test]
fn a_missing_or_broken_model_is_named_where_it_is_given() {
    let full = std::fs::read_to_string(repo(RECIPE)).expect("recipe");
    let recipe = full.replace("[accept]", "[fit]\npredict = \"model.toml\"\n\n[accept]");
    let bench = repo(BENCH);
    let check = |t: Taucal| {
        let out = t.args(["check", "r.toml", "--bench", bench.as_str()]).run();
        out.expect_code(2);
        out.stderr
    };
    let e = check(Taucal::new().file("r.toml", &recipe));
    assert!(
        e.contains("r.toml") && e.contains("fit.predict") && e.contains("no such file"),
        "{e}"
    );
    // Cell 1's covariance with cell 0 differs from cell 0's with cell 1.
    let model = "[[cell]]\ncenter_mhz = 5180\nbw_mhz = 80\ngain_index = 0\nmeasure = true\n\
                 mean_ps = 2400.0\nnoise_sd_ps = 20.0\ncov_ps2 = [900.0, 700.0]\n\n\
                 [[cell]]\ncenter_mhz = 5180\nbw_mhz = 80\ngain_index = 1\nmeasure = false\n\
                 mean_ps = 2600.0\nnoise_sd_ps = 20.0\ncov_ps2 = [600.0, 900.0]\n";
    let e = check(
        Taucal::new()
            .file("r.toml", &recipe)
            .file("model.toml", model),
    );
    assert!(
        e.contains("model.toml line 17")
            && e.contains("cell.1.cov_ps2.0")
            && e.contains("symmetric"),
        "{e}"
    );
}
