//! Chambers as driver files: the simulated chamber served by `taucal sim serve` and driven
//! through the shipped Coldhearth 60 driver, soaks through it, its safe state at the end of a
//! run and on a stop, and the errors of bad chamber driver files.

use crate::instruments::Server;
use crate::support::{repo, root, Taucal};
use nix::sys::signal::{kill, Signal};
use nix::unistd::Pid;
use std::io::{BufRead, BufReader, Write};
use std::net::TcpStream;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// The served soak bench with a chamber of the given ramp and product lag, its driver folder
/// made absolute so the file can live in a temporary directory.
fn server_bench(dir: &std::path::Path, ramp_c_per_min: f64, dut_tau_s: f64) -> String {
    let text = std::fs::read_to_string(root().join("recipes/benches/soak-served.toml"))
        .expect("soak-served bench");
    let chamber = "ramp_c_per_min = 2.0\ndut_tau_s = 300.0";
    assert!(text.contains(chamber));
    let text = text
        .replace(
            "drivers_dir = \"../../drivers\"",
            &format!(
                "drivers_dir = {:?}",
                root().join("drivers").display().to_string()
            ),
        )
        .replace(
            chamber,
            &format!("ramp_c_per_min = {ramp_c_per_min:?}\ndut_tau_s = {dut_tau_s:?}"),
        );
    let path = dir.join("served.toml");
    std::fs::write(&path, text).expect("write bench");
    path.display().to_string()
}

/// Serves the soak bench with a chamber that settles in about two seconds of wall time: air at
/// 20 °C/s, the product lagging it by 0.3 s.
fn serve(dir: &std::path::Path, ramp_c_per_min: f64, dut_tau_s: f64) -> Server {
    Server::start_bench(
        &server_bench(dir, ramp_c_per_min, dut_tau_s),
        &[
            "attenuator=tcp:127.0.0.1:0",
            "dut=tcp:127.0.0.1:0",
            "chamber=tcp:127.0.0.1:0",
        ],
    )
}

/// One line of the chamber's own protocol, sent on a connection of its own (as an operator's
/// terminal would), and its reply.
fn ask(chamber: &str, line: &str) -> String {
    let at = chamber.trim_start_matches("tcp:");
    let mut stream = TcpStream::connect(at).expect("connect to the chamber");
    stream
        .set_read_timeout(Some(Duration::from_secs(5)))
        .expect("timeout");
    stream
        .write_all(format!("{line}\r\n").as_bytes())
        .expect("send");
    let mut reply = String::new();
    BufReader::new(stream).read_line(&mut reply).expect("reply");
    reply.trim_end().to_string()
}

/// A soak to 35 °C that must hold ±0.3 °C for half a second, then a small sweep.
fn recipe(timeout_s: f64) -> String {
    format!(
        r#"[recipe]
name = "served-soak"
description = "One short soak through the served chamber, then a few points"

[[stage]]
name = "soak-35c"
kind = "soak"
setpoint_c = 35.0
within_c = 0.3
stable_s = 0.5
poll_s = 0.1
timeout_s = {timeout_s:?}

[[stage]]
name = "cal-35c"
kind = "sweep"
center_mhz = 5180
bw_mhz = 80
atten_db = [30.0, 50.0, 75.0]
bursts = 2
frames = 8
settle_ms = 0.0
"#
    )
}

/// `run r.toml` on the served soak bench (in `dir`'s copy of the repository), connected to
/// `server`.
fn run_args(server: &Server) -> Vec<String> {
    let mut args: Vec<String> = [
        "run",
        "r.toml",
        "--bench",
        "recipes/benches/soak-served.toml",
        "--out",
        "out",
    ]
    .map(String::from)
    .to_vec();
    for role in ["attenuator", "dut", "chamber"] {
        args.push("--connect".into());
        args.push(format!("{role}={}", server.address(role)));
    }
    args
}

#[test]
fn the_served_chamber_reaches_a_setpoint_through_the_shipped_driver() {
    use taucal::instrument::driven_chamber::DrivenChamber;
    use taucal::instrument::driver_file::{DriverFile, DriverKind};
    use taucal::instrument::scpi_client::ScpiClient;
    use taucal::instrument::transport::{Address, Link};
    use taucal::instrument::{Chamber, ChamberHandle, InstrumentError, Owned};
    let dir = tempfile::tempdir().expect("tempdir");
    let server = serve(dir.path(), 1200.0, 0.3);
    let file = DriverFile::load(&root().join("drivers"), "tillowby-coldhearth60")
        .unwrap_or_else(|d| panic!("{d}"));
    let DriverKind::Chamber(driver) = file.kind else {
        panic!("the Coldhearth 60 driver is a chamber");
    };
    let address = Address::parse(&server.address("chamber")).expect("address");
    let link = Link::new(address, &file.link.line_ending, file.link.timeout);
    let driven: Box<dyn Chamber> = Box::new(DrivenChamber::new(
        "chamber",
        *driver,
        ScpiClient::new(link),
    ));
    let chamber = ChamberHandle(Owned::spawn("chamber", driven).expect("runtime"));
    assert!(chamber
        .identify()
        .expect("identify")
        .starts_with("TILLOWBY COLDHEARTH-60 "));
    // At rest the air stands at the room's 25 °C (the bench's start_c).
    assert_eq!(chamber.air_c().expect("air"), 25.0);
    chamber.set_setpoint_c(-10.0).expect("setpoint");
    let start = Instant::now();
    let mut readings = Vec::new();
    loop {
        let air = chamber.air_c().expect("air");
        let product = chamber
            .product_c()
            .expect("product")
            .expect("product sensor");
        readings.push((air, product));
        if (product - -10.0).abs() <= 0.05 {
            break;
        }
        assert!(
            start.elapsed() < Duration::from_secs(20),
            "never settled: {readings:?}"
        );
        std::thread::sleep(Duration::from_millis(50));
    }
    // Cooling: the air falls monotonically to the setpoint and never below it, and the product
    // lags behind the air (first-order lag, so it is never colder than the air).
    for pair in readings.windows(2) {
        assert!(pair[1].0 <= pair[0].0, "{readings:?}");
    }
    assert!(readings
        .iter()
        .all(|(air, product)| *air >= -10.0 && product >= air));
    assert!(readings.len() >= 3, "{readings:?}");
    assert_eq!(ask(&server.address("chamber"), "goal?"), "goal -10.0");
    // The driver refuses what the chamber is not rated for, before anything is sent.
    match chamber.set_setpoint_c(151.0) {
        Err(InstrumentError::Refused { message, .. }) => {
            assert!(
                message.contains("outside the chamber's rated setpoints -40..150"),
                "{message}"
            );
            assert!(message.contains("nothing was sent"), "{message}");
        }
        other => panic!("{other:?}"),
    }
    assert_eq!(ask(&server.address("chamber"), "goal?"), "goal -10.0");
    chamber.safe_state().expect("safe state");
    assert_eq!(ask(&server.address("chamber"), "goal?"), "goal rest");
}

#[test]
fn a_refusal_from_the_chamber_itself_is_reported_in_its_words() {
    use taucal::diagnostic::SourceFile;
    use taucal::instrument::driven_chamber::DrivenChamber;
    use taucal::instrument::driver_file::{DriverFile, DriverKind};
    use taucal::instrument::scpi_client::ScpiClient;
    use taucal::instrument::transport::{Address, Link};
    use taucal::instrument::{Chamber, ChamberHandle, InstrumentError, Owned};
    let dir = tempfile::tempdir().expect("tempdir");
    let server = serve(dir.path(), 1200.0, 0.3);
    // A driver file that claims more than the chamber does: the chamber says no.
    let text = std::fs::read_to_string(root().join("drivers/tillowby-coldhearth60.toml"))
        .expect("driver")
        .replace("[-40.0, 150.0]", "[-40.0, 200.0]");
    let file = DriverFile::parse("wide", SourceFile::new("wide.toml", text)).expect("parses");
    let DriverKind::Chamber(driver) = file.kind else {
        panic!("chamber");
    };
    let address = Address::parse(&server.address("chamber")).expect("address");
    let link = Link::new(address, &file.link.line_ending, file.link.timeout);
    let driven: Box<dyn Chamber> = Box::new(DrivenChamber::new(
        "chamber",
        *driver,
        ScpiClient::new(link),
    ));
    let chamber = ChamberHandle(Owned::spawn("chamber", driven).expect("runtime"));
    match chamber.set_setpoint_c(180.0) {
        Err(InstrumentError::Refused { message, .. }) => {
            assert_eq!(message, "`goal 180.0` was refused: goal outside -40..150");
        }
        other => panic!("{other:?}"),
    }
    assert_eq!(ask(&server.address("chamber"), "goal?"), "goal rest");
}

#[test]
fn a_soak_through_the_served_chamber_settles_and_the_run_leaves_it_at_rest() {
    let dir = tempfile::tempdir().expect("tempdir");
    let server = serve(dir.path(), 1200.0, 0.3);
    let out = Taucal::new()
        .with_repo(&["recipes", "drivers"])
        .file("r.toml", &recipe(30.0))
        .args(run_args(&server))
        .run();
    out.expect_code(0);
    let log = out.read("out/run.log");
    assert!(log.contains("soak `soak-35c`: settled at"), "{log}");
    let manifest: toml::Table = toml::from_str(&out.read("out/manifest.toml")).expect("manifest");
    let chamber_id = manifest["instruments"]["chamber"]
        .as_str()
        .unwrap_or_default();
    assert!(
        chamber_id.starts_with("TILLOWBY COLDHEARTH-60 "),
        "{chamber_id}"
    );
    // The module the console reports on sits in the served chamber: every row was measured at
    // the soak's temperature.
    let exchanges = out.read("out/exchanges.csv");
    let header: Vec<&str> = exchanges
        .lines()
        .next()
        .expect("header")
        .split(',')
        .collect();
    let temp = header.iter().position(|c| *c == "temp_c").expect("temp_c");
    let temps: Vec<f64> = exchanges
        .lines()
        .skip(1)
        .map(|l| {
            l.split(',')
                .nth(temp)
                .expect("cell")
                .parse()
                .expect("number")
        })
        .collect();
    assert_eq!(temps.len(), 3 * 2 * 8);
    assert!(temps.iter().all(|t| (t - 35.0).abs() <= 0.3), "{temps:?}");
    // The driver's safe state: conditioning stopped.
    assert_eq!(ask(&server.address("chamber"), "goal?"), "goal rest");
}

#[test]
fn a_chamber_whose_driver_holds_a_setpoint_is_left_holding_it() {
    let dir = tempfile::tempdir().expect("tempdir");
    let server = serve(dir.path(), 1200.0, 0.3);
    let t = Taucal::new()
        .with_repo(&["recipes", "drivers"])
        .file("r.toml", &recipe(30.0));
    let path = t.dir().join("drivers/tillowby-coldhearth60.toml");
    let text = std::fs::read_to_string(&path)
        .expect("driver")
        .replace("command = \"rest\"", "setpoint_c = 23.0")
        .replace("reply = '^ok$'", "");
    std::fs::write(&path, text).expect("write driver");
    let out = t.args(run_args(&server)).run();
    out.expect_code(0);
    assert_eq!(ask(&server.address("chamber"), "goal?"), "goal 23.0");
}

#[test]
fn a_chamber_that_never_settles_times_out_and_is_left_at_rest() {
    let dir = tempfile::tempdir().expect("tempdir");
    // 0.6 °C per minute: the 10 °C step would take a quarter of an hour.
    let server = serve(dir.path(), 0.6, 0.3);
    let out = Taucal::new()
        .with_repo(&["recipes", "drivers"])
        .file("r.toml", &recipe(1.0))
        .args(run_args(&server))
        .run();
    out.expect_code(3);
    assert!(
        out.stderr
            .contains("soak `soak-35c`: the DUT reached only 25.0"),
        "{}",
        out.stderr
    );
    assert!(out.stderr.contains("of 35 °C in 1 s"), "{}", out.stderr);
    assert_eq!(ask(&server.address("chamber"), "goal?"), "goal rest");
}

#[test]
fn an_interrupted_soak_leaves_the_chamber_at_rest() {
    let dir = tempfile::tempdir().expect("tempdir");
    let server = serve(dir.path(), 0.6, 0.3);
    let t = Taucal::new()
        .with_repo(&["recipes", "drivers"])
        .file("r.toml", &recipe(600.0));
    let mut child = Command::new(env!("CARGO_BIN_EXE_taucal"))
        .args(run_args(&server))
        .current_dir(t.dir())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("start taucal");
    // The soak has begun once the chamber has its setpoint.
    let start = Instant::now();
    while ask(&server.address("chamber"), "goal?") != "goal 35.0" {
        assert!(
            start.elapsed() < Duration::from_secs(20),
            "the soak never began"
        );
        std::thread::sleep(Duration::from_millis(50));
    }
    kill(Pid::from_raw(child.id() as i32), Signal::SIGINT).expect("SIGINT");
    let code = loop {
        if let Some(status) = child.try_wait().expect("wait") {
            break status.code().unwrap_or(-1);
        }
        assert!(
            start.elapsed() < Duration::from_secs(30),
            "taucal did not stop"
        );
        std::thread::sleep(Duration::from_millis(20));
    };
    assert_eq!(code, 3);
    assert_eq!(ask(&server.address("chamber"), "goal?"), "goal rest");
}

/// `taucal check` of the overnight soak on the served bench, with the shipped chamber driver
/// edited from `from` to `to`; returns stderr after checking the exit status is 2.
fn check_with_driver(from: &str, to: &str) -> String {
    let t = Taucal::new().with_repo(&["recipes", "drivers"]);
    let path = t.dir().join("drivers/tillowby-coldhearth60.toml");
    let text = std::fs::read_to_string(&path).expect("driver");
    assert!(text.contains(from), "{from}");
    std::fs::write(&path, text.replacen(from, to, 1)).expect("write driver");
    let out = t
        .args([
            "check",
            "recipes/overnight-soak.toml",
            "--bench",
            "recipes/benches/soak-served.toml",
        ])
        .run();
    out.expect_code(2);
    out.stderr
}

/// 1-based line of the shipped chamber driver that starts with `prefix`.
fn driver_line(prefix: &str) -> usize {
    std::fs::read_to_string(root().join("drivers/tillowby-coldhearth60.toml"))
        .expect("driver")
        .lines()
        .position(|l| l.starts_with(prefix))
        .expect("line")
        + 1
}

#[test]
fn bad_chamber_driver_files_are_refused_at_their_file_line_and_key() {
    let e = check_with_driver("set_setpoint = \"goal {c:.1}\"", "");
    assert!(
        e.contains(&format!(
            "tillowby-coldhearth60.toml line {}",
            driver_line("[command]")
        )),
        "{e}"
    );
    assert!(e.contains("`command` has no `set_setpoint`"), "{e}");
    assert!(e.contains("add `set_setpoint = "), "{e}");
    let e = check_with_driver("'^air (?P<c>", "'^air (?P<c>[");
    assert!(
        e.contains(&format!(
            "tillowby-coldhearth60.toml line {}",
            driver_line("air = '")
        )),
        "{e}"
    );
    assert!(e.contains("`reply.air` is not a regular expression"), "{e}");
    let e = check_with_driver("'^load (?P<c>", "'^load (?P<celsius>");
    assert!(
        e.contains("`reply.product` does not capture the field `c`"),
        "{e}"
    );
}

#[test]
fn a_soak_beyond_the_chamber_drivers_rating_is_refused_by_check() {
    let out = Taucal::new()
        .with_repo(&["recipes", "drivers"])
        .file(
            "r.toml",
            &recipe(30.0).replace("setpoint_c = 35.0", "setpoint_c = 160.0"),
        )
        .args([
            "check",
            "r.toml",
            "--bench",
            "recipes/benches/soak-served.toml",
        ])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr
            .contains("160 °C is outside the chamber driver's setpoint range -40..150 °C"),
        "{}",
        out.stderr
    );
    assert!(out.stderr.contains("r.toml line 8"), "{}", out.stderr);
}

#[test]
fn the_served_soak_bench_checks_with_the_overnight_soak() {
    let out = Taucal::new()
        .args([
            "check",
            &repo("recipes/overnight-soak.toml"),
            "--bench",
            &repo("recipes/benches/soak-served.toml"),
        ])
        .run();
    out.expect_code(0);
    assert!(out.stdout.contains("check passed"), "{}", out.stdout);
}

/// Runs `recipe` on the served soak bench with the DUT's console driver unable to read its
/// temperature and, unless `product_sensor`, the chamber without its product sensor.
fn run_without_dut_temperature(server: &Server, recipe: &str, product_sensor: bool) -> i32 {
    let t = Taucal::new()
        .with_repo(&["recipes", "drivers"])
        .file("r.toml", recipe);
    let edit = |file: &str, lines: &[&str]| {
        let path = t.dir().join("drivers").join(file);
        let text = std::fs::read_to_string(&path).expect("driver");
        let kept: Vec<&str> = text
            .lines()
            .filter(|l| !lines.iter().any(|p| l.starts_with(p)))
            .collect();
        assert!(kept.len() < text.lines().count(), "{file}: {lines:?}");
        std::fs::write(&path, kept.join("\n")).expect("write driver");
    };
    edit("wren6-console.toml", &["temperature ="]);
    if !product_sensor {
        edit("tillowby-coldhearth60.toml", &["product ="]);
    }
    let out = t.args(run_args(server)).run();
    assert!(!out.stderr.contains("panicked"), "{}", out.stderr);
    out.code
}

#[test]
fn without_a_dut_temperature_a_soak_waits_for_the_product_sensor_not_the_air() {
    // The air reaches 35 °C in half a second; the product, lagging it by 5 s, is still some
    // 7 °C short two seconds in (about 10·e^(−1.5/5) by the first-order step response). A soak
    // judged on the air settles within that time; one judged on the product cannot.
    let dir = tempfile::tempdir().expect("tempdir");
    let server = serve(dir.path(), 1200.0, 5.0);
    let short = recipe(2.0);
    assert_eq!(run_without_dut_temperature(&server, &short, true), 3);
    assert_eq!(run_without_dut_temperature(&server, &short, false), 0);
}

#[test]
fn serving_a_chamber_needs_a_bench_with_one() {
    let out = Taucal::new()
        .args([
            "sim",
            "serve",
            "--bench",
            &repo("recipes/benches/sim-demo.toml"),
            "--listen",
            "chamber=tcp:127.0.0.1:0",
        ])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr
            .contains("cannot serve the chamber: the bench has no [sim.chamber] to serve"),
        "{}",
        out.stderr
    );
    let out = Taucal::new()
        .args([
            "sim",
            "serve",
            "--bench",
            &repo("recipes/benches/soak-served.toml"),
            "--listen",
            "chamber=pty",
        ])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr
            .contains("only the dut's console can be served on a pty"),
        "{}",
        out.stderr
    );
}
