//! Programs as instruments (`exec:` addresses and `run = [...]` driver commands), with the taucal
//! binary's own stdio server as the real separate program, and small shell scripts as the
//! misbehaving ones.

use crate::instruments::in_process_exchanges;
use crate::support::{repo, root, without_bench_time, Taucal};

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

#[test]
fn a_bench_served_by_a_program_on_its_stdin_and_stdout_records_the_in_process_exchanges() {
    // The served model must be one for both instruments (the DUT's receive level follows the
    // attenuator), so one server process carries both: the attenuator on its stdin/stdout,
    // which the run starts as `exec:`, and the DUT's console on a loopback port beside it. The
    // attenuator is identified first, so the program is up before the console is dialled.
    let port = free_port();
    let attenuator = format!(
        "exec:{} sim serve --stdio attenuator --listen dut=tcp:127.0.0.1:{port} --bench {} --seed 1",
        taucal(),
        repo("recipes/benches/sim-demo.toml")
    );
    let bench = bench_with(&attenuator, &format!("tcp:127.0.0.1:{port}"));
    let out = Taucal::new()
        .file("exec.toml", &bench)
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--bench",
            "exec.toml",
            "--out",
            "run",
        ])
        .run();
    out.expect_code(0);
    let manifest = out.read("run/manifest.toml");
    assert!(manifest.contains("SIM-STEP-ATTENUATOR"), "{manifest}");
    let log = out.read("run/run.log");
    assert!(
        log.contains("stderr: dut tcp:127.0.0.1:"),
        "the program's stderr is not in the run log:\n{log}"
    );
    assert!(log.contains("the program ended"), "{log}");
    let exchanges = out.read("run/exchanges.csv");
    assert!(exchanges.lines().count() > 1000);
    assert!(
        without_bench_time(&exchanges) == in_process_exchanges(),
        "exchanges through the exec'd server differ from the in-process run"
    );
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
fn a_missing_program_stops_the_run_naming_the_address_and_the_program() {
    let bench = bench_with("exec:/nonexistent/taucal-tool --port 3", "sim:");
    let out = run_through(&bench);
    out.expect_code(3);
    assert!(
        out.stderr.contains(
            "cannot connect to exec:/nonexistent/taucal-tool --port 3: cannot start program \
             `/nonexistent/taucal-tool`: there is no such file"
        ),
        "{}",
        out.stderr
    );
}
