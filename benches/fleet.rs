//! `cargo bench --bench fleet`: population science's speed claims (README, Performance).
//!
//! 1. `taucal sim fleet`: 1000 units of `recipes/factory-golden.toml` on the Dunmere line bench
//!    into a fresh SQLite store, each a real run in virtual time; target under a minute.
//! 2. `taucal fleet stats` and `taucal fleet stations` on a store of 100 000 units (a synthetic
//!    3-cell table each, as factory-golden records), through the binary, process start included;
//!    target under 2 s each, on SQLite and on PostgreSQL (`--pg URL` or `TAUCAL_TEST_POSTGRES`,
//!    an admin URL: the bench makes and drops a database of its own; skipped, and said so,
//!    without one).
//!
//! `--smoke` (CI) runs 50 units and a 2000-unit store once; the default is best of 3.

use std::path::Path;
use std::process::Command;
use std::time::Instant;
use taucal::store::record::{CellRow, RunRow};
use taucal::store::{self as results, RunRecord, StoreUrl};

type Error = Box<dyn std::error::Error>;

fn main() -> Result<(), Error> {
    let args: Vec<String> = std::env::args().collect();
    let smoke = args.iter().any(|a| a == "--smoke");
    let pg = args
        .iter()
        .position(|a| a == "--pg")
        .and_then(|i| args.get(i + 1).cloned())
        .or_else(|| std::env::var("TAUCAL_TEST_POSTGRES").ok());
    let (units, store_units, repeats) = if smoke {
        (50, 2000, 1)
    } else {
        (1000, 100_000, 3)
    };
    let work = tempfile::tempdir()?;
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));

    let db = work.path().join("fleet.sqlite");
    let t = Instant::now();
    let status = Command::new(env!("CARGO_BIN_EXE_taucal"))
        .arg("sim")
        .arg("fleet")
        .arg(root.join("recipes/factory-golden.toml"))
        .arg("--bench")
        .arg(root.join("recipes/benches/sim-fleet-line.toml"))
        .args(["--units", &units.to_string(), "--store"])
        .arg(format!("sqlite:{}", db.display()))
        .arg("--out")
        .arg(work.path().join("runs"))
        .stdout(std::process::Stdio::null())
        .status()?;
    if !status.success() {
        return Err("sim fleet failed".into());
    }
    let fleet_s = t.elapsed().as_secs_f64();
    println!(
        "sim fleet: {units} units into SQLite in {fleet_s:.1} s ({:.0} units/s); target 1000 units < 60 s: {}",
        f64::from(units) / fleet_s,
        verdict(f64::from(units) / fleet_s >= 1000.0 / 60.0)
    );

    let sqlite = StoreUrl::Sqlite(work.path().join("big.sqlite"));
    fill(&sqlite, store_units)?;
    let url = format!("sqlite:{}", work.path().join("big.sqlite").display());
    time_queries("SQLite", &url, store_units, repeats)?;

    let Some(admin) = pg else {
        println!("fleet queries on PostgreSQL: SKIPPED (no --pg URL and no TAUCAL_TEST_POSTGRES)");
        return Ok(());
    };
    let name = format!("taucal_fleet_bench_{}", std::process::id());
    let mut c = postgres::Client::connect(&admin, postgres::NoTls)?;
    c.batch_execute(&format!("DROP DATABASE IF EXISTS {name}"))?;
    c.batch_execute(&format!("CREATE DATABASE {name}"))?;
    let base = admin.rsplit_once('/').map_or(admin.as_str(), |(b, _)| b);
    let pg_url = format!("{base}/{name}");
    let result = fill(&StoreUrl::Postgres(pg_url.clone()), store_units)
        .and_then(|()| time_queries("PostgreSQL", &pg_url, store_units, repeats));
    c.batch_execute(&format!("DROP DATABASE IF EXISTS {name} WITH (FORCE)"))?;
    result
}

/// A store of `units` units, one accepted run each, cells K = 2400 + 250·g plus a spread that
/// depends on the unit, on five stations.
fn fill(url: &StoreUrl, units: usize) -> Result<(), Error> {
    let mut store = results::open(url)?.ok_or("a store")?;
    let records: Vec<RunRecord> = (0..units).map(record).collect();
    for batch in records.chunks(1000) {
        store.put_runs(batch)?;
    }
    Ok(())
}

fn record(i: usize) -> RunRecord {
    let spread = ((i * 7919) % 1000) as f64 / 10.0 - 50.0;
    RunRecord {
        run: RunRow {
            run_id: format!("00000000-0000-4000-8000-{i:012}"),
            unit_serial: format!("BENCH-{i:06}"),
            station: format!("st-{}", i % 5),
            recipe_name: "factory-golden".into(),
            recipe_sha256: "00".into(),
            bench_sha256: "00".into(),
            status: "completed".into(),
            accepted: true,
            simulated: true,
            seed: Some(i as i64),
            started_utc: "2026-12-03T00:00:00Z".into(),
            finished_utc: Some("2026-12-03T00:00:01Z".into()),
            bench_time_s: 1.0,
            wall_time_s: 0.1,
            taucal_version: "0.1.0".into(),
            dir: format!("/runs/{i}"),
            bench_name: "bench".into(),
        },
        model: "Tamsel-3".into(),
        cells: (0..3)
            .map(|g| CellRow {
                center_mhz: 5180,
                bw_mhz: 80,
                gain_index: g,
                delay_ps: 2400.0 + 250.0 * g as f64 + spread,
                ci95_ps: 45.0,
                n_used: 300,
                n_rejected: 2,
                source: "measured".into(),
            })
            .collect(),
        verify: Vec::new(),
        acceptance: Vec::new(),
    }
}

/// Best wall time of `fleet stats` and `fleet stations` through the binary.
fn time_queries(label: &str, url: &str, units: usize, repeats: usize) -> Result<(), Error> {
    for sub in ["stats", "stations"] {
        let mut best = f64::INFINITY;
        for _ in 0..repeats {
            let t = Instant::now();
            let out = Command::new(env!("CARGO_BIN_EXE_taucal"))
                .args(["fleet", sub, "--format", "csv", "--store", url])
                .output()?;
            best = best.min(t.elapsed().as_secs_f64());
            if !out.status.success() {
                return Err(format!(
                    "fleet {sub} failed: {}",
                    String::from_utf8_lossy(&out.stderr)
                )
                .into());
            }
        }
        println!(
            "fleet {sub} on {label}, {units} units: {best:.2} s; target < 2 s at 100 000 units: {}",
            verdict(best < 2.0)
        );
    }
    Ok(())
}

fn verdict(ok: bool) -> &'static str {
    if ok {
        "met"
    } else {
        "NOT met"
    }
}
