//! The results store through the real binary: runs recorded at start and end, the same row
//! after a resume, a store that is down costing the run nothing, idempotent import and sync,
//! what firmware provisioning gets, bad stores refused, and concurrent writers — on SQLite
//! always and on a real PostgreSQL server where `TAUCAL_TEST_POSTGRES` names one (CI sets it).

use crate::support::{repo, Taucal};
use crate::unattended::{interrupt, RECIPE};
use nix::sys::signal::Signal;
use std::path::Path;
use std::time::Duration;
use taucal::store::{self as results, RunRecord, StoreUrl};

/// The demo recipe (it verifies its table) on the built-in bench, in `t`'s directory.
fn demo_run(t: Taucal, out: &str, extra: &[&str]) -> crate::support::Outcome {
    let recipe = repo("recipes/rx-gain-sweep.toml");
    let mut args = vec!["run", recipe.as_str(), "--out", out, "-q"];
    args.extend(extra);
    t.args(args).run()
}

fn manifest(dir: &Path) -> toml::Table {
    toml::from_str(&std::fs::read_to_string(dir.join("manifest.toml")).expect("manifest"))
        .expect("toml")
}

/// `(run_id, status)` of every run in the SQLite store at `path`.
fn sqlite_runs(path: &Path) -> Vec<(String, String, String)> {
    let c = rusqlite::Connection::open(path).expect("open");
    let mut s = c
        .prepare("SELECT run_id, status, unit_serial FROM runs ORDER BY started_utc")
        .expect("prepare");
    s.query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
        .expect("query")
        .map(|r| r.expect("row"))
        .collect()
}

#[test]
fn a_run_is_in_the_default_store_beside_its_directory_with_its_table_and_verification() {
    let out = demo_run(Taucal::new(), "runs/a", &["--unit", "SN-0412"]);
    out.expect_code(0);
    let m = manifest(&out.path("runs/a"));
    let run_id = m["run_id"].as_str().expect("run_id").to_string();
    assert_eq!(run_id.len(), 36, "a UUID: {run_id}");
    assert_eq!(m["unit_serial"].as_str(), Some("SN-0412"));
    assert_eq!(m["store_pending"].as_bool(), Some(false));
    let db = out.path("runs/taucal.sqlite");
    assert_eq!(
        sqlite_runs(&db),
        [(run_id.clone(), "completed".into(), "SN-0412".into())]
    );
    // The stored run is the run directory's, cell for cell.
    let mut store = results::open(&StoreUrl::Sqlite(db)).unwrap().unwrap();
    let stored = store.get_run(&run_id).unwrap().expect("stored");
    let from_files = RunRecord::from_dir(&out.path("runs/a")).unwrap();
    assert_eq!(stored, from_files);
    assert_eq!(stored.cells.len(), 3, "three gain states");
    assert!(!stored.verify.is_empty());
}

#[test]
fn a_killed_run_is_running_in_the_store_and_its_resume_completes_the_same_row() {
    let prep = Taucal::new()
        .file("r.toml", RECIPE)
        .args(["--version"])
        .run();
    prep.expect_code(0);
    let dir = prep.dir;
    // `cut` in the working directory: the default store is ./taucal.sqlite.
    let code = interrupt(
        dir.path(),
        "cut",
        Signal::SIGKILL,
        Duration::from_millis(900),
    );
    assert_eq!(code, -1, "killed");
    let db = dir.path().join("taucal.sqlite");
    let before = sqlite_runs(&db);
    assert_eq!(before.len(), 1, "{before:?}");
    assert_eq!(
        before[0].1, "running",
        "the row appears when the run starts"
    );
    assert_eq!(
        before[0].2, "SIM-4",
        "a simulated DUT without a serial is SIM-<seed>"
    );
    let resumed = Taucal::in_dir(dir).args(["resume", "cut"]).run();
    resumed.expect_code(0);
    let after = sqlite_runs(&resumed.path("taucal.sqlite"));
    assert_eq!(after.len(), 1, "one run, not two: {after:?}");
    assert_eq!(
        (after[0].0.as_str(), after[0].1.as_str()),
        (before[0].0.as_str(), "completed")
    );
}

#[test]
fn a_store_that_is_down_costs_the_run_nothing_and_import_catches_up() {
    // Nothing listens on port 1: the server is "down" for the whole run.
    let out = demo_run(
        Taucal::new(),
        "runs/a",
        &["--store", "postgres://postgres@127.0.0.1:1/test"],
    );
    out.expect_code(0);
    assert!(
        out.stderr.contains("cannot record this run") && out.stderr.contains("store import"),
        "the run says so plainly:\n{}",
        out.stderr
    );
    assert_eq!(
        manifest(&out.path("runs/a"))["store_pending"].as_bool(),
        Some(true)
    );
    assert!(out.read("runs/a/caltable.csv").lines().count() == 4);
    let db = out.path("line.sqlite");
    let url = format!("sqlite:{}", db.display());
    let out = Taucal::in_dir(out.dir)
        .args(["store", "import", "runs/a", "--store", &url])
        .run();
    out.expect_code(0);
    assert_eq!(sqlite_runs(&db).len(), 1);
    assert_eq!(
        manifest(&out.path("runs/a"))["store_pending"].as_bool(),
        Some(false),
        "caught up"
    );
}

#[test]
fn import_twice_is_one_run_and_the_unit_table_is_the_runs_export() {
    let out = demo_run(
        Taucal::new(),
        "runs/a",
        &["--store", "none", "--unit", "SN-7"],
    );
    out.expect_code(0);
    let out = demo_run(
        Taucal::in_dir(out.dir),
        "runs/b",
        &["--store", "none", "--unit", "SN-8", "--seed", "5"],
    );
    out.expect_code(0);
    assert!(!out.path("runs/taucal.sqlite").exists(), "--store none");
    let mut dir = out.dir;
    for _ in 0..2 {
        let out = Taucal::in_dir(dir)
            .args(["store", "import", "runs/a", "runs/b"])
            .run();
        out.expect_code(0);
        assert!(out.stdout.contains("imported 2 runs"), "{}", out.stdout);
        dir = out.dir;
    }
    assert_eq!(sqlite_runs(&dir.path().join("runs/taucal.sqlite")).len(), 2);
    let out = Taucal::in_dir(dir)
        .args(["store", "units", "--format", "csv"])
        .run();
    out.expect_code(0);
    let lines: Vec<&str> = out.stdout.lines().collect();
    assert_eq!(
        lines[0],
        "serial,model,runs,last_run_utc,last_status,accepted"
    );
    assert_eq!(lines.len(), 3, "{}", out.stdout);
    assert!(
        lines[1].starts_with("SN-7,") && lines[2].starts_with("SN-8,"),
        "by serial"
    );
    for line in &lines[1..] {
        let f: Vec<&str> = line.split(',').collect();
        assert_eq!((f[2], f[4], f[5]), ("1", "completed", "yes"), "{line}");
    }
    // What provisioning gets is what `taucal export` makes of the run, in every format.
    let mut dir = out.dir;
    for format in ["csv", "json", "toml", "c"] {
        let stored = Taucal::in_dir(dir)
            .args(["store", "table", "SN-7", "--format", format])
            .run();
        stored.expect_code(0);
        let exported = Taucal::in_dir(stored.dir)
            .args(["export", "runs/a", "--format", format])
            .run();
        exported.expect_code(0);
        assert_eq!(stored.stdout, exported.stdout, "{format}");
        dir = exported.dir;
    }
    let out = Taucal::in_dir(dir).args(["store", "table", "SN-404"]).run();
    out.expect_code(2);
    assert!(
        out.stderr.contains("no accepted run of unit `SN-404`"),
        "{}",
        out.stderr
    );
}

#[test]
fn sync_copies_what_the_destination_lacks_once() {
    let mut dir = Taucal::new()
        .file("r.toml", RECIPE)
        .args(["--version"])
        .run()
        .dir;
    for seed in ["1", "2", "3"] {
        let out = Taucal::in_dir(dir)
            .args([
                "run",
                "r.toml",
                "--seed",
                seed,
                "--out",
                &format!("runs/{seed}"),
                "-q",
            ])
            .run();
        out.expect_code(0);
        dir = out.dir;
    }
    let to = format!("sqlite:{}", dir.path().join("central.sqlite").display());
    let first = Taucal::in_dir(dir)
        .args(["store", "sync", "--to", &to])
        .run();
    first.expect_code(0);
    assert!(
        first.stdout.contains("3 runs copied, 0 already there"),
        "{}",
        first.stdout
    );
    let again = Taucal::in_dir(first.dir)
        .args(["store", "sync", "--to", &to])
        .run();
    again.expect_code(0);
    assert!(
        again.stdout.contains("0 runs copied, 3 already there"),
        "{}",
        again.stdout
    );
    let open = |p: &Path| {
        results::open(&StoreUrl::Sqlite(p.to_path_buf()))
            .unwrap()
            .unwrap()
    };
    let (mut a, mut b) = (
        open(&again.path("runs/taucal.sqlite")),
        open(&again.path("central.sqlite")),
    );
    let ids = a.run_versions().unwrap();
    assert_eq!(ids, b.run_versions().unwrap());
    for v in ids {
        assert_eq!(a.get_run(&v.run_id).unwrap(), b.get_run(&v.run_id).unwrap());
    }
}

#[test]
fn bad_stores_are_refused_with_exit_2_and_nothing_half_written() {
    // A malformed URL: refused before a run directory exists.
    let out = demo_run(Taucal::new(), "runs/a", &["--store", "mysql://x@y/z"]);
    out.expect_code(2);
    assert!(
        out.stderr.contains("--store") && out.stderr.contains("sqlite:PATH"),
        "{}",
        out.stderr
    );
    assert!(!out.has_dir("runs/a"));

    // The bench's own [store] url, at its file, line and key.
    let bench = std::fs::read_to_string(repo("recipes/benches/sim-demo.toml"))
        .expect("bench")
        .replacen(
            "[attenuator]",
            "[store]\nurl = \"sqlite\"\n\n[attenuator]",
            1,
        );
    let out = Taucal::in_dir(out.dir)
        .file("b.toml", &bench)
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--bench",
            "b.toml",
            "--out",
            "runs/b",
        ])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr.contains("b.toml") && out.stderr.contains("`store.url`"),
        "{}",
        out.stderr
    );

    // Not a run directory: nothing is imported, and no store file is made.
    let out = Taucal::in_dir(out.dir)
        .file("notarun/readme.txt", "hello")
        .args(["store", "import", "notarun", "--store", "sqlite:s.sqlite"])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("not a run directory"), "{}", out.stderr);
    assert!(!out.path("s.sqlite").exists());

    // A store a newer taucal made.
    let db = out.path("newer.sqlite");
    results::open(&StoreUrl::Sqlite(db.clone())).unwrap();
    rusqlite::Connection::open(&db)
        .unwrap()
        .execute("UPDATE taucal_schema SET version = 99", [])
        .unwrap();
    let out = Taucal::in_dir(out.dir)
        .args([
            "store",
            "units",
            "--store",
            &format!("sqlite:{}", db.display()),
        ])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("schema version 99"), "{}", out.stderr);

    // A reading command does not make an empty store where a typo points.
    let out = Taucal::in_dir(out.dir)
        .args(["store", "units", "--store", "sqlite:typo.sqlite"])
        .run();
    out.expect_code(2);
    assert!(!out.path("typo.sqlite").exists());
}

/// Eight runs at once into one store: every one recorded, none twice.
fn eight_at_once(dir: &Path, store: &str) {
    let children: Vec<_> = (1..=8)
        .map(|seed| {
            std::process::Command::new(env!("CARGO_BIN_EXE_taucal"))
                .args(["run", "r.toml", "--seed", &seed.to_string(), "-q"])
                .args(["--out", &format!("runs/{seed}"), "--store", store])
                .args(["--unit", &format!("SN-{seed:04}")])
                .current_dir(dir)
                .stdout(std::process::Stdio::null())
                .stderr(std::process::Stdio::piped())
                .spawn()
                .expect("start taucal")
        })
        .collect();
    for child in children {
        let out = child.wait_with_output().expect("wait");
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(0), "{stderr}");
        assert!(!stderr.contains("cannot record"), "{stderr}");
    }
}

#[test]
fn eight_concurrent_runs_into_one_sqlite_file_are_eight_runs() {
    let out = Taucal::new()
        .file("r.toml", RECIPE)
        .args(["--version"])
        .run();
    let db = out.path("shared.sqlite");
    eight_at_once(out.dir.path(), &format!("sqlite:{}", db.display()));
    let runs = sqlite_runs(&db);
    assert_eq!(runs.len(), 8, "{runs:?}");
    assert!(runs.iter().all(|r| r.1 == "completed"));
}

/// A database of this test's own on the server `TAUCAL_TEST_POSTGRES` names, dropped at the
/// end; `None` (the test says it was skipped) where the variable is unset — except under CI,
/// which sets it.
pub(crate) struct PgDatabase {
    admin: String,
    name: String,
    pub(crate) url: String,
}

impl PgDatabase {
    pub(crate) fn new(test: &str) -> Option<PgDatabase> {
        use std::io::Write;
        let Ok(admin) = std::env::var("TAUCAL_TEST_POSTGRES") else {
            assert!(
                std::env::var_os("CI").is_none(),
                "{test}: TAUCAL_TEST_POSTGRES is unset; .ci/run sets it"
            );
            let _ = writeln!(
                std::io::stderr(),
                "SKIPPED {test}: TAUCAL_TEST_POSTGRES names no PostgreSQL server"
            );
            return None;
        };
        let name = format!("taucal_{}_{}", test, std::process::id());
        let mut c = postgres::Client::connect(&admin, postgres::NoTls).expect("admin connection");
        c.batch_execute(&format!("DROP DATABASE IF EXISTS {name}"))
            .expect("drop");
        c.batch_execute(&format!("CREATE DATABASE {name}"))
            .expect("create");
        let base = admin.rsplit_once('/').map_or(admin.as_str(), |(b, _)| b);
        let url = format!("{base}/{name}");
        Some(PgDatabase { admin, name, url })
    }

    /// Copies the runs of the store `from` in `dir` into this database with `taucal store
    /// sync`, which must succeed; `dir` back.
    pub(crate) fn synced_from(&self, dir: tempfile::TempDir, from: &str) -> tempfile::TempDir {
        let synced = Taucal::in_dir(dir)
            .args(["store", "sync", "--store", from, "--to", &self.url])
            .run();
        synced.expect_code(0);
        synced.dir
    }
}

impl Drop for PgDatabase {
    fn drop(&mut self) {
        if let Ok(mut c) = postgres::Client::connect(&self.admin, postgres::NoTls) {
            let _ = c.batch_execute(&format!(
                "DROP DATABASE IF EXISTS {} WITH (FORCE)",
                self.name
            ));
        }
    }
}

#[test]
fn postgres_eight_stations_at_once_sync_and_provisioning() {
    let Some(db) = PgDatabase::new("eight") else {
        return;
    };
    let out = Taucal::new()
        .file("r.toml", RECIPE)
        .args(["--version"])
        .run();
    eight_at_once(out.dir.path(), &db.url);
    let mut pg = results::open(&StoreUrl::parse(&db.url).unwrap())
        .unwrap()
        .unwrap();
    let runs = pg.run_versions().unwrap();
    assert_eq!(runs.len(), 8, "{runs:?}");
    assert!(runs.iter().all(|r| r.status == "completed"));
    // Each stored run is its directory's.
    for seed in 1..=8 {
        let rec = RunRecord::from_dir(&out.path(&format!("runs/{seed}"))).unwrap();
        assert_eq!(pg.get_run(&rec.run.run_id).unwrap().as_ref(), Some(&rec));
    }
    // A station's SQLite store forwarded to the server: its runs arrive once.
    let mut dir = out.dir;
    for seed in ["11", "12"] {
        let o = Taucal::in_dir(dir)
            .args([
                "run",
                "r.toml",
                "--seed",
                seed,
                "--out",
                &format!("runs/{seed}"),
                "-q",
            ])
            .args(["--store", "sqlite:station.sqlite"])
            .run();
        o.expect_code(0);
        dir = o.dir;
    }
    for want in [
        "2 runs copied, 0 already there",
        "0 runs copied, 2 already there",
    ] {
        let o = Taucal::in_dir(dir)
            .args([
                "store",
                "sync",
                "--store",
                "sqlite:station.sqlite",
                "--to",
                &db.url,
            ])
            .run();
        o.expect_code(0);
        assert!(o.stdout.contains(want), "{}", o.stdout);
        dir = o.dir;
    }
    assert_eq!(pg.run_versions().unwrap().len(), 10);
    let o = Taucal::in_dir(dir)
        .args([
            "store", "table", "SN-0003", "--store", &db.url, "--format", "json",
        ])
        .run();
    o.expect_code(0);
    let exported = Taucal::in_dir(o.dir)
        .args(["export", "runs/3", "--format", "json"])
        .run();
    exported.expect_code(0);
    assert_eq!(o.stdout, exported.stdout);
}

#[test]
fn postgres_wrong_credentials_and_a_missing_database_are_named() {
    let Some(db) = PgDatabase::new("creds") else {
        return;
    };
    let base = db.url.rsplit_once('/').map_or("", |(b, _)| b);
    let host = base.rsplit_once('@').map_or(base, |(_, h)| h);
    for (url, says) in [
        (
            format!("postgres://nosuchuser@{host}/{}", db.name),
            "nosuchuser",
        ),
        (
            format!("{base}/no_such_database_here"),
            "no_such_database_here",
        ),
    ] {
        let out = Taucal::new()
            .args(["store", "units", "--store", &url])
            .run();
        out.expect_code(2);
        assert!(
            out.stderr.contains("cannot open the store") && out.stderr.contains(says),
            "{}",
            out.stderr
        );
    }
}

#[test]
fn the_station_is_the_flag_else_the_bench_key_else_the_host() {
    let bench = std::fs::read_to_string(repo("recipes/benches/sim-demo.toml"))
        .expect("bench")
        .replacen("[bench]\n", "[bench]\nstation = \"line4-b\"\n", 1);
    let recipe = repo("recipes/rx-gain-sweep.toml");
    let mut dir = Taucal::new()
        .file("b.toml", &bench)
        .args(["--version"])
        .run()
        .dir;
    let host = nix::unistd::gethostname()
        .expect("host name")
        .into_string()
        .expect("utf-8");
    for (extra, want) in [
        (vec!["--bench", "b.toml", "--station", "line4-a"], "line4-a"),
        (vec!["--bench", "b.toml"], "line4-b"),
        (vec![], host.as_str()),
    ] {
        let mut args = vec![
            "run",
            recipe.as_str(),
            "--out",
            "r",
            "-q",
            "--store",
            "none",
        ];
        args.extend(extra);
        let out = Taucal::in_dir(dir).args(args).run();
        out.expect_code(0);
        assert_eq!(manifest(&out.path("r"))["station"].as_str(), Some(want));
        std::fs::remove_dir_all(out.path("r")).expect("rm");
        dir = out.dir;
    }
}
