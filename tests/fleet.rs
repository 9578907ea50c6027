//! Population science through the real binary, on simulated fleets of the Dunmere line bench
//! (not the demo's): a biased station found with no false flags over several seeds, the fleet's
//! mean and spread recovered within their sampling error, the tolerance factor against a
//! published table, fleets reproducible from their seed, and the same answers from SQLite and
//! PostgreSQL.

use crate::store::PgDatabase;
use crate::support::{repo, root, Taucal};
use taucal::fleet::tolerance::exact_factor;

const BENCH: &str = "recipes/benches/sim-fleet-line.toml";
const RECIPE: &str = "recipes/factory-golden.toml";

/// The bench's truth: TX delay, RX delay per gain state, the population's spreads (unit-wide,
/// TX, RX per state) and station `line-d`'s path error, one of five stations.
const TX_PS: f64 = 1480.0;
const RX_PS: [f64; 3] = [880.0, 1120.0, 1390.0];
const UNIT_SD_PS: f64 = 20.0;
const TX_SD_PS: f64 = 15.0;
const RX_SD_PS: f64 = 10.0;
const PATH_ERROR_PS: f64 = 40.0;
const STATIONS: f64 = 5.0;

/// A fleet of `units` with `seed` into `fleet.sqlite` in a fresh directory.
fn fleet(seed: u64, units: u32, extra: &[&str]) -> crate::support::Outcome {
    let (recipe, bench) = (repo(RECIPE), repo(BENCH));
    let units = units.to_string();
    let seed = seed.to_string();
    let mut args = vec![
        "sim",
        "fleet",
        recipe.as_str(),
        "--bench",
        bench.as_str(),
        "--units",
        units.as_str(),
        "--seed",
        seed.as_str(),
        "--store",
        "sqlite:fleet.sqlite",
        "--out",
        "runs",
        "--truth-out",
        "truth.csv",
    ];
    args.extend(extra);
    let out = Taucal::new().args(args).run();
    out.expect_code(0);
    out
}

/// `taucal fleet SUB --format csv` on the store `url`, in `t`'s directory, as rows of fields.
fn fleet_csv(
    dir: tempfile::TempDir,
    sub: &str,
    url: &str,
) -> (Vec<Vec<String>>, tempfile::TempDir) {
    let out = Taucal::in_dir(dir)
        .args(["fleet", sub, "--store", url, "--format", "csv"])
        .run();
    out.expect_code(0);
    let rows = out
        .stdout
        .lines()
        .skip(1)
        .map(|l| l.split(',').map(str::to_string).collect())
        .collect();
    (rows, out.dir)
}

fn f(s: &str) -> f64 {
    s.parse()
        .unwrap_or_else(|_| panic!("`{s}` is not a number"))
}

#[test]
fn a_station_with_a_40_ps_path_error_is_flagged_and_no_other_and_the_fleet_is_recovered() {
    // 300 units over 5 stations, three seeds. The biased station's K reads +2·40 = 80 ps high
    // (round trip); its 60 units give a standard error near 5 ps, so the 20 ps threshold is
    // about 4 standard errors from the unbiased stations and 12 from the biased one.
    for seed in [21, 22, 23] {
        let out = fleet(seed, 300, &[]);
        let (stations, dir) = fleet_csv(out.dir, "stations", "sqlite:fleet.sqlite");
        assert_eq!(stations.len(), 5, "{stations:?}");
        for s in &stations {
            let (name, units, offset, ci95, flagged) =
                (&s[0], f(&s[1]), f(&s[2]), f(&s[3]), s[4] == "yes");
            assert_eq!(units, 60.0, "{s:?}");
            if name == "line-d" {
                assert!(flagged, "seed {seed}: line-d not flagged: {s:?}");
                assert!(
                    (offset - 2.0 * PATH_ERROR_PS).abs() < 4.0 * ci95 / 1.96 + 1.0,
                    "seed {seed}: line-d offset {offset} ± {ci95}, want 80"
                );
            } else {
                assert!(!flagged, "seed {seed}: false flag {s:?}");
            }
        }
        // Recovery: the measured population at state g has mean TX + RX[g] + 2e/5 (one
        // station in five reads 2e high) and a true unit spread of
        // √(unit² + tx² + rx² + (2e)²·(1/5)(4/5)) (the station mix adds its own variance).
        let (stats, _) = fleet_csv(dir, "stats", "sqlite:fleet.sqlite");
        assert_eq!(stats.len(), 3, "{stats:?}");
        let mix = (2.0 * PATH_ERROR_PS).powi(2) * (1.0 / STATIONS) * (1.0 - 1.0 / STATIONS);
        let unit_sd = (UNIT_SD_PS.powi(2) + TX_SD_PS.powi(2) + RX_SD_PS.powi(2) + mix).sqrt();
        for row in &stats {
            let g = f(&row[2]) as usize;
            let (n, mean, sd, noise, spread) =
                (f(&row[3]), f(&row[4]), f(&row[5]), f(&row[11]), f(&row[12]));
            let want_mean = TX_PS + RX_PS[g] + 2.0 * PATH_ERROR_PS / STATIONS;
            // Standard errors of a mean and of an SD (normal theory: sd / √(2(n − 1))),
            // carried to the unit spread through sd / spread.
            let se_mean = sd / n.sqrt();
            let se_spread = sd / (2.0 * (n - 1.0)).sqrt() * sd / spread;
            assert!(
                (mean - want_mean).abs() < 4.0 * se_mean,
                "seed {seed} state {g}: mean {mean}, want {want_mean} ± {se_mean}"
            );
            assert!(
                (spread - unit_sd).abs() < 4.0 * se_spread,
                "seed {seed} state {g}: unit spread {spread}, want {unit_sd} ± {se_spread} \
                 (noise {noise})"
            );
            assert!(
                noise > 10.0 && noise < 30.0,
                "factory-golden measures each cell to ±50 ps (u ≈ 25 ps): {noise}"
            );
        }
    }
}

#[test]
fn the_tolerance_factor_equals_the_published_table() {
    // Meeker, Hahn & Escobar, Statistical Intervals (2nd ed., 2017), Table J.5b, two-sided
    // normal tolerance factors, to their three printed decimals (tests/data/SOURCES.md).
    let text =
        std::fs::read_to_string(root().join("tests/data/tolerance-k2-mhe-j5b.csv")).expect("table");
    let mut checked = 0;
    for line in text.lines().skip(1) {
        let v: Vec<f64> = line.split(',').map(f).collect();
        let k = exact_factor(v[0] as usize, v[1], v[2]).expect("factor");
        assert!(
            (k - v[3]).abs() <= 0.0005 + 1e-9,
            "n {} p {} γ {}: {k:.4}, table {}",
            v[0],
            v[1],
            v[2],
            v[3]
        );
        checked += 1;
    }
    assert!(checked >= 20);
}

#[test]
fn the_tolerance_interval_covers_95_percent_of_units_in_95_percent_of_fleets() {
    // By simulation: fleets of 20 units from N(0, 1), four seeds of 1000 fleets. A fleet's
    // interval x̄ ± k·s covers Φ(hi) − Φ(lo) of the population; that should reach 0.95 in 95 %
    // of fleets (binomial SD over 4000 fleets: 0.34 %).
    use rand::SeedableRng;
    use rand_distr::{Distribution, StandardNormal};
    use statrs::distribution::{ContinuousCDF, Normal};
    let phi = Normal::new(0.0, 1.0).expect("normal");
    let k = exact_factor(20, 0.95, 0.95).expect("factor");
    let mut covered = 0;
    let mut fleets = 0;
    for seed in 1..=4u64 {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        for _ in 0..1000 {
            let x: Vec<f64> = (0..20).map(|_| StandardNormal.sample(&mut rng)).collect();
            let m = x.iter().sum::<f64>() / 20.0;
            let s = (x.iter().map(|v| (v - m).powi(2)).sum::<f64>() / 19.0).sqrt();
            if phi.cdf(m + k * s) - phi.cdf(m - k * s) >= 0.95 {
                covered += 1;
            }
            fleets += 1;
        }
    }
    let rate = f64::from(covered) / f64::from(fleets);
    assert!(
        (rate - 0.95).abs() < 4.0 * 0.0034,
        "coverage confidence {rate}"
    );
}

#[test]
fn a_fleet_is_reproducible_from_its_seed_and_each_unit_is_in_the_store() {
    let a = fleet(5, 6, &["--stations", "s1,s2"]);
    let b = fleet(5, 6, &["--stations", "s1,s2"]);
    let truth = a.read("truth.csv");
    assert_eq!(truth, b.read("truth.csv"));
    assert_eq!(truth.lines().count(), 1 + 6 * 3, "{truth}");
    assert!(truth.contains("DW-T3-F5-00005,s2,5180,80,2,"), "{truth}");
    let (sa, _) = fleet_csv(a.dir, "stats", "sqlite:fleet.sqlite");
    let (sb, _) = fleet_csv(b.dir, "stats", "sqlite:fleet.sqlite");
    assert_eq!(sa, sb);
    assert!(sa.iter().all(|r| r[3] == "6"), "{sa:?}");
}

#[test]
fn bad_fleet_requests_are_refused_plainly() {
    let (recipe, bench) = (repo(RECIPE), repo(BENCH));
    let out = Taucal::new()
        .args([
            "sim", "fleet", &recipe, "--bench", &bench, "--units", "0", "--store", "sqlite:x",
        ])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("--units 0"), "{}", out.stderr);
    let out = Taucal::new()
        .args(["fleet", "stats", "--store", "sqlite:absent.sqlite"])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("does not exist"), "{}", out.stderr);
    let out = Taucal::new()
        .args([
            "fleet",
            "stations",
            "--threshold-ps",
            "-3",
            "--store",
            "sqlite:x",
        ])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("--threshold-ps -3"), "{}", out.stderr);
}

#[test]
fn fleet_statistics_are_the_same_on_sqlite_and_postgresql() {
    let Some(db) = PgDatabase::new("fleet_same") else {
        return;
    };
    let out = fleet(8, 30, &[]);
    let dir = db.synced_from(out.dir, "sqlite:fleet.sqlite");
    let (lite, dir) = fleet_csv(dir, "stats", "sqlite:fleet.sqlite");
    let (pg, dir) = fleet_csv(dir, "stats", &db.url);
    assert_eq!(lite, pg);
    assert_eq!(lite.len(), 3);
    let (lite, dir) = fleet_csv(dir, "stations", "sqlite:fleet.sqlite");
    let (pg, _) = fleet_csv(dir, "stations", &db.url);
    assert_eq!(lite, pg);
    assert_eq!(lite.len(), 5);
}
