//! `cargo bench --bench store`: the results store's two speed claims (README, Performance),
//! each beside a baseline measured in the same run.
//!
//! 1. Import: run directories of ~20 cells into a fresh SQLite store (read, then one
//!    transaction per 100 runs, as `taucal store import` does), against reading the same
//!    directories without writing them anywhere (the floor any import stands on).
//! 2. Sync: every run of that SQLite store into a fresh PostgreSQL database over loopback (as
//!    `taucal store sync` does), against reading the same runs out of the SQLite store alone.
//!    Needs a server: `--pg URL` or `TAUCAL_TEST_POSTGRES` (an admin URL; the bench makes and
//!    drops a database of its own); skipped, and said so, without one.
//!
//! `--smoke` (CI) runs 100 runs once; the default is 2000 runs, best of 3.

use std::path::{Path, PathBuf};
use std::time::Instant;
use taucal::store::{self as results, RunRecord, StoreUrl};

type Error = Box<dyn std::error::Error>;

/// Cells per synthetic run: 5 channels × 4 gain states.
const CENTERS_MHZ: [u32; 5] = [5180, 5220, 5500, 5745, 5825];
const GAINS: u32 = 4;

fn main() -> Result<(), Error> {
    let args: Vec<String> = std::env::args().collect();
    let smoke = args.iter().any(|a| a == "--smoke");
    let pg = args
        .iter()
        .position(|a| a == "--pg")
        .and_then(|i| args.get(i + 1).cloned())
        .or_else(|| std::env::var("TAUCAL_TEST_POSTGRES").ok());
    let (runs, repeats) = if smoke { (100, 1) } else { (2000, 3) };
    let work = tempfile::tempdir()?;
    let dirs = make_runs(work.path(), runs)?;
    println!(
        "store bench: {runs} run directories of {} cells each",
        CENTERS_MHZ.len() as u32 * GAINS
    );

    let mut read_s = Vec::new();
    let mut import_s = Vec::new();
    for round in 0..repeats {
        let t = Instant::now();
        let records = dirs
            .iter()
            .map(|d| RunRecord::from_dir(d))
            .collect::<Result<Vec<_>, _>>()?;
        read_s.push(t.elapsed().as_secs_f64());
        assert_eq!(records.len(), runs);

        let db = work.path().join(format!("import-{round}.sqlite"));
        let t = Instant::now();
        let mut store = results::open(&StoreUrl::Sqlite(db))?.expect("a store");
        for batch in dirs.chunks(results::sync::BATCH) {
            let recs = batch
                .iter()
                .map(|d| RunRecord::from_dir(d))
                .collect::<Result<Vec<_>, _>>()?;
            store.put_runs(&recs)?;
        }
        import_s.push(t.elapsed().as_secs_f64());
        assert_eq!(store.run_versions()?.len(), runs, "every run imported once");
    }
    let best = |v: &[f64]| v.iter().cloned().fold(f64::INFINITY, f64::min);
    let (read, import) = (best(&read_s), best(&import_s));
    println!(
        "import into SQLite: {:.0} runs/s ({:.3} s); baseline, reading the directories alone: {:.0} runs/s; ratio {:.2}; target ≥ 500 runs/s: {}",
        runs as f64 / import,
        import,
        runs as f64 / read,
        import / read,
        verdict(runs as f64 / import >= 500.0)
    );

    let Some(admin) = pg else {
        println!("sync to PostgreSQL: SKIPPED (no --pg URL and no TAUCAL_TEST_POSTGRES)");
        return Ok(());
    };
    let source_path = work.path().join("import-0.sqlite");
    let mut sync_s = Vec::new();
    let mut source_s = Vec::new();
    for round in 0..repeats {
        let mut source = results::open(&StoreUrl::Sqlite(source_path.clone()))?.expect("a store");
        let t = Instant::now();
        for v in source.run_versions()? {
            source.get_run(&v.run_id)?.expect("listed run");
        }
        source_s.push(t.elapsed().as_secs_f64());

        let db = Database::new(&admin, round)?;
        let t = Instant::now();
        let mut dest = results::open(&StoreUrl::parse(&db.url)?)?.expect("a store");
        let done = results::sync::sync(source.as_mut(), dest.as_mut(), |_, _| {})?;
        sync_s.push(t.elapsed().as_secs_f64());
        assert_eq!(done.copied, runs);
    }
    let (sync, source) = (best(&sync_s), best(&source_s));
    println!(
        "sync SQLite → PostgreSQL (loopback): {:.0} runs/s ({:.3} s); baseline, reading the runs from SQLite alone: {:.0} runs/s; ratio {:.2}; target ≥ 200 runs/s: {}",
        runs as f64 / sync,
        sync,
        runs as f64 / source,
        sync / source,
        verdict(runs as f64 / sync >= 200.0)
    );
    Ok(())
}

fn verdict(met: bool) -> &'static str {
    if met {
        "met"
    } else {
        "NOT MET"
    }
}

/// `n` run directories made from one real run: the demo recipe on the built-in bench, its
/// table widened to 20 cells, each copy with a run id and unit of its own.
fn make_runs(work: &Path, n: usize) -> Result<Vec<PathBuf>, Error> {
    let bin = env!("CARGO_BIN_EXE_taucal");
    let template = work.join("template");
    let recipe = Path::new(env!("CARGO_MANIFEST_DIR")).join("recipes/rx-gain-sweep.toml");
    let status = std::process::Command::new(bin)
        .arg("run")
        .arg(&recipe)
        .args([
            "--out",
            template.to_str().ok_or("path")?,
            "-q",
            "--store",
            "none",
        ])
        .stdout(std::process::Stdio::null())
        .status()?;
    if !status.success() {
        return Err("the template run failed".into());
    }
    let manifest = std::fs::read_to_string(template.join("manifest.toml"))?;
    let verify = std::fs::read_to_string(template.join("verify.csv"))?;
    let mut table =
        String::from("center_mhz,bw_mhz,gain_index,delay_ps,ci95_ps,n_used,n_rejected,source\n");
    for c in CENTERS_MHZ {
        for g in 0..GAINS {
            table.push_str(&format!(
                "{c},80,{g},{:.3},{:.3},320,3,measured\n",
                2400.0 + 250.0 * f64::from(g) + f64::from(c % 97),
                25.0 + f64::from(g)
            ));
        }
    }
    let old_id = manifest
        .lines()
        .find_map(|l| l.strip_prefix("run_id = "))
        .ok_or("template manifest has no run_id")?
        .to_string();
    let mut dirs = Vec::with_capacity(n);
    for i in 0..n {
        let dir = work.join(format!("run-{i:05}"));
        std::fs::create_dir_all(&dir)?;
        let m = manifest
            .replace(&old_id, &format!("\"00000000-0000-4000-8000-{i:012}\""))
            .replacen(
                "unit_serial = \"SIM-1\"",
                &format!("unit_serial = \"SN-{i:06}\""),
                1,
            );
        std::fs::write(dir.join("manifest.toml"), m)?;
        std::fs::write(dir.join("caltable.csv"), &table)?;
        std::fs::write(dir.join("verify.csv"), &verify)?;
        dirs.push(dir);
    }
    Ok(dirs)
}

/// A database of the bench's own on the server, dropped at the end.
struct Database {
    admin: String,
    name: String,
    url: String,
}

impl Database {
    fn new(admin: &str, round: usize) -> Result<Database, Error> {
        let name = format!("taucal_bench_{}_{round}", std::process::id());
        let mut c = postgres::Client::connect(admin, postgres::NoTls)?;
        c.batch_execute(&format!("DROP DATABASE IF EXISTS {name}"))?;
        c.batch_execute(&format!("CREATE DATABASE {name}"))?;
        let base = admin.rsplit_once('/').map_or(admin, |(b, _)| b);
        Ok(Database {
            admin: admin.to_string(),
            url: format!("{base}/{name}"),
            name,
        })
    }
}

impl Drop for Database {
    fn drop(&mut self) {
        if let Ok(mut c) = postgres::Client::connect(&self.admin, postgres::NoTls) {
            let _ = c.batch_execute(&format!(
                "DROP DATABASE IF EXISTS {} WITH (FORCE)",
                self.name
            ));
        }
    }
}
