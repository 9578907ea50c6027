//! Programs as instruments (`exec:` addresses and `run = [...]` driver commands), with the taucal
//! binary's own stdio server as the real separate program, and small shell scripts as the
//! misbehaving ones. The served-versus-in-process identity through `exec:` is the README's
//! example (`examples::readme_exec_roles_record_the_in_process_exchanges`).

use crate::support::{repo, root, Taucal};

/// The taucal binary under test, as an `exec:` command line writes it.
fn taucal() -> String {
    env!("CARGO_BIN_EXE_taucal").to_string()
}

/// A loopback port that was free a moment ago.
fn free_port() -> u16 {
    std::net::TcpListener::bind("127.0.0.1:0")
        .and_then(|l| l.local_addr())
        .expect("a free port")
        .port()
}

/// The demo bench with its attenuator and DUT bound to `attenuator` and `dut` through the
/// shipped drivers (`sim:` keeps the role in-process).
fn bench_with(attenuator: &str, dut: &str) -> String {
    let demo = std::fs::read_to_string(root().join("recipes/benches/sim-demo.toml")).expect("demo");
    let drivers = root().join("drivers").display().to_string();
    // Addresses hold quotes of their own: written as TOML strings, escaped.
    let quoted = |a: &str| toml::Value::String(a.to_string()).to_string();
    let role = |driver: &str, sim_driver: &str, address: &str| match address {
        "sim:" => format!("{{ driver = \"{sim_driver}\", address = \"sim:\" }}"),
        _ => format!("{{ driver = \"{driver}\", address = {} }}", quoted(address)),
    };
    demo.replace(
        "attenuator = { driver = \"sim-attenuator\", address = \"sim:\" }",
        &format!(
            "attenuator = {}",
            role("brackwater-tidegate95", "sim-attenuator", attenuator)
        ),
    )
    .replace(
        "dut = { driver = \"sim-ranging\", address = \"sim:\" }",
        &format!("dut = {}", role("wren6-console", "sim-ranging", dut)),
    )
    .replace(
        "[bench]\n",
        &format!("[bench]\ndrivers_dir = '{drivers}'\n"),
    )
}

/// Runs the demo recipe through `bench` (text) and returns the outcome.
fn run_through(bench: &str) -> crate::support::Outcome {
    Taucal::new()
        .file("exec.toml", bench)
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--bench",
            "exec.toml",
            "--out",
            "run",
        ])
        .run()
}

#[test]
fn an_exec_address_that_does_not_split_is_refused_before_anything_runs() {
    let bench = bench_with("sim:", "exec:/bin/echo 'unclosed");
    let out = run_through(&bench);
    out.expect_code(2);
    assert!(out.stderr.contains("roles.dut.address"), "{}", out.stderr);
    assert!(
        out.stderr
            .contains("bad command line: a single quote (') is not closed"),
        "{}",
        out.stderr
    );
    assert!(
        !out.has_dir("run"),
        "a run directory was made for a refused bench"
    );
}

#[test]
fn a_missing_program_is_refused_before_anything_runs_naming_the_role_and_the_program() {
    let bench = bench_with("exec:/nonexistent/taucal-tool --port 3", "sim:");
    let out = run_through(&bench);
    out.expect_code(2);
    assert!(
        out.stderr.contains("roles.attenuator.address")
            && out.stderr.contains(
                "names the program `/nonexistent/taucal-tool`, which is not an executable file"
            ),
        "{}",
        out.stderr
    );
    assert!(!out.has_dir("run"), "nothing ran");
    // A bare name is looked up on PATH.
    let out = run_through(&bench_with("exec:taucal-no-such-tool-here", "sim:"));
    out.expect_code(2);
    assert!(
        out.stderr.contains("not an executable on PATH"),
        "{}",
        out.stderr
    );
}

/// A shell command line that passes `lines` command lines to the stdio server and then ends its
/// stdin, so it exits (a shell loop passes them unbuffered, which `head` would not). With
/// `once`, a second start finds the marker file and fails at once, as a program whose device
/// has gone would.
fn dying_server(port: u16, lines: u32, once: Option<&str>) -> String {
    let gate = once.map_or(String::new(), |marker| {
        format!("if [ -e {marker} ]; then echo 'device gone' >&2; exit 1; fi; touch {marker}; ")
    });
    let server = format!(
        "{gate}i=0; while [ $i -lt {lines} ] && IFS= read -r l; do printf '%s\\n' \"$l\"; \
         i=$((i + 1)); done | exec {} sim serve --stdio attenuator \
         --listen dut=tcp:127.0.0.1:{port} --bench {} --seed 1",
        taucal(),
        repo("recipes/benches/sim-demo.toml")
    );
    crate::support::exec_address(&["/bin/sh", "-c", &server])
}

#[test]
fn a_program_that_exits_mid_run_is_restarted_and_the_run_rides_through() {
    // Every 150 command lines the attenuator's program is gone: the command in flight fails,
    // and the link starts the program again — a fresh bench model, whose DUT console on the
    // same port the DUT's link reconnects to. Exchanges recorded before each exit are kept,
    // none twice.
    let port = free_port();
    let out = run_through(&bench_with(
        &dying_server(port, 150, None),
        &format!("tcp:127.0.0.1:{port}"),
    ));
    out.expect_code(0);
    let log = out.read("run/run.log");
    let ends = log.matches("the program ended (exit status: 0)").count();
    assert!(ends >= 3, "{ends} program exits:\n{log}");
    assert!(log.contains("; reconnecting"), "{log}");
    assert!(out
        .read("run/manifest.toml")
        .contains("status = \"completed\""));
    let exchanges = out.read("run/exchanges.csv");
    assert!(exchanges.lines().count() > 1000);
    crate::support::assert_recorded_once(&exchanges);
}

#[test]
fn a_program_that_cannot_come_back_stops_the_run_with_its_data_kept() {
    let port = free_port();
    let work = tempfile::tempdir().expect("temporary directory");
    let marker = work.path().join("started").display().to_string();
    let out = run_through(&bench_with(
        &dying_server(port, 150, Some(&marker)),
        &format!("tcp:127.0.0.1:{port}"),
    ));
    out.expect_code(3);
    assert!(
        out.stderr.contains("run stopped: attenuator:"),
        "{}",
        out.stderr
    );
    let log = out.read("run/run.log");
    assert!(log.contains("stderr: device gone"), "{log}");
    assert!(log.contains("the program ended (exit status: 1)"), "{log}");
    let manifest = out.read("run/manifest.toml");
    assert!(manifest.contains("status = \"failed\""), "{manifest}");
    let exchanges = out.read("run/exchanges.csv");
    assert!(
        exchanges.lines().count() > 10,
        "the exchanges before the program went were not kept:\n{exchanges}"
    );
    crate::support::assert_recorded_once(&exchanges);
}

/// A recipe of one point: two bursts of four exchanges at 40 dB on 5180/80.
const ONE_POINT: &str = r#"
[recipe]
name = "one-point"

[[stage]]
name = "point"
kind = "sweep"
center_mhz = 5180
bw_mhz = 80
atten_db = [40.0]
bursts = 2
frames = 4
"#;

/// The demo bench whose DUT is driven by `drivers/wren-run.toml` (the Wren-6 driver with its
/// identity and temperature run as shell one-liners, its bursts as `./burst.sh` beside the
/// driver) and whose console link, used
/// for the safe state only, is a shell loop answering `ok`.
fn run_command_setup(burst_script: &str) -> Taucal {
    let driver = std::fs::read_to_string(root().join("drivers/wren6-console.toml"))
        .expect("driver")
        .replace(
            "start_burst = \"range go n={frames} ch={center_mhz} bw={bw_mhz}\"",
            "start_burst = { run = [\"./burst.sh\", \"{frames}\", \"{center_mhz}\", \"bw {bw_mhz}\"] }",
        )
        .replace(
            "identify = \"who\"",
            "identify = { run = [\"/bin/sh\", \"-c\", \"echo 'id W6-RUN-0001'\"] }",
        )
        .replace(
            "temperature = \"temp?\"",
            "temperature = { run = [\"/bin/sh\", \"-c\", \"echo 'temp 31.5'\"] }",
        );
    let console =
        crate::support::exec_address(&["/bin/sh", "-c", "while read l; do echo ok; done"]);
    let bench = std::fs::read_to_string(root().join("recipes/benches/sim-demo.toml"))
        .expect("demo")
        .replace(
            "dut = { driver = \"sim-ranging\", address = \"sim:\" }",
            &format!(
                "dut = {{ driver = \"wren-run\", address = {} }}",
                toml::Value::String(console)
            ),
        )
        .replace("[bench]\n", "[bench]\ndrivers_dir = 'drivers'\n");
    let t = Taucal::new()
        .file("drivers/wren-run.toml", &driver)
        .file("drivers/burst.sh", burst_script)
        .file("bench.toml", &bench)
        .file("one.toml", ONE_POINT);
    let script = t.dir().join("drivers/burst.sh");
    let mut mode = std::fs::metadata(&script).expect("script").permissions();
    std::os::unix::fs::PermissionsExt::set_mode(&mut mode, 0o755);
    std::fs::set_permissions(&script, mode).expect("chmod");
    t.args(["run", "one.toml", "--bench", "bench.toml", "--out", "run"])
}

#[test]
fn a_driver_command_run_as_a_program_gives_its_stdout_lines_as_replies() {
    // Each burst's program numbers its bursts in a file, and writes its arguments back in the
    // exchange lines: `$#` counts them, so "bw 80" arriving as one argument shows as 3 (t4).
    let out = run_command_setup(
        r#"#!/bin/sh
n=$(cat bursts 2>/dev/null || echo 0); n=$((n + 1)); echo $n > bursts
echo "range ack"
i=0
while [ $i -lt $1 ]; do
  echo "xr $i t1=$((n * 1000 + i)) t2=$2 t3=${3#bw } t4=$# g=1 rssi=-40.5 rg=0 st=ok"
  i=$((i + 1))
done
echo "range done n=$1"
"#,
    )
    .run();
    out.expect_code(0);
    assert!(out.read("run/manifest.toml").contains("W6-RUN-0001"));
    assert!(
        out.read("run/exchanges.csv").contains(",31.5,"),
        "temperature"
    );
    let exchanges = out.read("run/exchanges.csv");
    let mut lines = exchanges.lines();
    let header: Vec<&str> = lines.next().expect("header").split(',').collect();
    let col = |name: &str| header.iter().position(|h| *h == name).expect(name);
    let stamps: Vec<String> = lines
        .map(|l| {
            let cells: Vec<&str> = l.split(',').collect();
            ["t1_ps", "t2_ps", "t3_ps", "t4_ps"]
                .map(|c| cells[col(c)])
                .join(" ")
        })
        .collect();
    let want: Vec<String> = (1..=2)
        .flat_map(|burst| (0..4).map(move |i| format!("{} 5180 80 3", burst * 1000 + i)))
        .collect();
    assert_eq!(stamps, want);
}

#[test]
fn a_driver_command_whose_program_fails_stops_the_run_with_its_stderr() {
    let out = run_command_setup(
        "#!/bin/sh\necho 'range ack'\necho 'radio: calibration lock held by pid 77' >&2\nexit 5\n",
    )
    .run();
    out.expect_code(3);
    assert!(out.stderr.contains("exit status: 5"), "{}", out.stderr);
    assert!(
        out.stderr
            .contains("radio: calibration lock held by pid 77"),
        "{}",
        out.stderr
    );
    assert!(out
        .read("run/manifest.toml")
        .contains("status = \"failed\""));
}

#[test]
fn a_program_that_floods_its_output_is_an_error_not_a_stuck_run() {
    // Endless lines: none is the identity's reply, and getting back in step gives up after a
    // burst's worth of lines. One endless line: refused at the line-length bound. Either way
    // the program is ended and the run stops with the reason, nothing recorded twice.
    for (program, want) in [
        ("yes 'flood line'", "was answered `flood line`"),
        (
            "tr '\\000' x < /dev/zero",
            "a line longer than 65536 bytes arrived",
        ),
    ] {
        let dut = crate::support::exec_address(&["/bin/sh", "-c", program]);
        let out = run_through(&bench_with("sim:", &dut));
        out.expect_code(3);
        assert!(out.stderr.contains(want), "{program}: {}", out.stderr);
        assert!(
            out.read("run/manifest.toml")
                .contains("status = \"failed\""),
            "{program}"
        );
    }
}

#[test]
fn a_program_flooding_its_stderr_is_logged_within_bounds_and_leaves_nothing_behind() {
    // Before it serves, the program floods its stderr with 3000 lines, and starts a background
    // job that lingers with the same stderr; the job's pid goes to a file. The log takes the
    // first 1000 lines and says the rest was dropped; the run is unaffected; and when the run
    // ends, the lingering job is ended with the program.
    //
    // The flood is written whole (one `seq`, 32 kB: it fits a pipe's 64 kB, so it does not wait
    // for the reader) before the program answers a command, so the whole run is there to read
    // it, however loaded the machine: a flood still being written by a slow job could be cut
    // short by the run's end, and the warning about line 1001 never be reached.
    let port = free_port();
    let work = tempfile::tempdir().expect("temporary directory");
    let pid_file = work.path().join("job.pid").display().to_string();
    let server = format!(
        "seq -f 'noise %g' 0 2999 >&2; sleep 300 >&2 & \
         echo $! > {pid_file}; exec {} sim serve --stdio attenuator --listen dut=tcp:127.0.0.1:{port} \
         --bench {} --seed 1",
        taucal(),
        repo("recipes/benches/sim-demo.toml")
    );
    let attenuator = crate::support::exec_address(&["/bin/sh", "-c", &server]);
    let out = run_through(&bench_with(&attenuator, &format!("tcp:127.0.0.1:{port}")));
    out.expect_code(0);
    let log = out.read("run/run.log");
    assert!(log.contains("stderr: noise 0\n"), "{log}");
    assert!(log.contains("stderr: noise 999\n"), "{log}");
    assert!(
        log.contains("more than 1000 stderr lines; the rest is not logged"),
        "{log}"
    );
    assert!(
        !log.contains("stderr: noise 1000\n"),
        "more than 1000 lines logged"
    );
    let job: u32 = std::fs::read_to_string(&pid_file)
        .expect("pid file")
        .trim()
        .parse()
        .expect("pid");
    let stat = format!("/proc/{job}/stat");
    let running = || {
        std::fs::read_to_string(&stat).is_ok_and(|s| {
            s.rsplit_once(')')
                .and_then(|(_, rest)| rest.split_whitespace().next())
                .is_some_and(|state| state != "Z" && state != "X")
        })
    };
    // The run sends the job SIGKILL as it ends, and the kernel ends it when the job is next
    // scheduled, which on a loaded machine may come after this test reads its state: a few
    // seconds' grace, against the 300 s the job would linger if nobody ended it.
    let deadline = std::time::Instant::now() + std::time::Duration::from_secs(10);
    while running() && std::time::Instant::now() < deadline {
        std::thread::sleep(std::time::Duration::from_millis(20));
    }
    assert!(
        !running(),
        "the program's background job {job} outlived the run"
    );
}

#[test]
fn sim_serve_stdio_answers_on_stdout_ends_with_stdin_and_refuses_bad_roles() {
    use std::io::Write;
    use std::process::{Command, Stdio};
    let mut child = Command::new(taucal())
        .args(["sim", "serve", "--stdio", "dut", "--seed", "1"])
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("start");
    child
        .stdin
        .take()
        .expect("stdin")
        .write_all(b"who\nrange go n=3 ch=5180 bw=80\n")
        .expect("write");
    // Stdin is closed here (dropped): the server answers what it read and exits.
    let out = child.wait_with_output().expect("exit");
    assert!(out.status.success(), "{out:?}");
    let stdout = String::from_utf8_lossy(&out.stdout);
    let lines: Vec<&str> = stdout.lines().collect();
    assert!(
        lines
            .iter()
            .any(|l| l.starts_with("id Saltmarsh Radio Lab,Wren-6")),
        "{stdout}"
    );
    assert_eq!(
        lines.iter().filter(|l| l.starts_with("xr ")).count(),
        3,
        "{stdout}"
    );
    assert_eq!(lines.last(), Some(&"range done n=3"), "{stdout}");
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("on stdin/stdout"), "{stderr}");
    // A chamber too, where the bench simulates one, speaking its shipped driver's lines.
    let mut chamber = Command::new(taucal())
        .args(["sim", "serve", "--stdio", "chamber", "--bench"])
        .arg(repo("recipes/benches/overnight-soak.toml"))
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .expect("start");
    chamber
        .stdin
        .take()
        .expect("stdin")
        .write_all(b"whoami\nread air\n")
        .expect("write");
    let out = chamber.wait_with_output().expect("exit");
    let stdout = String::from_utf8_lossy(&out.stdout);
    let lines: Vec<&str> = stdout.lines().collect();
    assert!(lines[0].starts_with("TILLOWBY "), "{stdout}");
    assert!(lines[1].starts_with("air "), "{stdout}");
    for (args, want) in [
        (vec!["--stdio", "reference"], "not a role sim serve offers"),
        (
            vec!["--stdio", "dut", "--listen", "dut=tcp:127.0.0.1:0"],
            "already served",
        ),
        (
            vec!["--stdio", "chamber"],
            "the bench has no [sim.chamber] to serve",
        ),
    ] {
        let out = Taucal::new().args(["sim", "serve"]).args(args).run();
        out.expect_code(2);
        assert!(out.stderr.contains(want), "{}", out.stderr);
    }
}

#[test]
fn sigint_puts_the_bench_safe_through_the_program_then_ends_it() {
    // The server writes its pid, then becomes taucal's stdio server. Ctrl-C goes to taucal
    // alone (the program has a process group of its own): the run stops, the attenuator's
    // safe setting travels through the program, and the program is ended with the run.
    use nix::sys::signal::{killpg, Signal};
    use nix::unistd::Pid;
    use std::os::unix::process::CommandExt;
    let port = free_port();
    let dir = tempfile::tempdir().expect("temporary directory");
    let pid_file = dir.path().join("server.pid").display().to_string();
    let server = format!(
        "echo $$ > {pid_file}; exec {} sim serve --stdio attenuator --listen dut=tcp:127.0.0.1:{port} \
         --bench {} --seed 1",
        taucal(),
        repo("recipes/benches/sim-demo.toml")
    );
    let attenuator = crate::support::exec_address(&["/bin/sh", "-c", &server]);
    std::fs::write(
        dir.path().join("exec.toml"),
        bench_with(&attenuator, &format!("tcp:127.0.0.1:{port}")),
    )
    .expect("bench");
    let mut run = std::process::Command::new(taucal())
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--bench",
            "exec.toml",
        ])
        .args(["--out", "run", "--quiet"])
        .current_dir(dir.path())
        // Its own process group, as a shell gives a foreground job, so Ctrl-C can be sent as
        // a terminal sends it: to the whole group.
        .process_group(0)
        .spawn()
        .expect("start the run");
    // Once the run is measuring, interrupt it.
    let log = dir.path().join("run/run.log");
    let measuring = (0..600).any(|_| {
        std::thread::sleep(std::time::Duration::from_millis(50));
        std::fs::read_to_string(&log).is_ok_and(|l| l.contains("stage `map` begins"))
    });
    assert!(measuring, "the run did not start measuring");
    std::thread::sleep(std::time::Duration::from_millis(500));
    killpg(Pid::from_raw(run.id() as i32), Signal::SIGINT).expect("SIGINT");
    let status = run.wait().expect("the run ends");
    assert_eq!(status.code(), Some(3));
    let log = std::fs::read_to_string(&log).expect("log");
    assert!(
        log.contains("safe state: attenuator at 95 dB, ranging stopped"),
        "{log}"
    );
    // Ended once, by its stdin closing: the Ctrl-C did not reach it.
    assert_eq!(log.matches("the program ended").count(), 1, "{log}");
    assert!(log.contains("the program ended (exit status: 0)"), "{log}");
    let pid: u32 = std::fs::read_to_string(&pid_file)
        .expect("pid file")
        .trim()
        .parse()
        .expect("pid");
    let running = std::fs::read_to_string(format!("/proc/{pid}/stat")).is_ok_and(|s| {
        s.rsplit_once(')')
            .and_then(|(_, rest)| rest.split_whitespace().next())
            .is_some_and(|state| state != "Z" && state != "X")
    });
    assert!(!running, "the server {pid} outlived the run");
}
