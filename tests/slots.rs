//! DUT slots through the real binary: a four-slot station recovers each slot's own unit,
//! each slot's directory is a standard run (`fit` gives its table again), one slot's failure
//! leaves the others complete, the store holds one run per slot, and a stopped station
//! resumes its unfinished slots, and a station served whole (`sim serve`, each slot's console
//! by its role name) runs over TCP with one connection to its attenuator. The station here is
//! not the shipped one: its units differ.

use crate::support::bench::{shipped_with, TestBench, SIM_ATTENUATOR, SIM_RANGING};
use crate::support::{assert_tables_agree, csv_numbers, repo, Taucal};

/// Four units, K per state far enough apart between slots (≥ 100 ps) that a slot fitted
/// with another's exchanges could not pass as itself.
const UNITS: [(&str, f64, [f64; 3]); 4] = [
    ("QX-0001", 1300.0, [800.0, 1000.0, 1300.0]),
    ("QX-0002", 1450.0, [780.0, 1090.0, 1420.0]),
    ("QX-0003", 1600.0, [820.0, 1060.0, 1350.0]),
    ("QX-0004", 1700.0, [850.0, 1120.0, 1450.0]),
];

/// A station of four slots on the base test bench (units `u1`…`u4` behind channels 1–4 of
/// attenuator `att4`, 0.5 dB steps, K of the reference 3100 ps, seed 11), each slot's unit from
/// [`UNITS`]; `faults_in_c` is a `[sim.slot.faults]` body for slot c's unit (empty for none).
fn station(faults_in_c: &str) -> TestBench {
    let mut bench = TestBench::base()
        .name("test station")
        .roles(&[
            ("att4", SIM_ATTENUATOR),
            ("u1", SIM_RANGING),
            ("u2", SIM_RANGING),
            ("u3", SIM_RANGING),
            ("u4", SIM_RANGING),
            ("reference", SIM_RANGING),
        ])
        .attenuator([0.0, 90.0], 0.5)
        .reference_k("delay_ps = 3100.0")
        .seed(11)
        .sim_dut(
            "tx_delay_ps = 1500.0\nrx_delay_ps = [800.0, 1000.0, 1300.0]\n\
             gain_thresholds_dbm = [-28.0, -52.0]",
        )
        .sim_reference("delay_ps = 3100.0");
    for (i, name) in ["a", "b", "c", "d"].iter().enumerate() {
        let channel = i as u32 + 1;
        bench = bench.slot(name, &format!("u{channel}"), "att4", channel);
    }
    for (i, (serial, tx, rx)) in UNITS.iter().enumerate() {
        let mut unit = format!(
            "serial = \"{serial}\"\ntx_delay_ps = {tx:.1}\nrx_delay_ps = [{:.1}, {:.1}, {:.1}]\n\
             gain_thresholds_dbm = [-28.0, -52.0]\nclock_ppm = {}.0\njitter_ps = 280.0\noutlier_rate = 0.02",
            rx[0],
            rx[1],
            rx[2],
            7 * i as i32 - 9
        );
        if i == 2 && !faults_in_c.is_empty() {
            unit += &format!("\n[sim.slot.faults]\n{faults_in_c}");
        }
        bench = bench.sim_slot(&unit);
    }
    bench
}

/// Three points, one per gain state (received −16, −39 and −64 dBm).
const RECIPE: &str = r#"[recipe]
name = "slot-check"
description = "one point per gain state"
[accept]
min_gain_states = 3
[faults]
retries = 1
backoff_ms = 10.0
[[stage]]
name = "cal"
kind = "sweep"
center_mhz = 5240
bw_mhz = 40
atten_db = [23.0, 46.0, 71.0]
bursts = 12
frames = 16
settle_ms = 10.0
"#;

fn run_station(faults_in_c: &str, extra: &[&str]) -> crate::support::Outcome {
    let mut args = vec!["run", "r.toml", "--bench", "b.toml", "--out", "st", "-q"];
    args.extend(extra);
    Taucal::new()
        .file("b.toml", &station(faults_in_c).text())
        .file("r.toml", RECIPE)
        .args(args)
        .run()
}

fn table(text: &str) -> toml::Table {
    toml::from_str(text).expect("toml")
}

/// The faulty slot c ended early while a, b and d completed, as the top manifest lists them.
fn assert_only_slot_c_ended_early(top: &toml::Table) {
    let statuses: Vec<&str> = top["slot"]
        .as_array()
        .expect("slots")
        .iter()
        .map(|s| s["status"].as_str().expect("status"))
        .collect();
    assert_eq!(statuses[0], "completed");
    assert_eq!(statuses[1], "completed");
    assert_ne!(statuses[2], "completed");
    assert_eq!(statuses[3], "completed");
}

/// Each slot of the station run in `st/` is its own unit: its serial, and every cell's K within
/// its interval of the unit's truth and nearer it than any other slot's.
fn assert_each_slot_recovers_its_unit(out: &crate::support::Outcome, slots: &[toml::Value]) {
    for (i, name) in ["a", "b", "c", "d"].iter().enumerate() {
        let (serial, tx, rx) = UNITS[i];
        let m = table(&out.read(&format!("st/slot-{name}/manifest.toml")));
        assert_eq!(m["status"].as_str(), Some("completed"));
        assert_eq!(m["unit_serial"].as_str(), Some(serial));
        assert_eq!(m["slot"].as_str(), Some(*name));
        assert_eq!(slots[i]["unit_serial"].as_str(), Some(serial));
        let rows = csv_numbers(&out.read(&format!("st/slot-{name}/caltable.csv")));
        assert_eq!(rows.len(), 3, "slot {name}: three cells");
        for row in rows {
            // delay_ps is column 3, ci95_ps column 4; the truth is TX + RX of the slot's unit.
            let (gain, k, ci) = (row[2] as usize, row[3], row[4]);
            let truth = tx + rx[gain];
            // A 95 % interval misses its truth one time in twenty, so among twelve cells one
            // may (this seed's slot a, gain 2, does, by 1.4 half-widths; other seeds put it
            // within 30 ps). 1.5 half-widths is a miss with p ≈ 0.007 per cell (Student t,
            // ~11 dof; common practice): a slot de-embedded wrongly, or with another slot's
            // exchanges, misses by far more.
            assert!(
                (k - truth).abs() <= 1.5 * ci,
                "slot {name} gain {gain}: {k:.1} ± {ci:.1} ps misses its truth {truth}"
            );
            for (j, other) in UNITS.iter().enumerate().filter(|(j, _)| *j != i) {
                let theirs = other.1 + other.2[gain];
                assert!(
                    (k - truth).abs() < (k - theirs).abs(),
                    "slot {name} gain {gain} looks like slot {j}'s unit"
                );
            }
        }
    }
}

#[test]
fn every_slot_recovers_its_own_unit_within_its_interval() {
    let out = run_station("", &["--store", "none"]);
    out.expect_code(0);
    let top = table(&out.read("st/manifest.toml"));
    assert_eq!(top["kind"].as_str(), Some("station"));
    assert_eq!(top["status"].as_str(), Some("completed"));
    let slots = top["slot"].as_array().expect("slots");
    assert_eq!(slots.len(), 4);
    assert_each_slot_recovers_its_unit(&out, slots);
    // The station's bench time is its longest slot's.
    let longest = slots
        .iter()
        .map(|s| s["bench_time_s"].as_float().expect("time"))
        .fold(0.0, f64::max);
    assert_eq!(top["bench_time_s"].as_float(), Some(longest));
    // The station's own run.log says how each slot ended.
    let log = out.read("st/run.log");
    for name in ["a", "b", "c", "d"] {
        assert!(log.contains(&format!("slot {name}: completed")), "{log}");
    }
    assert!(log.contains("station: 4 of 4 units completed"), "{log}");
}

#[test]
fn a_slot_directory_is_a_standard_run_that_fit_and_report_read() {
    let out = run_station("", &["--store", "none"]);
    out.expect_code(0);
    let refit = Taucal::in_dir(out.dir)
        .args(["fit", "st/slot-b/exchanges.csv", "--out", "refit", "-q"])
        .run();
    refit.expect_code(0);
    assert_tables_agree(
        &refit.read("refit/caltable.csv"),
        &refit.read("st/slot-b/caltable.csv"),
    );
    let report = Taucal::in_dir(refit.dir)
        .args(["report", "st/slot-b", "-q"])
        .run();
    report.expect_code(0);
    // The station's own directory is not a run: the message points at its slots' runs.
    let top = Taucal::in_dir(report.dir).args(["report", "st"]).run();
    top.expect_code(2);
    assert!(top.stderr.contains("slot-a"), "{}", top.stderr);
    // Imported whole, the station is its slots' runs, each under its unit's serial.
    let imported = Taucal::in_dir(top.dir)
        .args(["store", "import", "st", "--store", "sqlite:later.sqlite"])
        .run();
    imported.expect_code(0);
    assert!(
        imported.stdout.contains("imported 4 runs"),
        "{}",
        imported.stdout
    );
    let db = rusqlite::Connection::open(imported.path("later.sqlite")).expect("open");
    let serials: Vec<String> = db
        .prepare("SELECT unit_serial FROM runs ORDER BY unit_serial")
        .expect("prepare")
        .query_map([], |r| r.get(0))
        .expect("query")
        .map(|r| r.expect("row"))
        .collect();
    assert_eq!(serials, ["QX-0001", "QX-0002", "QX-0003", "QX-0004"]);
}

#[test]
fn a_failing_slot_stops_alone_and_its_resume_goes_on_with_it() {
    // Half of slot c's commands time out and the recipe allows one retry, so slot c soon
    // stops; the other three complete.
    let out = run_station("reply_timeout_rate = 0.5", &["--store", "sqlite:st.sqlite"]);
    out.expect_code(3);
    let top = table(&out.read("st/manifest.toml"));
    assert_only_slot_c_ended_early(&top);
    assert_ne!(top["status"].as_str(), Some("completed"));
    // Every slot ended with its attenuator channel at the safe state.
    for name in ["a", "b", "c", "d"] {
        let log = out.read(&format!("st/slot-{name}/run.log"));
        assert!(log.contains("safe state"), "slot {name}: {log}");
    }
    // One run per slot in the store, each under its unit's serial.
    let db = rusqlite::Connection::open(out.path("st.sqlite")).expect("open");
    let mut q = db
        .prepare("SELECT unit_serial, status FROM runs ORDER BY unit_serial")
        .expect("prepare");
    let runs: Vec<(String, String)> = q
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))
        .expect("query")
        .map(|r| r.expect("row"))
        .collect();
    let serials: Vec<&str> = runs.iter().map(|(s, _)| s.as_str()).collect();
    assert_eq!(serials, ["QX-0001", "QX-0002", "QX-0003", "QX-0004"]);
    drop(q);
    drop(db);
    // Resuming the station continues slot c alone; the completed slots are left as they are.
    let before_a = out.read("st/slot-a/exchanges.csv");
    let resumed = Taucal::in_dir(out.dir)
        .args(["resume", "st", "--store", "sqlite:st.sqlite", "-q"])
        .run();
    let text = resumed.read("st/slot-c/manifest.toml");
    assert_eq!(table(&text)["resumes"].as_integer(), Some(1), "{text}");
    assert_eq!(resumed.read("st/slot-a/exchanges.csv"), before_a);
    assert!(
        resumed.stdout.contains("slot c:") && !resumed.stdout.contains("slot a:"),
        "{}",
        resumed.stdout
    );
}

/// The shipped station, its station bench path.
const STATION: &str = "recipes/benches/sim-station4.toml";

/// The shipped station with its attenuator role at `address`, driven by `driver` from the
/// shipped driver files.
fn station_with_attenuator(driver: &str, address: &str) -> String {
    shipped_with(
        STATION,
        &[
            (
                "atten = { driver = \"sim-attenuator\", address = \"sim:\" }",
                &format!("atten = {{ driver = \"{driver}\", address = \"{address}\" }}"),
            ),
            (
                "[bench]\n",
                &format!(
                    "[bench]\ndrivers_dir = {}\n",
                    toml::Value::String(repo("drivers"))
                ),
            ),
        ],
    )
}

#[test]
fn the_served_four_channel_attenuator_sets_each_slots_channel_alone_with_the_shipped_driver() {
    use std::sync::Arc;
    use taucal::clock::{BenchClock, ClockMode};
    let server =
        crate::instruments::Server::start_bench(&repo(STATION), &["attenuator=tcp:127.0.0.1:0"]);
    let text = station_with_attenuator("brindlecombe-fourfold90", &server.address("attenuator"));
    let bench =
        taucal::bench::Bench::parse(taucal::diagnostic::SourceFile::new("station.toml", text))
            .expect("the station with its driven attenuator");
    let attenuators: Vec<_> = (0..4)
        .map(|i| {
            let slot = bench.for_slot(i).expect("slot");
            let clock = Arc::new(BenchClock::new(ClockMode::Wall));
            taucal::wiring::connect(&slot, clock, 1)
                .expect("connect")
                .attenuator
        })
        .collect();
    // Each slot sets its own channel; each channel then reads back its own setting.
    for (i, a) in attenuators.iter().enumerate() {
        a.set_atten_db(20.0 + 7.25 * i as f64).expect("set");
    }
    for (i, a) in attenuators.iter().enumerate() {
        assert_eq!(a.atten_db().expect("read"), 20.0 + 7.25 * i as f64);
    }
    // Each slot keeps the bench's receiver protection: 14 dB would put -7 dBm into a DUT whose
    // max_input_dbm is -10 dBm, and the slot's bench refuses it before anything is sent.
    let bench_refusal = bench.for_slot(2).expect("slot").refuse_atten(14.0);
    assert!(bench_refusal.is_some(), "14 dB must be refused");
    // The safe state puts every channel at maximum attenuation.
    for a in &attenuators {
        a.safe_state().expect("safe");
        assert_eq!(a.atten_db().expect("read"), 95.0);
    }
}

/// `taucal check` of the shipped factory recipe on the station `bench`, refused (exit 2).
fn refused_station(bench: &str) -> crate::support::Outcome {
    let out = Taucal::new()
        .file("b.toml", bench)
        .args([
            "check",
            &repo("recipes/factory-quick.toml"),
            "--bench",
            "b.toml",
        ])
        .run();
    out.expect_code(2);
    out
}

#[test]
fn slot_mistakes_are_refused_with_the_key_and_what_would_be_right() {
    for (from, to, key) in [
        ("channel = 4", "channel = 3", "slot.3.channel"),
        // One channel feeding two slots' DUTs.
        ("channel = 2", "channel = 1", "slot.1.channel"),
        ("name = \"c\"", "name = \"a\"", "slot.2.name"),
        ("name = \"d\"", "name = \"d/..\"", "slot.3.name"),
        // dut-d, named by no slot now, is a role of no use: refused before the slot's typo.
        ("dut = \"dut-d\"", "dut = \"dut-x\"", "roles.dut-d"),
        (
            "serial = \"WR6-24-0104\"",
            "serial = \"WR6-24-0104\"\nfaults = { reply_timeout_rate = 0.9 }",
            "sim.slot.3.faults.reply_timeout_rate",
        ),
    ] {
        let out = refused_station(&shipped_with(STATION, &[(from, to)]));
        assert!(out.stderr.contains(key), "{key}: {}", out.stderr);
        assert!(out.stderr.contains("what would be right"), "{}", out.stderr);
    }
    // Four channels, not five; and the driver names its channel.
    let five = station_with_attenuator("brindlecombe-fourfold90", "tcp:127.0.0.1:9").replacen(
        "channel = 4",
        "channel = 5",
        1,
    );
    let out = refused_station(&five);
    assert!(
        out.stderr.contains("slot.3.channel") && out.stderr.contains("has 4"),
        "{}",
        out.stderr
    );
}

/// What the served attenuator reads on each of its four channels, asked on a connection of its
/// own once the run's is closed (the server takes one client at a time).
fn served_channels(address: &str) -> Vec<f64> {
    use std::io::{BufRead, BufReader, Read, Write};
    let socket: std::net::SocketAddr = address
        .trim_start_matches("tcp:")
        .parse()
        .expect("socket address");
    let timeout = std::time::Duration::from_secs(2);
    for _ in 0..50 {
        let stream = std::net::TcpStream::connect(socket).expect("connect");
        stream.set_read_timeout(Some(timeout)).expect("timeout");
        let mut reader = BufReader::new(stream.try_clone().expect("clone"));
        let mut writer = stream;
        let mut readings = Vec::new();
        for channel in 1..=4 {
            let mut line = String::new();
            let asked = writeln!(writer, "PATH:ATTenuation? {channel}").is_ok();
            if !asked || reader.read_line(&mut line).unwrap_or(0) == 0 {
                break;
            }
            readings.push(line.trim().parse::<f64>().expect("a setting"));
        }
        if readings.len() == 4 {
            // While this client is connected a second one is turned away: the server did take
            // one connection at a time.
            let mut second = std::net::TcpStream::connect(socket).expect("connect");
            second.set_read_timeout(Some(timeout)).expect("timeout");
            let _ = writeln!(second, "PATH:ATTenuation? 1");
            let mut byte = [0u8; 1];
            assert_eq!(
                second.read(&mut byte).unwrap_or(0),
                0,
                "a second client served"
            );
            return readings;
        }
        // The run's connection may not be closed on the server's side yet.
        std::thread::sleep(std::time::Duration::from_millis(100));
    }
    panic!("the served attenuator never took a second client after the run");
}

/// The test station served whole (`faults_in_c` for slot c's unit, as in [`station`]), its
/// attenuator taking a single connection, and run through the served instruments into `st/`.
/// The console timeout is short, so that a slot whose queries fall silent stops soon.
fn served_station_run(faults_in_c: &str) -> (crate::instruments::Server, crate::support::Outcome) {
    // The test station (range to the driver's 95 dB safe state), served whole: one attenuator
    // that takes a single connection, and each slot's DUT console under its role name.
    let served = station(faults_in_c).attenuator([0.0, 95.0], 0.5);
    let dir = tempfile::tempdir().expect("temp dir");
    let served_path = served.write_to(dir.path(), "served.toml");
    let listen = ["att4", "u1", "u2", "u3", "u4"].map(|r| format!("{r}=tcp:127.0.0.1:0"));
    let listen: Vec<&str> = listen.iter().map(String::as_str).collect();
    let server = crate::instruments::Server::start_with(
        &served_path.display().to_string(),
        &listen,
        &["--max-clients", "1"],
    );
    // The same station driven: its roles at the served addresses, its truth left out.
    let mut driven = served.shipped_drivers().role(
        "att4",
        &format!(
            "{{ driver = \"brindlecombe-fourfold90\", address = \"{}\" }}",
            server.address("att4")
        ),
    );
    for unit in ["u1", "u2", "u3", "u4"] {
        driven = driven.role(
            unit,
            &format!(
                "{{ driver = \"wren6-console\", address = \"{}\", timeout_ms = 300.0 }}",
                server.address(unit)
            ),
        );
    }
    let driven = driven.text_without_sim();
    assert_eq!(
        driven.matches("\"sim:\"").count(),
        1,
        "the reference alone: {driven}"
    );
    let out = Taucal::new()
        .file("b.toml", &driven)
        .file("r.toml", RECIPE)
        .args([
            "run", "r.toml", "--bench", "b.toml", "--out", "st", "--store", "none", "-q",
        ])
        .run();
    (server, out)
}

#[test]
fn a_served_station_shares_one_connection_to_its_attenuator_and_each_slot_its_own_console() {
    let (server, out) = served_station_run("");
    // Slots that each opened a connection of their own would find it closed at once, and stop.
    out.expect_code(0);
    let top = table(&out.read("st/manifest.toml"));
    assert_eq!(top["status"].as_str(), Some("completed"));
    assert_each_slot_recovers_its_unit(&out, top["slot"].as_array().expect("slots"));
    // Every channel ends at the driver's safe state (95 dB), each slot's and the station's.
    assert_eq!(served_channels(&server.address("att4")), [95.0; 4]);
    let log = out.read("st/run.log");
    assert!(log.contains("every channel in its safe state"), "{log}");
}

#[test]
fn a_served_slot_that_fails_stops_alone_and_every_channel_still_ends_safe() {
    // Half of slot c's console queries fall silent (one retry allowed): slot c stops, and the
    // attenuator it shares with the others, on the same connection, goes on serving them.
    let (server, out) = served_station_run("reply_timeout_rate = 0.5");
    out.expect_code(3);
    let top = table(&out.read("st/manifest.toml"));
    assert_only_slot_c_ended_early(&top);
    assert_eq!(served_channels(&server.address("att4")), [95.0; 4]);
}
