//! Real transports against served simulated instruments: the served-versus-in-process identity,
//! both attenuator drivers, instrument-side errors, a pty pair, and address handling.

use crate::support::served::run_demo_on;
use crate::support::{
    assert_recorded_once, assert_tables_agree, repo, root, without_bench_time, Taucal,
};
use std::io::{BufRead, BufReader};
use std::process::{Child, Command, Stdio};
use std::sync::mpsc;
use std::time::Duration;

/// A running `taucal sim serve`, killed when dropped.
pub(crate) struct Server {
    child: Child,
    addresses: Vec<(String, String)>,
}

impl Server {
    /// Serves the demo bench.
    pub(crate) fn start(listen: &[&str]) -> Server {
        Server::start_bench(&repo("recipes/benches/sim-demo.toml"), listen)
    }

    pub(crate) fn start_bench(bench: &str, listen: &[&str]) -> Server {
        Server::start_with(bench, listen, &[])
    }

    /// Serves `bench` with further arguments (`--realtime`).
    pub(crate) fn start_with(bench: &str, listen: &[&str], extra: &[&str]) -> Server {
        let mut cmd = Command::new(env!("CARGO_BIN_EXE_taucal"));
        cmd.args(["sim", "serve", "--bench", bench, "--seed", "1"]);
        cmd.args(extra);
        for l in listen {
            cmd.args(["--listen", l]);
        }
        let mut child = cmd
            .stdout(Stdio::piped())
            .stderr(Stdio::null())
            .spawn()
            .expect("start sim serve");
        let stdout = child.stdout.take().expect("stdout");
        let (tx, rx) = mpsc::channel();
        std::thread::spawn(move || {
            for line in BufReader::new(stdout).lines().map_while(Result::ok) {
                let _ = tx.send(line);
            }
        });
        let mut addresses = Vec::new();
        for _ in listen {
            let line = rx
                .recv_timeout(Duration::from_secs(20))
                .expect("sim serve announces each role");
            let (role, address) = line.split_once(' ').expect("ROLE ADDRESS");
            addresses.push((role.to_string(), address.to_string()));
        }
        Server { child, addresses }
    }

    /// True while the server process runs (it has not exited, nor panicked).
    pub(crate) fn is_running(&mut self) -> bool {
        matches!(self.child.try_wait(), Ok(None))
    }

    pub(crate) fn address(&self, role: &str) -> String {
        self.addresses
            .iter()
            .find(|(r, _)| r == role)
            .map(|(_, a)| a.clone())
            .expect("role served")
    }
}

impl Drop for Server {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

/// The demo bench's text with its roles bound to drivers and addresses.
pub(crate) fn served_bench(
    attenuator_driver: &str,
    attenuator: &str,
    dut: &str,
    drivers_dir: &str,
) -> String {
    let demo = std::fs::read_to_string(root().join("recipes/benches/sim-demo.toml")).expect("demo");
    demo.replace(
        "attenuator = { driver = \"sim-attenuator\", address = \"sim:\" }",
        &format!("attenuator = {{ driver = \"{attenuator_driver}\", address = \"{attenuator}\" }}"),
    )
    .replace(
        "dut = { driver = \"sim-ranging\", address = \"sim:\" }",
        &format!("dut = {{ driver = \"wren6-console\", address = \"{dut}\" }}"),
    )
    .replace(
        "[bench]\n",
        &format!("[bench]\ndrivers_dir = '{drivers_dir}'\n"),
    )
}

pub(crate) fn in_process_exchanges() -> String {
    let out = Taucal::new()
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--out",
            "run",
            "--seed",
            "1",
        ])
        .run();
    out.expect_code(0);
    without_bench_time(&out.read("run/exchanges.csv"))
}

#[test]
fn served_instruments_over_tcp_and_a_pty_record_the_in_process_exchanges() {
    // The acceptance: same bench and seed, attenuator over TCP (SCPI), the DUT console
    // over a pseudo-terminal opened as a serial port: exchanges.csv identical byte for byte.
    let server = Server::start(&["attenuator=tcp:127.0.0.1:0", "dut=pty"]);
    let drivers = root().join("drivers").display().to_string();
    let bench = served_bench(
        "brackwater-tidegate95",
        &server.address("attenuator"),
        &server.address("dut"),
        &drivers,
    );
    let out = run_demo_on(Taucal::new(), &bench, &[]);
    out.expect_code(0);
    assert!(
        out.stderr.contains("drives real instruments"),
        "{}",
        out.stderr
    );
    let manifest = out.read("run/manifest.toml");
    assert!(manifest.contains("SIM-STEP-ATTENUATOR"), "{manifest}");
    assert!(manifest.contains("Wren-6"), "{manifest}");
    let served = out.read("run/exchanges.csv");
    assert!(served.lines().count() > 1000);
    assert!(
        without_bench_time(&served) == in_process_exchanges(),
        "served and in-process exchanges differ"
    );
}

#[test]
fn served_instruments_with_every_fault_on_complete_the_demo_without_duplicates_and_agree() {
    // The acceptance for served faults: dropped connections, silent commands, garbled
    // replies and console restarts on the wire; the driven instruments must ride through them,
    // the attenuator on a raw socket, over VXI-11 (a drop ends the link, a silent query is
    // device_read's I/O timeout) and over HiSLIP alike: each lost link or session is made again.
    let spare = tempfile::tempdir().expect("temp dir");
    let faulty = spare.path().join("faulty.toml");
    std::fs::write(&faulty, crate::unattended::faulty_bench()).expect("write bench");
    for attenuator_at in [
        "attenuator=tcp:127.0.0.1:0",
        "attenuator=vxi11:127.0.0.1",
        "attenuator=hislip:127.0.0.1:0",
    ] {
        served_faults_are_ridden_through(&faulty, attenuator_at);
    }
}

fn served_faults_are_ridden_through(faulty: &std::path::Path, attenuator_at: &str) {
    let server = Server::start_with(
        &faulty.display().to_string(),
        &[attenuator_at, "dut=tcp:127.0.0.1:0"],
        &["--portmapper-port", "0"],
    );
    let drivers = root().join("drivers").display().to_string();
    let (attenuator, dut) = (server.address("attenuator"), server.address("dut"));
    // Short timeouts so the silent commands cost little; quick backoff for the same reason.
    let bench = served_bench("brackwater-tidegate95", &attenuator, &dut, &drivers)
        .replace(
            &format!("address = \"{attenuator}\" }}"),
            &format!("address = \"{attenuator}\", timeout_ms = 250.0 }}"),
        )
        .replace(
            &format!("address = \"{dut}\" }}"),
            &format!("address = \"{dut}\", timeout_ms = 250.0 }}"),
        );
    assert!(bench.matches("timeout_ms = 250.0").count() == 2, "{bench}");
    let recipe = std::fs::read_to_string(root().join("recipes/rx-gain-sweep.toml"))
        .expect("demo recipe")
        + "\n[faults]\nretries = 4\nbackoff_ms = 20.0\n";
    let out = Taucal::new()
        .file("served.toml", &bench)
        .file("demo.toml", &recipe)
        .args([
            "run",
            "demo.toml",
            "--bench",
            "served.toml",
            "--set",
            "settle_ms=1",
            "--out",
            "run",
        ])
        .run();
    out.expect_code(0);
    let rows = out.read("run/exchanges.csv");
    assert_recorded_once(&rows);
    assert!(
        rows.lines().any(|l| l.split(',').nth(15) == Some("fail")),
        "failed exchanges kept"
    );
    let m: toml::Table = toml::from_str(&out.read("run/manifest.toml")).expect("manifest");
    let count = |role: &str, what: &str| {
        m["faults"][role][what]
            .as_integer()
            .unwrap_or_else(|| panic!("faults.{role}.{what} in {m:?}"))
    };
    assert!(count("dut", "restarts") >= 1, "a console restart was seen");
    assert!(count("dut", "retries") >= 5);
    assert!(count("attenuator", "retries") >= 1, "{attenuator_at}");
    // Against the fault-free run (the in-process one records the same exchanges as a
    // fault-free served one).
    let clean = Taucal::in_dir(out.dir)
        .args(["run", &repo("recipes/rx-gain-sweep.toml"), "--out", "clean"])
        .run();
    clean.expect_code(0);
    assert_tables_agree(
        &clean.read("clean/caltable.csv"),
        &clean.read("run/caltable.csv"),
    );
}

#[test]
fn the_second_attenuator_driver_needs_no_code_change() {
    // Same served bench, the other fictional attenuator's wording (LOSS:LEVel, CR LF), the
    // console over TCP this time, and the address given with --connect.
    let server = Server::start(&["attenuator=tcp:127.0.0.1:0", "dut=tcp:127.0.0.1:0"]);
    let drivers = root().join("drivers").display().to_string();
    let bench = served_bench(
        "olvenmark-step8",
        "tcp:127.0.0.1:9",
        &server.address("dut"),
        &drivers,
    );
    let connect = format!("attenuator={}", server.address("attenuator"));
    let out = run_demo_on(Taucal::new(), &bench, &["--connect", &connect]);
    out.expect_code(0);
    assert!(without_bench_time(&out.read("run/exchanges.csv")) == in_process_exchanges());
}

#[test]
fn an_instrument_side_error_stops_the_run_with_its_code_and_text() {
    // SCPI 1999 Vol 2 §21.8 (from memory): an unknown header queues -113 "Undefined header";
    // the client drains SYST:ERR? after the setting and the run stops (exit 3) naming it.
    let server = Server::start(&["attenuator=tcp:127.0.0.1:0", "dut=tcp:127.0.0.1:0"]);
    let wrong = std::fs::read_to_string(root().join("drivers/brackwater-tidegate95.toml"))
        .expect("driver")
        .replace(
            "set_atten = \"DAMPer:SETTing {db:.2}\"",
            "set_atten = \"DAMPX {db:.2}\"",
        );
    let console =
        std::fs::read_to_string(root().join("drivers/wren6-console.toml")).expect("console");
    let bench = served_bench(
        "wrong-att",
        &server.address("attenuator"),
        &server.address("dut"),
        "drivers",
    );
    let out = run_demo_on(
        Taucal::new()
            .file("drivers/wrong-att.toml", &wrong)
            .file("drivers/wren6-console.toml", &console),
        &bench,
        &[],
    );
    out.expect_code(3);
    assert!(
        out.stderr.contains("-113,\"Undefined header\""),
        "{}",
        out.stderr
    );
    assert!(out.stderr.contains("DAMPX"), "{}", out.stderr);
    assert!(out
        .read("run/manifest.toml")
        .contains("status = \"failed\""));
}

#[test]
fn an_unreachable_instrument_stops_the_run_and_says_where() {
    let drivers = root().join("drivers").display().to_string();
    let listener = std::net::TcpListener::bind("127.0.0.1:0").expect("bind");
    let port = listener.local_addr().expect("addr").port();
    drop(listener);
    let bench = served_bench(
        "brackwater-tidegate95",
        &format!("tcp:127.0.0.1:{port}"),
        &format!("tcp:127.0.0.1:{port}"),
        &drivers,
    );
    let out = run_demo_on(Taucal::new(), &bench, &[]);
    out.expect_code(3);
    assert!(
        out.stderr
            .contains(&format!("cannot connect to tcp:127.0.0.1:{port}")),
        "{}",
        out.stderr
    );
}

#[test]
fn bad_roles_and_connect_overrides_are_refused_before_anything_runs() {
    let drivers = root().join("drivers").display().to_string();
    for (bench, args, want) in [
        (
            served_bench(
                "brackwater-tidegate95",
                "tcp:localhost",
                "tcp:127.0.0.1:1",
                &drivers,
            ),
            vec![],
            "roles.attenuator.address",
        ),
        (
            served_bench(
                "no-such-driver",
                "tcp:127.0.0.1:1",
                "tcp:127.0.0.1:1",
                &drivers,
            ),
            vec![],
            "cannot read driver file `no-such-driver`",
        ),
        (
            served_bench(
                "wren6-console",
                "tcp:127.0.0.1:1",
                "tcp:127.0.0.1:1",
                &drivers,
            ),
            vec![],
            "drives a ranging-console, not the attenuator",
        ),
        (
            served_bench(
                "brackwater-tidegate95",
                "tcp:127.0.0.1:1",
                "tcp:127.0.0.1:1",
                &drivers,
            ),
            vec!["--connect", "chamber=tcp:127.0.0.1:1"],
            "no role `chamber`",
        ),
        (
            served_bench(
                "brackwater-tidegate95",
                "tcp:127.0.0.1:1",
                "tcp:127.0.0.1:1",
                &drivers,
            ),
            vec!["--connect", "dut=serial:/dev/x?baud=fast"],
            "with --connect",
        ),
        (
            served_bench(
                "brackwater-tidegate95",
                "tcp:127.0.0.1:1",
                "tcp:127.0.0.1:1",
                &drivers,
            )
            .replace(
                "address = \"tcp:127.0.0.1:1\" }",
                "address = \"tcp:127.0.0.1:1\", timeout_ms = 0.0 }",
            ),
            vec![],
            "taucal: b.toml line 13, column 92: `roles.attenuator.timeout_ms` 0 ms is not a usable timeout",
        ),
    ] {
        let out = Taucal::new()
            .file("b.toml", &bench)
            .args([
                "run",
                &repo("recipes/rx-gain-sweep.toml"),
                "--bench",
                "b.toml",
            ])
            .args(args)
            .run();
        out.expect_code(2);
        assert!(out.stderr.contains(want), "{want}: {}", out.stderr);
        assert!(!out.has_dir("runs"));
    }
    let out = Taucal::new()
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--connect",
            "attenuator=tcp:127.0.0.1:5025",
        ])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr
            .contains("drives only the in-process simulated bench"),
        "{}",
        out.stderr
    );
}

#[test]
fn sim_serve_binds_loopback_only_unless_asked() {
    // Every listener that takes an address: raw TCP, VXI-11 (its portmapper and core channel),
    // HiSLIP, and the VISA resource string forms of each.
    for at in [
        "tcp:0.0.0.0:0",
        "vxi11:0.0.0.0",
        "hislip:0.0.0.0:0",
        "hislip:[::]:0",
        "TCPIP0::0.0.0.0::5025::SOCKET",
        "TCPIP0::0.0.0.0::inst0::INSTR",
        "TCPIP0::0.0.0.0::hislip0::INSTR",
    ] {
        let out = Taucal::new()
            .args(["sim", "serve", "--listen", &format!("attenuator={at}")])
            .run();
        out.expect_code(2);
        assert!(
            out.stderr.contains("not a loopback address") && out.stderr.contains("--allow-remote"),
            "{at}: {}",
            out.stderr
        );
    }
    let out = Taucal::new()
        .args(["sim", "serve", "--listen", "attenuator=pty"])
        .run();
    out.expect_code(2);
}

#[test]
fn a_console_on_a_pty_pair_made_here_answers_through_the_serial_transport() {
    use taucal::instrument::transport::{Address, Link};
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(1)
        .enable_all()
        .build()
        .expect("runtime");
    rt.block_on(async {
        let bench = taucal::bench::Bench::built_in().expect("bench");
        let served = taucal::sim::serve::ServedBench::new(&bench, 1, false).expect("served");
        let listen = taucal::sim::serve::Listen::parse("dut=pty").expect("listen");
        let address = served.start(&listen).await.expect("pty");
        let address = Address::parse(&format!("{address}?baud=115200")).expect("serial address");
        let mut link = Link::new(address, "\r\n", Duration::from_secs(5));
        link.send("who").await.expect("send");
        let mut lines = Vec::new();
        loop {
            let line = link.read_line().await.expect("line");
            let done = line.starts_with("id ");
            lines.push(line);
            if done {
                break;
            }
        }
        assert!(
            lines.last().is_some_and(|l| l.contains("Wren-6")),
            "{lines:?}"
        );
        let reply = link
            .query("range go n=0 ch=5180 bw=80")
            .await
            .expect("reply");
        assert!(reply.starts_with("range fail"), "{reply}");
    });
}

#[test]
fn every_driver_file_in_drivers_is_valid() {
    let dir = root().join("drivers");
    let mut names: Vec<String> = std::fs::read_dir(&dir)
        .expect("drivers folder")
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "toml"))
        .filter_map(|p| p.file_stem().map(|s| s.to_string_lossy().into_owned()))
        .collect();
    names.sort();
    assert!(names.len() >= 3, "{names:?}");
    for name in names {
        if let Err(d) = taucal::instrument::driver_file::DriverFile::load(&dir, &name) {
            panic!("{name}: {d}");
        }
    }
}

#[test]
fn the_served_console_refuses_bursts_beyond_its_limits_and_stops_on_sigterm_mid_burst() {
    // The issue: `n=100000000` was accepted, grew the server to 19 GB and SIGTERM went unheard.
    // The Wren-6 takes 1 to 1024 exchanges a burst (its driver file's [limits]).
    use std::io::Write;
    let mut server = Server::start_with(
        &repo("recipes/benches/sim-demo.toml"),
        &["dut=tcp:127.0.0.1:0"],
        &["--realtime"],
    );
    let address = server.address("dut");
    let stream = std::net::TcpStream::connect(address.trim_start_matches("tcp:")).expect("connect");
    stream
        .set_read_timeout(Some(Duration::from_secs(20)))
        .expect("timeout");
    let mut writer = stream.try_clone().expect("clone");
    let mut lines = BufReader::new(stream).lines();
    let mut next = || lines.next().expect("a line").expect("read");
    for _ in 0..3 {
        next(); // the boot banner
    }
    for n in ["1025", "100000000"] {
        writer
            .write_all(format!("range go n={n} ch=5180 bw=80\r\n").as_bytes())
            .expect("send");
        assert_eq!(next(), "range fail n must be 1..1024", "n={n}");
    }
    // A paced burst of the most the console takes; the stop comes while it is under way.
    writer
        .write_all(b"range go n=1024 ch=5180 bw=80\r\n")
        .expect("send");
    assert_eq!(next(), "range ack");
    let pid = nix::unistd::Pid::from_raw(server.child.id() as i32);
    nix::sys::signal::kill(pid, nix::sys::signal::Signal::SIGTERM).expect("SIGTERM");
    let start = std::time::Instant::now();
    let status = loop {
        if let Some(status) = server.child.try_wait().expect("wait") {
            break status;
        }
        assert!(
            start.elapsed() < Duration::from_secs(20),
            "sim serve ignored SIGTERM"
        );
        std::thread::sleep(Duration::from_millis(20));
    };
    assert_eq!(status.code(), Some(0));
}

/// Rows of an exchanges file (its header left out).
fn data_rows(text: &str) -> u64 {
    text.lines().skip(1).count() as u64
}

#[test]
fn a_served_run_resumes_cut_back_to_its_checkpoint_and_refuses_changed_files() {
    // Resume through served (not simulated) instruments and the real drivers, with rows past
    // the last checkpoint on disk: the resumed run must cut them off and redo their point,
    // and must refuse a changed bench file or driver file.
    let server = Server::start(&["attenuator=tcp:127.0.0.1:0", "dut=tcp:127.0.0.1:0"]);
    let bench = served_bench(
        "brackwater-tidegate95",
        &server.address("attenuator"),
        &server.address("dut"),
        "drivers",
    );
    let driver =
        std::fs::read_to_string(root().join("drivers/brackwater-tidegate95.toml")).expect("driver");
    let console =
        std::fs::read_to_string(root().join("drivers/wren6-console.toml")).expect("console");
    let recipe = crate::unattended::RECIPE.replace("settle_ms = 30.0", "settle_ms = 100.0");
    let setup = Taucal::new()
        .file("drivers/brackwater-tidegate95.toml", &driver)
        .file("drivers/wren6-console.toml", &console)
        .file("served.toml", &bench)
        .file("r.toml", &recipe);
    let dir = setup
        .args(["check", "r.toml", "--bench", "served.toml"])
        .run();
    dir.expect_code(0);
    let dir = dir.dir;
    let mut child = Command::new(env!("CARGO_BIN_EXE_taucal"))
        .args(["run", "r.toml", "--bench", "served.toml", "--out", "cut"])
        .current_dir(dir.path())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("start taucal");
    // Killed once a few bursts are on disk: as a power cut would.
    let exchanges = dir.path().join("cut/exchanges.csv");
    let start = std::time::Instant::now();
    while std::fs::read_to_string(&exchanges).map_or(0, |t| data_rows(&t)) < 40 {
        assert!(start.elapsed() < Duration::from_secs(30), "no exchanges");
        std::thread::sleep(Duration::from_millis(5));
    }
    child.kill().expect("SIGKILL");
    child.wait().expect("reap");
    // Keep only the checkpoints below what is on disk: the state of a process killed after
    // syncing a point's rows but before journaling it.
    let recorded = std::fs::read_to_string(&exchanges).expect("exchanges");
    let rows_on_disk = data_rows(&recorded);
    let journal = dir.path().join("cut/journal.log");
    let kept: Vec<String> = std::fs::read_to_string(&journal)
        .expect("journal")
        .lines()
        .filter(|l| {
            l.split_whitespace()
                .find_map(|w| w.strip_prefix("rows="))
                .and_then(|r| r.parse::<u64>().ok())
                .is_some_and(|r| r < rows_on_disk)
        })
        .map(str::to_string)
        .collect();
    let checkpoint_rows: u64 = kept
        .last()
        .and_then(|l| l.split_whitespace().find_map(|w| w.strip_prefix("rows=")))
        .and_then(|r| r.parse().ok())
        .expect("a checkpoint");
    std::fs::write(&journal, kept.join("\n") + "\n").expect("journal");
    assert!(checkpoint_rows < rows_on_disk, "rows past the checkpoint");

    // A changed bench file, then a changed driver file: refused, nothing touched.
    for (file, from, to, words) in [
        (
            "served.toml",
            "fixed_loss_db = 8.0",
            "fixed_loss_db = 9.0",
            "the bench changed since the run began",
        ),
        (
            "drivers/brackwater-tidegate95.toml",
            "settle_ms = 2.0",
            "settle_ms = 3.0",
            "the driver file changed since the run began",
        ),
    ] {
        let path = dir.path().join(file);
        let original = std::fs::read_to_string(&path).expect("file");
        assert!(original.contains(from), "{file}: {from}");
        std::fs::write(&path, original.replace(from, to)).expect("edit");
        let out = Command::new(env!("CARGO_BIN_EXE_taucal"))
            .args(["resume", "cut"])
            .current_dir(dir.path())
            .output()
            .expect("resume");
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{file}: {stderr}");
        assert!(stderr.contains(words), "{file}: {stderr}");
        assert_eq!(
            std::fs::read_to_string(&exchanges).expect("exchanges"),
            recorded,
            "{file}: the record was touched"
        );
        std::fs::write(&path, original).expect("restore");
    }

    let resumed = Taucal::in_dir(dir).args(["resume", "cut"]).run();
    resumed.expect_code(0);
    let rows = resumed.read("cut/exchanges.csv");
    assert_recorded_once(&rows);
    let kept_lines: Vec<&str> = recorded
        .lines()
        .take(1 + checkpoint_rows as usize)
        .collect();
    let now_lines: Vec<&str> = rows.lines().take(1 + checkpoint_rows as usize).collect();
    assert_eq!(
        kept_lines, now_lines,
        "the rows up to the checkpoint are kept as they were"
    );
    assert!(data_rows(&rows) > rows_on_disk);
    let m: toml::Table = toml::from_str(&resumed.read("cut/manifest.toml")).expect("manifest");
    assert_eq!(m["status"].as_str(), Some("completed"));
    assert_eq!(m["resumes"].as_integer(), Some(1));
}

#[test]
fn a_served_bench_uses_its_true_path_where_it_differs_from_the_declared_one() {
    // `[sim.path]` 50 ps longer than the declared 6100 ps one way: the served run records what
    // the in-process run on that bench records, and both tables sit 2 × 50 ps above the demo's
    // (the round trip crosses the path twice; the fitter removes only the declared delay).
    let demo = std::fs::read_to_string(root().join("recipes/benches/sim-demo.toml")).expect("demo");
    let truth = format!("{demo}\n[sim.path]\ncable_delay_ps = 6150.0\n");
    let dir = tempfile::tempdir().expect("tempdir");
    let truth_file = dir.path().join("long-path.toml");
    std::fs::write(&truth_file, &truth).expect("write");
    let server = Server::start_bench(
        &truth_file.display().to_string(),
        &["attenuator=tcp:127.0.0.1:0", "dut=tcp:127.0.0.1:0"],
    );
    let drivers = root().join("drivers").display().to_string();
    let bench = served_bench(
        "brackwater-tidegate95",
        &server.address("attenuator"),
        &server.address("dut"),
        &drivers,
    );
    let recipe = repo("recipes/rx-gain-sweep.toml");
    let served = run_demo_on(Taucal::new(), &bench, &["-q"]);
    served.expect_code(0);
    let in_process = Taucal::new()
        .file("long.toml", &truth)
        .args(["run", &recipe, "--bench", "long.toml", "--out", "run", "-q"])
        .run();
    in_process.expect_code(0);
    assert!(
        without_bench_time(&served.read("run/exchanges.csv"))
            == without_bench_time(&in_process.read("run/exchanges.csv")),
        "served and in-process exchanges differ"
    );
    let demo_run = Taucal::new()
        .args(["run", &recipe, "--out", "run", "-q"])
        .run();
    demo_run.expect_code(0);
    let (long, short) = (
        crate::support::csv_numbers(&served.read("run/caltable.csv")),
        crate::support::csv_numbers(&demo_run.read("run/caltable.csv")),
    );
    assert_eq!(long.len(), short.len());
    for (l, s) in long.iter().zip(&short) {
        let shift = l[3] - s[3];
        assert!(
            (shift - 100.0).abs() < 1.0,
            "gain {}: shifted {shift} ps, not 100",
            l[2]
        );
    }
}
