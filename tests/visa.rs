//! Instruments by their standard names: VISA resource strings in bench roles and on the
//! command line, the attenuator served over VXI-11 (VXI-11 rev 1.0) and HiSLIP 2.0 (IVI-6.1)
//! and driven through taucal's clients — recording the in-process run's exchanges — and
//! checked from the other side by PyVISA with its pure-Python backend (pyvisa-py, from PyPI;
//! nobody here wrote it). The servers shrug off malformed records and messages, wrong message
//! ids and clients that vanish mid-message.

use crate::instruments::{in_process_exchanges, served_bench, Server};
use crate::support::python::python_with;
use crate::support::served::run_demo_on;
use crate::support::{repo, root, without_bench_time, Taucal};
use std::io::{Read, Write};
use std::net::TcpStream;
use std::process::Command;
use std::time::Duration;

/// A served run of the demo recipe with the attenuator at `attenuator` (the DUT on its own
/// raw socket): its exchanges, bench time left out.
fn served_run(attenuator: &str, dut: &str) -> String {
    let drivers = root().join("drivers").display().to_string();
    let bench = served_bench("brackwater-tidegate95", attenuator, dut, &drivers);
    let out = run_demo_on(Taucal::new(), &bench, &[]);
    out.expect_code(0);
    without_bench_time(&out.read("run/exchanges.csv"))
}

/// `tcp:HOST:PORT` as the VISA raw-socket resource.
fn socket_resource(tcp: &str) -> String {
    let (host, port) = tcp
        .trim_start_matches("tcp:")
        .rsplit_once(':')
        .expect("host:port");
    format!("TCPIP0::{host}::{port}::SOCKET")
}

#[test]
fn each_transport_records_exactly_the_in_process_exchanges() {
    let raw = Server::start_bench(
        &repo("recipes/benches/sim-demo.toml"),
        &["attenuator=tcp:127.0.0.1:0", "dut=tcp:127.0.0.1:0"],
    );
    let vxi11 = Server::start_with(
        &repo("recipes/benches/sim-demo.toml"),
        &["attenuator=vxi11:127.0.0.1", "dut=tcp:127.0.0.1:0"],
        &["--portmapper-port", "0"],
    );
    let hislip = Server::start_bench(
        &repo("recipes/benches/sim-demo.toml"),
        &["attenuator=hislip:127.0.0.1:0", "dut=tcp:127.0.0.1:0"],
    );
    let hislip_address = hislip.address("attenuator");
    assert!(
        hislip_address.starts_with("TCPIP0::127.0.0.1::hislip0,")
            && hislip_address.ends_with("::INSTR"),
        "HiSLIP is announced as its VISA resource: {hislip_address}"
    );
    let want = in_process_exchanges();
    for (name, attenuator, dut) in [
        (
            "raw socket (VISA SOCKET)",
            socket_resource(&raw.address("attenuator")),
            raw.address("dut"),
        ),
        ("VXI-11", vxi11.address("attenuator"), vxi11.address("dut")),
        ("HiSLIP", hislip_address.clone(), hislip.address("dut")),
    ] {
        let got = served_run(&attenuator, &dut);
        assert!(got.lines().count() > 1000, "{name}");
        assert!(
            got == want,
            "{name} ({attenuator}): served and in-process exchanges differ"
        );
    }
}

/// The Python with PyVISA and pyvisa-py (`None`, said, where they are missing; CI requires them).
fn python_with_pyvisa() -> Option<String> {
    python_with(
        &["pyvisa", "pyvisa_py"],
        "PyVISA against sim serve",
        "pyvisa pyvisa-py",
    )
}

/// Opens `resource` with PyVISA's pure-Python backend and sends the identification, a setting,
/// its read-back and the error query; over VXI-11 and HiSLIP also the status byte read both
/// ways (device_readstb or AsyncStatusQuery, and `*STB?`) and device clear, and over VXI-11 a
/// query under the exclusive lock. The portmapper's port is set where the test server is
/// not on 111 (binding 111 needs privileges): pyvisa-py reads it from `rpc.PMAP_PORT`.
const PYVISA_SCRIPT: &str = r#"
import sys, pyvisa
import pyvisa_py.protocols.rpc as rpc
resource, portmapper = sys.argv[1], int(sys.argv[2])
if portmapper:
    rpc.PMAP_PORT = portmapper
rm = pyvisa.ResourceManager("@py")
inst = rm.open_resource(resource, write_termination="\n", read_termination="\n", timeout=5000)
print(inst.query("*IDN?"))
inst.write("DAMP:SETT 37.5")
print(inst.query("DAMP:SETT?"))
inst.write("DAMP:SETT 500")
print(inst.query("SYST:ERR?"))
print(inst.query("SYST:ERR?"))
if resource.endswith("::INSTR"):
    inst.write("*ESE 16")
    inst.write("DAMP:SETT 500")
    print(inst.read_stb(), inst.query("*STB?"))
    inst.clear()
    print(inst.query("SYST:ERR?"))
if "::inst0::" in resource:
    inst.lock_excl(1000)
    print(inst.query("DAMP:SETT?"))
    inst.unlock()
inst.close()
rm.close()
"#;

#[test]
fn pyvisa_queries_the_served_attenuator_over_each_transport() {
    let Some(python) = python_with_pyvisa() else {
        return;
    };
    let raw = Server::start(&["attenuator=tcp:127.0.0.1:0"]);
    let vxi11 = Server::start_with(
        &repo("recipes/benches/sim-demo.toml"),
        &["attenuator=vxi11:127.0.0.1"],
        &["--portmapper-port", "0"],
    );
    let hislip = Server::start(&["attenuator=hislip:127.0.0.1:0"]);
    let vxi11_address = vxi11.address("attenuator");
    // vxi11:127.0.0.1:PORT/inst0: the VISA string with the portmapper found at PORT.
    let pmap_port = vxi11_address
        .trim_start_matches("vxi11:127.0.0.1:")
        .trim_end_matches("/inst0")
        .to_string();
    for (resource, portmapper) in [
        (socket_resource(&raw.address("attenuator")), "0".to_string()),
        ("TCPIP0::127.0.0.1::inst0::INSTR".to_string(), pmap_port),
        (hislip.address("attenuator"), "0".to_string()),
    ] {
        let out = Command::new(&python)
            .args(["-c", PYVISA_SCRIPT, &resource, &portmapper])
            .output()
            .expect("run python");
        let stdout = String::from_utf8_lossy(&out.stdout);
        assert!(
            out.status.success(),
            "{resource}: {}{}",
            stdout,
            String::from_utf8_lossy(&out.stderr)
        );
        let lines: Vec<&str> = stdout.lines().collect();
        // IEEE 488.2 §10.14: four comma-separated fields; SCPI 1999 §21.8: -222 "Data out of
        // range" for a value past the instrument's limits, then 0 "No error" once drained.
        let instr = resource.ends_with("::INSTR");
        let vxi11 = resource.contains("::inst0::");
        let want_lines = 4 + if instr { 2 } else { 0 } + usize::from(vxi11);
        assert_eq!(lines.len(), want_lines, "{resource}: {stdout}");
        assert_eq!(lines[0].split(',').count(), 4, "{resource}: {stdout}");
        assert!(lines[0].contains("SIM-STEP-ATTENUATOR"), "{stdout}");
        assert_eq!(lines[1], "37.5", "{resource}");
        assert!(lines[2].starts_with("-222,"), "{resource}: {stdout}");
        assert_eq!(lines[3], "0,\"No error\"", "{resource}");
        if instr {
            // IEEE 488.2 §11.2: with *ESE 16, an execution error sets ESB (bit 5, 32); SCPI
            // 1999 §9: a non-empty error queue sets bit 2 (4); from memory. The protocol's
            // status read and `*STB?` agree. Device clear leaves the error queue be (IEEE
            // 488.2 §5.8, from memory): -222 is still there to read.
            assert_eq!(lines[4], "36 36", "{resource}: {stdout}");
            assert!(lines[5].starts_with("-222,"), "{resource}: {stdout}");
        }
        if vxi11 {
            assert_eq!(lines[6], "37.5", "{resource}: under the lock");
        }
    }
}

fn server_alive(server: &mut Server) -> bool {
    server.is_running()
}

#[test]
fn malformed_records_and_messages_and_vanishing_clients_leave_the_servers_serving() {
    let mut vxi11 = Server::start_with(
        &repo("recipes/benches/sim-demo.toml"),
        &["attenuator=vxi11:127.0.0.1"],
        &["--portmapper-port", "0"],
    );
    let mut hislip = Server::start(&["attenuator=hislip:127.0.0.1:0"]);
    let vxi11_address = vxi11.address("attenuator");
    let hislip_address = hislip.address("attenuator");
    let pmap: u16 = vxi11_address
        .trim_start_matches("vxi11:127.0.0.1:")
        .trim_end_matches("/inst0")
        .parse()
        .expect("portmapper port");
    let core = {
        let rt = tokio::runtime::Runtime::new().expect("runtime");
        rt.block_on(taucal::instrument::transport::vxi11::core_port(
            "127.0.0.1",
            pmap,
            Duration::from_secs(5),
        ))
        .expect("core port")
    };
    let hislip_port: u16 = hislip_address
        .rsplit_once(',')
        .and_then(|(_, p)| p.trim_end_matches("::INSTR").parse().ok())
        .expect("hislip port");
    let send = |port: u16, bytes: &[u8]| {
        let mut s = TcpStream::connect(("127.0.0.1", port)).expect("connect");
        s.set_read_timeout(Some(Duration::from_millis(500)))
            .expect("timeout");
        let _ = s.write_all(bytes);
        let mut back = Vec::new();
        let _ = s.read_to_end(&mut back);
        back
    };
    // RFC 5531 §11 records: a reply where a call belongs, a record mark promising 2 GiB, a
    // call of RPC version 3 (answered RPC_MISMATCH), a call cut short, garbage arguments.
    let mut v3 = vec![0x80, 0, 0, 24];
    v3.extend_from_slice(&[
        0, 0, 0, 9, 0, 0, 0, 0, 0, 0, 0, 3, 0, 0x06, 0x07, 0xAF, 0, 0, 0, 1, 0, 0, 0, 10,
    ]);
    let mismatch = send(core, &v3);
    assert_eq!(
        &mismatch[4..16],
        &[0, 0, 0, 9, 0, 0, 0, 1, 0, 0, 0, 1],
        "MSG_DENIED"
    );
    for bad in [
        &b"\x80\0\0\x08\0\0\0\x01\0\0\0\x01"[..],
        &b"\xff\xff\xff\xff"[..],
        &b"\x80\0\0\x40\0\0\0\x01\0\0\0\0"[..],
        &b"\x80\0\0\x04\0\0"[..],
    ] {
        send(core, bad);
        send(pmap, bad);
    }
    // IVI-6.1: a header without `HS`, a payload of 2^63 bytes, a first message that is not
    // Initialize, AsyncInitialize for a session nobody opened, a message cut short.
    let mut huge = b"HS\x06\0\0\0\0\0".to_vec();
    huge.extend_from_slice(&(1u64 << 63).to_be_bytes());
    for (bad, fatal_code) in [
        (b"XS\x00\0\0\0\0\0\0\0\0\0\0\0\0\0".to_vec(), Some(1u8)),
        (huge, Some(1)),
        (b"HS\x07\0\0\0\0\0\0\0\0\0\0\0\0\0".to_vec(), Some(3)),
        (b"HS\x11\0\0\0\x7f\x7f\0\0\0\0\0\0\0\0".to_vec(), Some(3)),
        (b"HS\x00\0\0\x02".to_vec(), None),
    ] {
        let back = send(hislip_port, &bad);
        if let Some(code) = fatal_code {
            assert!(back.len() >= 16, "a FatalError comes back for {bad:?}");
            assert_eq!((back[2], back[3]), (2, code), "FatalError code for {bad:?}");
        }
    }
    // A client that opens a session, sends half a message and vanishes.
    {
        let mut s = TcpStream::connect(("127.0.0.1", hislip_port)).expect("connect");
        s.write_all(b"HS\x00\0\x02\0\0\0\0\0\0\0\0\0\0\x07hislip0")
            .expect("init");
        s.write_all(b"HS\x07\0\xff\xff\xff\0\0\0\0\0\0\0\0\x40*IDN")
            .expect("half");
    }
    // Both still answer well-behaved clients: taucal's, with a wrong-id response in between.
    let rt = tokio::runtime::Runtime::new().expect("runtime");
    rt.block_on(async {
        use taucal::instrument::transport::{Address, Link};
        for address in [vxi11_address.as_str(), hislip_address.as_str()] {
            let mut link = Link::new(
                Address::parse(address).expect("address"),
                "\n",
                Duration::from_secs(5),
            );
            let idn = link.query("*IDN?").await.expect(address);
            assert!(idn.contains("SIM-STEP-ATTENUATOR"), "{address}: {idn}");
        }
    });
    assert!(server_alive(&mut vxi11), "the VXI-11 server lives");
    assert!(server_alive(&mut hislip), "the HiSLIP server lives");
}

#[test]
fn a_hislip_response_carries_the_message_id_it_answers_and_the_client_drops_stale_ones() {
    // IVI-6.1 §3.1.2, synchronized mode: the server answers with the id of the DataEND, so a
    // client that gave up on one query and asked another tells the answers apart.
    let hislip = Server::start(&["attenuator=hislip:127.0.0.1:0"]);
    let port: u16 = hislip
        .address("attenuator")
        .rsplit_once(',')
        .and_then(|(_, p)| p.trim_end_matches("::INSTR").parse().ok())
        .expect("port");
    let mut s = TcpStream::connect(("127.0.0.1", port)).expect("connect");
    s.set_read_timeout(Some(Duration::from_secs(5)))
        .expect("timeout");
    s.write_all(b"HS\x00\0\x02\0tc\0\0\0\0\0\0\0\x07hislip0")
        .expect("init");
    let mut header = [0u8; 16];
    s.read_exact(&mut header).expect("InitializeResponse");
    assert_eq!(
        (header[2], &header[4..6]),
        (1, &[2u8, 0][..]),
        "HiSLIP 2.0 answered"
    );
    // A message id no client would start with: the server echoes it all the same.
    let mut query = b"HS\x07\0\x12\x34\x56\x78\0\0\0\0\0\0\0\x06".to_vec();
    query.extend_from_slice(b"*IDN?\n");
    s.write_all(&query).expect("query");
    s.read_exact(&mut header).expect("response");
    assert_eq!(header[2], 7, "DataEND");
    assert_eq!(&header[4..8], &[0x12, 0x34, 0x56, 0x78]);
}

#[test]
fn vxi11_locks_keep_other_links_out_and_device_clear_drops_a_pending_response() {
    let server = Server::start_with(
        &repo("recipes/benches/sim-demo.toml"),
        &["attenuator=vxi11:127.0.0.1"],
        &["--portmapper-port", "0"],
    );
    let address = server.address("attenuator");
    let pmap: u16 = address
        .trim_start_matches("vxi11:127.0.0.1:")
        .trim_end_matches("/inst0")
        .parse()
        .expect("portmapper port");
    let rt = tokio::runtime::Runtime::new().expect("runtime");
    rt.block_on(async {
        use taucal::instrument::transport::vxi11::Vxi11Client;
        use taucal::instrument::transport::MessageSession;
        let t = Duration::from_millis(400);
        let mut a = Vxi11Client::connect("127.0.0.1", pmap, "inst0", t)
            .await
            .expect("a");
        let mut b = Vxi11Client::connect("127.0.0.1", pmap, "inst0", t)
            .await
            .expect("b");
        a.lock(Duration::ZERO).await.expect("a locks");
        // VXI-11 §B.5.4: error 11, device locked by another link.
        let refused = b.write_message(b"*IDN?\n").await.expect_err("locked out");
        assert!(refused.to_string().contains("error 11"), "{refused}");
        let no_lock = b.unlock().await.expect_err("b holds none");
        assert!(no_lock.to_string().contains("error 12"), "{no_lock}");
        a.unlock().await.expect("a unlocks");
        b.write_message(b"*IDN?\n").await.expect("b writes");
        b.clear().await.expect("device_clear");
        // The response was dropped: the read waits io_timeout and reports error 15.
        let e = b.read_message(t).await.expect_err("nothing to read");
        assert_eq!(e.kind(), std::io::ErrorKind::TimedOut, "{e}");
        b.write_message(b"DAMP:SETT?\n").await.expect("write");
        assert_eq!(b.read_message(t).await.expect("read"), b"95.0\n".to_vec());
        let bad = Vxi11Client::connect("127.0.0.1", pmap, "gpib0,7", t)
            .await
            .err()
            .expect("no such device");
        assert!(bad.to_string().contains("error 21"), "{bad}");
    });
}

#[test]
fn hislip_device_clear_locks_and_status_follow_the_specification() {
    let server = Server::start(&["attenuator=hislip:127.0.0.1:0"]);
    let address = server.address("attenuator");
    let port: u16 = address
        .rsplit_once(',')
        .and_then(|(_, p)| p.trim_end_matches("::INSTR").parse().ok())
        .expect("port");
    let rt = tokio::runtime::Runtime::new().expect("runtime");
    rt.block_on(async {
        use taucal::instrument::transport::hislip::HislipClient;
        use taucal::instrument::transport::MessageSession;
        let t = Duration::from_secs(2);
        let mut a = HislipClient::connect("127.0.0.1", port, "hislip0", t)
            .await
            .expect("a");
        let mut b = HislipClient::connect("127.0.0.1", port, "hislip0", t)
            .await
            .expect("b");
        assert_ne!(a.session_id(), b.session_id());
        assert_eq!(a.server_version(), 0x0200);
        assert!(a.lock(Duration::ZERO).await.expect("lock"));
        assert!(!b
            .lock(Duration::from_millis(50))
            .await
            .expect("b waits, then fails"));
        // IVI-6.1 §6.5 (from memory): the exclusive lock keeps other sessions from the device.
        // b's setting waits while a holds it, and lands once a lets go.
        b.write_message(b"DAMP:SETT 12.5\n")
            .await
            .expect("b writes");
        a.write_message(b"DAMP:SETT?\n").await.expect("a asks");
        assert_eq!(
            a.read_message(t).await.expect("a reads"),
            b"95.0\n".to_vec()
        );
        assert!(a.unlock().await.expect("unlock"));
        b.write_message(b"DAMP:SETT?\n").await.expect("b asks");
        assert_eq!(
            b.read_message(t).await.expect("b reads"),
            b"12.5\n".to_vec()
        );
        b.write_message(b"DAMP:SETT 95\n")
            .await
            .expect("b restores");
        b.write_message(b"DAMP:SETT?\n")
            .await
            .expect("b asks again");
        assert_eq!(
            b.read_message(t).await.expect("b reads"),
            b"95.0\n".to_vec()
        );
        assert!(!a.unlock().await.expect("nothing held"));
        a.write_message(b"*IDN?\n").await.expect("write");
        a.clear().await.expect("device clear");
        a.write_message(b"DAMP:SETT?\n")
            .await
            .expect("write after clear");
        // The *IDN? answer, if it came, bears an id from before the clear; only this one counts.
        assert_eq!(a.read_message(t).await.expect("read"), b"95.0\n".to_vec());
        // The protocol's status read and `*STB?` report the same byte (IEEE 488.2 §11.2, from
        // memory); as the PyVISA check compares them.
        let stb = a.status().await.expect("status byte");
        a.write_message(b"*STB?\n").await.expect("write *STB?");
        let answer = a.read_message(t).await.expect("read *STB?");
        let text = String::from_utf8(answer).expect("ascii");
        assert_eq!(text.trim().parse::<u8>().expect("a number"), stb, "{text}");
    });
}

#[test]
fn a_malformed_resource_string_is_refused_before_anything_runs_with_a_caret() {
    let out = Taucal::new()
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--bench",
            &repo("recipes/benches/sim-demo.toml"),
            "--connect",
            "attenuator=TCPIP0::192.0.2.10::hislipX::INSTR",
            "--out",
            "run",
        ])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr.contains("a HiSLIP device is hislipN"),
        "{}",
        out.stderr
    );
    assert!(
        out.stderr
            .contains("    TCPIP0::192.0.2.10::hislipX::INSTR\n                        ^^^^^^^"),
        "{}",
        out.stderr
    );
    assert!(!out.has_dir("run"), "nothing ran");
    // The same in a bench file's role: refused as the bench loads, at the role's address.
    let drivers = root().join("drivers").display().to_string();
    let bench = served_bench(
        "brackwater-tidegate95",
        "TCPIP0::127.0.0.1::50x25::SOCKET",
        "tcp:127.0.0.1:5026",
        &drivers,
    );
    let out = Taucal::new()
        .file("bad.toml", &bench)
        .args([
            "check",
            &repo("recipes/rx-gain-sweep.toml"),
            "--bench",
            "bad.toml",
        ])
        .run();
    out.expect_code(2);
    for said in [
        "bad.toml line ",
        "`roles.attenuator.address` is not an address: the port is not a number from 1 to 65535",
        "    TCPIP0::127.0.0.1::50x25::SOCKET\n                       ^^^^^",
    ] {
        assert!(out.stderr.contains(said), "{said}: {}", out.stderr);
    }
    let remote = Taucal::new()
        .args([
            "sim",
            "serve",
            "--listen",
            "attenuator=TCPIP0::192.0.2.10::hislip0::INSTR",
        ])
        .run();
    remote.expect_code(2);
    assert!(
        remote.stderr.contains("not a loopback address"),
        "{}",
        remote.stderr
    );
    let dut = Taucal::new()
        .args(["sim", "serve", "--listen", "dut=hislip:127.0.0.1:0"])
        .run();
    dut.expect_code(2);
    assert!(dut.stderr.contains("speaks lines"), "{}", dut.stderr);
}
