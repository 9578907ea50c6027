//! Unattended runs: a run killed outright resumes to exactly the data of an uninterrupted one;
//! SIGINT stops it cleanly (exit 3, status `stopped`, instruments in their safe state); resume
//! refuses what it cannot continue honestly.

use crate::support::{assert_recorded_once, assert_tables_agree, Taucal};
use nix::sys::signal::{kill, Signal};
use nix::unistd::Pid;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// A recipe of ~1.6 s of bench time: a gain map, then mid-plateau points, so the later stage
/// depends on what the earlier one found.
pub(crate) const RECIPE: &str = r#"
[recipe]
name = "unattended"

[[stage]]
name = "map"
kind = "gainmap"
center_mhz = 5180
bw_mhz = 80
atten_db = { from = 20.0, to = 70.0, step = 5.0 }
frames = 8
settle_ms = 30.0

[[stage]]
name = "cal"
kind = "sweep"
center_mhz = 5180
bw_mhz = 80
atten_db = { mid_plateau = "map", per_state = 2, margin_db = 2.0 }
bursts = 3
frames = 16
settle_ms = 30.0
"#;

/// Starts a `--realtime` run in `dir`, lets it record for `after`, then sends `signal`.
pub(crate) fn interrupt(dir: &std::path::Path, out: &str, signal: Signal, after: Duration) -> i32 {
    let mut child = Command::new(env!("CARGO_BIN_EXE_taucal"))
        .args(["run", "r.toml", "--seed", "4", "--realtime", "--out", out])
        .current_dir(dir)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("start taucal");
    std::thread::sleep(after);
    kill(Pid::from_raw(child.id() as i32), signal).expect("signal");
    let start = Instant::now();
    loop {
        if let Some(status) = child.try_wait().expect("wait") {
            return status.code().unwrap_or(-1);
        }
        assert!(
            start.elapsed() < Duration::from_secs(20),
            "taucal did not stop"
        );
        std::thread::sleep(Duration::from_millis(20));
    }
}

fn status(dir: &std::path::Path, out: &str) -> String {
    let text = std::fs::read_to_string(dir.join(out).join("manifest.toml")).expect("manifest");
    let m: toml::Table = toml::from_str(&text).expect("toml");
    m["status"].as_str().unwrap_or_default().to_string()
}

#[test]
fn a_killed_run_resumes_to_exactly_the_uninterrupted_data() {
    let full = Taucal::new()
        .file("r.toml", RECIPE)
        .args(["run", "r.toml", "--seed", "4", "--out", "full"])
        .run();
    full.expect_code(0);
    let dir = full.dir;
    let code = interrupt(
        dir.path(),
        "cut",
        Signal::SIGKILL,
        Duration::from_millis(900),
    );
    assert_eq!(code, -1, "killed by a signal");
    assert_eq!(
        status(dir.path(), "cut"),
        "running",
        "a killed run cannot say more"
    );
    let partial = std::fs::read_to_string(dir.path().join("cut/exchanges.csv")).expect("partial");
    let resumed = Taucal::in_dir(dir).args(["resume", "cut"]).run();
    resumed.expect_code(0);
    let (a, b) = (
        resumed.read("full/exchanges.csv"),
        resumed.read("cut/exchanges.csv"),
    );
    assert!(partial.lines().count() > 1 && partial.lines().count() < a.lines().count());
    assert_eq!(a, b, "nothing lost, nothing twice");
    assert_eq!(
        resumed.read("full/caltable.csv"),
        resumed.read("cut/caltable.csv")
    );
    assert_eq!(status(resumed.dir.path(), "cut"), "completed");
}

#[test]
fn sigint_stops_cleanly_and_the_run_resumes() {
    let full = Taucal::new()
        .file("r.toml", RECIPE)
        .args(["run", "r.toml", "--seed", "4", "--out", "full"])
        .run();
    full.expect_code(0);
    let dir = full.dir;
    let code = interrupt(
        dir.path(),
        "int",
        Signal::SIGINT,
        Duration::from_millis(900),
    );
    assert_eq!(code, 3);
    assert_eq!(status(dir.path(), "int"), "stopped");
    let log = std::fs::read_to_string(dir.path().join("int/run.log")).expect("log");
    assert!(
        log.contains("safe state: attenuator at 95 dB, ranging stopped"),
        "{log}"
    );
    let resumed = Taucal::in_dir(dir).args(["resume", "int"]).run();
    resumed.expect_code(0);
    assert_eq!(
        resumed.read("full/exchanges.csv"),
        resumed.read("int/exchanges.csv")
    );
}

#[test]
fn resume_refuses_a_completed_run_and_a_changed_recipe() {
    let out = Taucal::new()
        .file("r.toml", RECIPE)
        .args(["run", "r.toml", "--out", "done"])
        .run();
    out.expect_code(0);
    let again = Taucal::in_dir(out.dir).args(["resume", "done"]).run();
    again.expect_code(2);
    assert!(
        again.stderr.contains("already completed"),
        "{}",
        again.stderr
    );

    let dir = again.dir;
    let code = interrupt(
        dir.path(),
        "cut",
        Signal::SIGKILL,
        Duration::from_millis(600),
    );
    assert_eq!(code, -1);
    std::fs::write(
        dir.path().join("r.toml"),
        RECIPE.replace("bursts = 3", "bursts = 4"),
    )
    .expect("edit");
    let changed = Taucal::in_dir(dir).args(["resume", "cut"]).run();
    changed.expect_code(2);
    assert!(
        changed
            .stderr
            .contains("the recipe changed since the run began"),
        "{}",
        changed.stderr
    );
}

/// The demo bench with every simulated fault switched on.
pub(crate) fn faulty_bench() -> String {
    let demo = std::fs::read_to_string(crate::support::repo("recipes/benches/sim-demo.toml"))
        .expect("bench");
    format!(
        "{demo}\n[sim.faults]\ndrop_connection_every = 97\nreply_timeout_rate = 0.02\ngarbled_reply_rate = 0.02\ndut_restart_every = 1500\nfailed_exchange_rate = 0.02\n"
    )
}

#[test]
fn with_every_fault_on_the_demo_completes_without_duplicates_and_agrees() {
    let demo = crate::support::repo("recipes/rx-gain-sweep.toml");
    let clean = Taucal::new()
        .args(["run", demo.as_str(), "--out", "clean"])
        .run();
    clean.expect_code(0);
    let faulty = Taucal::in_dir(clean.dir)
        .file("faulty.toml", &faulty_bench())
        .args([
            "run",
            demo.as_str(),
            "--bench",
            "faulty.toml",
            "--out",
            "faulty",
        ])
        .run();
    faulty.expect_code(0);
    let rows = faulty.read("faulty/exchanges.csv");
    assert_recorded_once(&rows);
    assert!(
        rows.lines().any(|l| l.split(',').nth(15) == Some("fail")),
        "failed exchanges are recorded"
    );
    let m: toml::Table = toml::from_str(&faulty.read("faulty/manifest.toml")).expect("manifest");
    assert!(m["faults"]["dut"]["restarts"].as_integer().unwrap_or(0) >= 1);
    assert!(
        m["faults"]["attenuator"]["retries"]
            .as_integer()
            .unwrap_or(0)
            >= 1
    );
    assert_tables_agree(
        &faulty.read("clean/caltable.csv"),
        &faulty.read("faulty/caltable.csv"),
    );
}

#[test]
fn a_point_that_keeps_failing_stops_the_run_or_is_skipped_as_the_recipe_says() {
    let bench = faulty_bench().replace("reply_timeout_rate = 0.02", "reply_timeout_rate = 0.45");
    let recipe = |policy: &str| {
        format!(
            "[recipe]\nname = \"flaky\"\n\n[faults]\nretries = 1\nbackoff_ms = 10.0\non_point_failure = \"{policy}\"\n\n[[stage]]\nname = \"s\"\nkind = \"sweep\"\ncenter_mhz = 5180\nbw_mhz = 80\natten_db = {{ from = 20.0, to = 80.0, step = 2.0 }}\nbursts = 2\nframes = 8\n"
        )
    };
    let stop = Taucal::new()
        .file("b.toml", &bench)
        .file("r.toml", &recipe("stop"))
        .args(["run", "r.toml", "--bench", "b.toml", "--out", "stop"])
        .run();
    stop.expect_code(3);
    assert_eq!(status(stop.dir.path(), "stop"), "failed");
    // The run stopped with the attenuator in its safe state.
    assert!(
        stop.stderr.contains("safe state: attenuator at 95 dB"),
        "{}",
        stop.stderr
    );
    let skip = Taucal::in_dir(stop.dir)
        .file("r.toml", &recipe("skip"))
        .args(["run", "r.toml", "--bench", "b.toml", "--out", "skip"])
        .run();
    skip.expect_code(0);
    let m: toml::Table = toml::from_str(&skip.read("skip/manifest.toml")).expect("manifest");
    let skipped = m["skipped_points"].as_array().map_or(0, Vec::len);
    assert!(skipped >= 1, "{m:?}");
    assert_eq!(m["status"].as_str(), Some("completed"));
}

/// Waits until the run directory `dir` has a manifest (its run has claimed it).
fn wait_for_manifest(dir: &std::path::Path) {
    let start = Instant::now();
    while !dir.join("manifest.toml").is_file() {
        assert!(start.elapsed() < Duration::from_secs(30), "no manifest");
        std::thread::sleep(Duration::from_millis(10));
    }
}

#[test]
fn a_run_directory_in_use_is_refused_to_a_second_process() {
    // The issue: a `run` and a `resume` (or two resumes) on one directory both drove the
    // instruments and interleaved the journal. Exit 2, the directory named, nothing touched.
    let slow = RECIPE.replace("settle_ms = 30.0", "settle_ms = 100.0");
    let full = Taucal::new()
        .file("r.toml", &slow)
        .args(["run", "r.toml", "--seed", "4", "--out", "full"])
        .run();
    full.expect_code(0);
    let dir = full.dir;
    let mut first = Command::new(env!("CARGO_BIN_EXE_taucal"))
        .args([
            "run",
            "r.toml",
            "--seed",
            "4",
            "--realtime",
            "--out",
            "busy",
        ])
        .current_dir(dir.path())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("start taucal");
    wait_for_manifest(&dir.path().join("busy"));
    let mut seconds = Vec::new();
    for args in [
        vec!["resume", "busy"],
        vec!["run", "r.toml", "--seed", "4", "--out", "busy"],
    ] {
        let out = Command::new(env!("CARGO_BIN_EXE_taucal"))
            .args(&args)
            .current_dir(dir.path())
            .output()
            .expect("second taucal");
        seconds.push((
            args.join(" "),
            out.status.code(),
            String::from_utf8_lossy(&out.stderr).into_owned(),
        ));
    }
    let code = first.wait().expect("first run").code();
    for (args, code, stderr) in &seconds {
        assert_eq!(*code, Some(2), "{args}: {stderr}");
        assert!(
            stderr.contains("busy is in use by another taucal process"),
            "{args}: {stderr}"
        );
    }
    assert_eq!(code, Some(0));
    let read = |p: &str| std::fs::read_to_string(dir.path().join(p)).expect(p);
    assert_eq!(
        read("full/exchanges.csv"),
        read("busy/exchanges.csv"),
        "the first run went on alone"
    );
    assert_eq!(status(dir.path(), "busy"), "completed");
    // Once the holder has ended, the directory is free again (here: to be refused as complete).
    let again = Taucal::in_dir(dir).args(["resume", "busy"]).run();
    again.expect_code(2);
    assert!(
        again.stderr.contains("already completed"),
        "{}",
        again.stderr
    );
}

#[test]
fn resume_refuses_a_changed_script_file() {
    // The script fails after recording one burst, so the run ends `failed` and is resumable.
    let recipe = "[recipe]\nname = \"scripted\"\n\n[[stage]]\nname = \"s\"\nkind = \"script\"\ncenter_mhz = 5180\nbw_mhz = 80\nfile = \"s.rhai\"\n";
    let script = "set_atten(40.0);\nburst(8);\nthrow \"not yet\";\n";
    let out = Taucal::new()
        .file("r.toml", recipe)
        .file("s.rhai", script)
        .args(["run", "r.toml", "--out", "x"])
        .run();
    out.expect_code(3);
    let m: toml::Table = toml::from_str(&out.read("x/manifest.toml")).expect("manifest");
    assert!(
        m["inputs"]["script.s"]["sha256"].as_str().is_some(),
        "{m:?}"
    );
    let edited = Taucal::in_dir(out.dir)
        .file("s.rhai", &script.replace("throw \"not yet\";", "burst(8);"))
        .args(["resume", "x"])
        .run();
    edited.expect_code(2);
    assert!(
        edited
            .stderr
            .contains("the script file changed since the run began"),
        "{}",
        edited.stderr
    );
    assert!(edited.stderr.contains("s.rhai"), "{}", edited.stderr);
    // Restored, it resumes (and fails again where the script says so).
    let restored = Taucal::in_dir(edited.dir)
        .file("s.rhai", script)
        .args(["resume", "x"])
        .run();
    restored.expect_code(3);
    assert!(restored.stderr.contains("not yet"), "{}", restored.stderr);
}

/// A tmpfs of `size` mounted on a fresh folder, unmounted when dropped.
struct SmallDisk {
    dir: tempfile::TempDir,
}

impl SmallDisk {
    /// `None` where this process may not mount (not root): the caller says so and skips.
    fn mount(size: &str) -> Option<SmallDisk> {
        let dir = tempfile::tempdir().expect("tempdir");
        let ok = Command::new("mount")
            .args(["-t", "tmpfs", "-o", &format!("size={size}"), "tmpfs"])
            .arg(dir.path())
            .stderr(Stdio::null())
            .status()
            .is_ok_and(|s| s.success());
        ok.then_some(SmallDisk { dir })
    }
}

impl Drop for SmallDisk {
    fn drop(&mut self) {
        let _ = Command::new("umount").arg(self.dir.path()).status();
    }
}

#[test]
fn a_full_disk_fails_the_run_in_its_manifest_and_leaves_no_partial_files() {
    // The issue: on a full disk the manifest stayed `running`. A real full disk: a 96 KiB
    // tmpfs, which the demo's records overflow. Mounting needs root (as CI runs).
    let Some(disk) = SmallDisk::mount("96k") else {
        eprintln!("skipped: mounting a tmpfs needs root");
        return;
    };
    let out_dir = disk.dir.path().join("run");
    let out = Taucal::new()
        .args([
            "run",
            &crate::support::repo("recipes/rx-gain-sweep.toml"),
            "--out",
            &out_dir.display().to_string(),
        ])
        .run();
    out.expect_code(3);
    let m: toml::Table =
        toml::from_str(&std::fs::read_to_string(out_dir.join("manifest.toml")).expect("manifest"))
            .expect("a whole manifest");
    assert_eq!(m["status"].as_str(), Some("failed"), "{m:?}");
    let error = m["error"].as_str().unwrap_or_default();
    assert!(error.contains("No space left on device"), "{error}");
    let left: Vec<String> = std::fs::read_dir(&out_dir)
        .expect("run dir")
        .filter_map(|e| e.ok().map(|e| e.file_name().to_string_lossy().into_owned()))
        .filter(|n| n.ends_with(".tmp"))
        .collect();
    assert!(left.is_empty(), "partial files left: {left:?}");
    assert!(
        out.stderr.contains("No space left on device"),
        "{}",
        out.stderr
    );
}

#[test]
fn a_report_that_cannot_be_written_leaves_the_old_one_and_no_partial_file() {
    // A completed run on a small tmpfs, then the disk filled: `taucal report` must say it could
    // not write, keep the report that was there and leave no temporary copy (root, as CI runs).
    let Some(disk) = SmallDisk::mount("4m") else {
        eprintln!("skipped: mounting a tmpfs needs root");
        return;
    };
    let out_dir = disk.dir.path().join("run");
    let run_dir = out_dir.display().to_string();
    let out = Taucal::new()
        .args([
            "run",
            &crate::support::repo("recipes/rx-gain-sweep.toml"),
            "--out",
            &run_dir,
        ])
        .run();
    out.expect_code(0);
    let report = std::fs::read(out_dir.join("report.html")).expect("report");
    {
        use std::io::Write;
        let mut ballast = std::fs::File::create(disk.dir.path().join("ballast")).expect("ballast");
        let chunk = vec![0u8; 64 << 10];
        while ballast.write_all(&chunk).is_ok() {}
    }
    let again = Taucal::in_dir(out.dir).args(["report", &run_dir]).run();
    again.expect_code(2);
    assert!(
        again.stderr.contains("cannot make the report")
            && again.stderr.contains("No space left on device"),
        "{}",
        again.stderr
    );
    assert_eq!(
        std::fs::read(out_dir.join("report.html")).expect("report"),
        report
    );
    assert!(
        std::fs::symlink_metadata(out_dir.join("report.tmp")).is_err(),
        "a partial report.tmp was left"
    );
}

#[test]
fn a_diverged_resume_does_not_call_its_limits_met() {
    let recipe = "[recipe]\nname = \"probe\"\n\n[accept]\nmin_gain_states = 1\n\n\
                  [[stage]]\nname = \"sweep\"\nkind = \"sweep\"\ncenter_mhz = 5180\nbw_mhz = 80\n\
                  atten_db = [40.0, 50.0]\nbursts = 2\nframes = 8\n";
    let out = Taucal::new()
        .file("g.toml", recipe)
        .args(["run", "g.toml", "--out", "g"])
        .run();
    out.expect_code(0);
    // As if the process had died after the last checkpoint, with the record no longer matching
    // what the bench regenerates: the first exchange's t1 is one picosecond off.
    let manifest = out.read("g/manifest.toml");
    std::fs::write(
        out.path("g/manifest.toml"),
        manifest.replace("status = \"completed\"", "status = \"running\""),
    )
    .expect("manifest");
    let exchanges = out.read("g/exchanges.csv");
    let mut lines: Vec<String> = exchanges.lines().map(String::from).collect();
    let mut fields: Vec<String> = lines[1].split(',').map(String::from).collect();
    fields[7] = (fields[7].parse::<u64>().expect("t1_ps") + 1).to_string();
    lines[1] = fields.join(",");
    std::fs::write(out.path("g/exchanges.csv"), lines.join("\n") + "\n").expect("exchanges");
    let resumed = Taucal::in_dir(out.dir).args(["resume", "g"]).run();
    resumed.expect_code(3);
    assert!(resumed.stderr.contains("diverged"), "{}", resumed.stderr);
    assert!(
        resumed
            .stdout
            .contains("acceptance min_gain_states: 1 ≥ 1 — not judged: the run did not finish"),
        "{}",
        resumed.stdout
    );
    let log = resumed.read("g/run.log");
    let last = log.lines().rfind(|l| l.contains("acceptance"));
    assert!(
        last.is_some_and(
            |l| l.ends_with("min_gain_states: 1 ≥ 1 — not judged: the run did not finish")
        ),
        "{log}"
    );
}

#[test]
fn a_run_whose_files_cannot_be_opened_still_ends_in_the_safe_state() {
    // `exchanges.csv` is a directory: nothing can be recorded and no stage runs, but the
    // instruments, reached and identified by then, are still put in their safe state.
    let dir = tempfile::tempdir().expect("temp dir");
    std::fs::create_dir_all(dir.path().join("o/exchanges.csv")).expect("mkdir");
    let out = Taucal::in_dir(dir)
        .file("r.toml", RECIPE)
        .args(["run", "r.toml", "--out", "o"])
        .run();
    out.expect_code(3);
    assert!(out.stderr.contains("exchanges.csv"), "{}", out.stderr);
    let log = out.read("o/run.log");
    assert!(
        log.contains("safe state: attenuator at 95 dB"),
        "no safe state in\n{log}"
    );
}
