//! The live run page over plain HTTP, through the real binary: `taucal watch` following a run in
//! another process (stopped, then resumed), `--watch` refusing an address others could reach,
//! and the page being read-only.

use crate::support::browser::free_port;
use crate::support::{repo, Taucal};
use std::io::{BufRead, BufReader, Read, Write};
use std::net::TcpStream;
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

/// One server-sent event.
#[derive(Debug)]
struct Event {
    name: String,
    data: serde_json::Value,
}

/// Reads a page's event stream (`GET /events`) event by event.
struct Events {
    lines: BufReader<TcpStream>,
}

impl Events {
    fn open(port: u16) -> Events {
        let mut s = connect(port);
        // HTTP/1.0: the stream comes unframed (no chunks) until the server closes it.
        s.write_all(b"GET /events HTTP/1.0\r\nHost: 127.0.0.1\r\n\r\n")
            .expect("request");
        s.set_read_timeout(Some(Duration::from_secs(60))).unwrap();
        let mut lines = BufReader::new(s);
        let mut status = String::new();
        lines.read_line(&mut status).expect("status line");
        assert!(status.contains(" 200 "), "{status}");
        Events { lines }
    }

    /// The next event; chunked transfer framing lines are passed over.
    fn next(&mut self) -> Option<Event> {
        let (mut name, mut data) = (None, None);
        loop {
            let mut line = String::new();
            if self.lines.read_line(&mut line).ok()? == 0 {
                return None;
            }
            let line = line.trim_end();
            if let Some(n) = line.strip_prefix("event: ") {
                name = Some(n.to_string());
            } else if let Some(d) = line.strip_prefix("data: ") {
                data = serde_json::from_str(d).ok();
            } else if line.is_empty() {
                if let (Some(name), Some(data)) = (name.take(), data.take()) {
                    return Some(Event { name, data });
                }
            }
        }
    }

    /// Reads events until one named `name` satisfies `pred`; panics if the stream ends first.
    fn until(
        &mut self,
        name: &str,
        what: &str,
        pred: impl Fn(&serde_json::Value) -> bool,
    ) -> serde_json::Value {
        while let Some(e) = self.next() {
            if e.name == name && pred(&e.data) {
                return e.data;
            }
        }
        panic!("the event stream ended before {what}");
    }
}

fn connect(port: u16) -> TcpStream {
    let deadline = Instant::now() + Duration::from_secs(60);
    loop {
        match TcpStream::connect(("127.0.0.1", port)) {
            Ok(s) => return s,
            Err(e) => {
                assert!(Instant::now() < deadline, "port {port}: {e}");
                std::thread::sleep(Duration::from_millis(50));
            }
        }
    }
}

fn taucal(dir: &std::path::Path, args: &[&str]) -> Child {
    Command::new(env!("CARGO_BIN_EXE_taucal"))
        .args(args)
        .current_dir(dir)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("start taucal")
}

fn interrupt(child: &Child) {
    let pid = nix::unistd::Pid::from_raw(child.id() as i32);
    nix::sys::signal::kill(pid, nix::sys::signal::Signal::SIGINT).expect("SIGINT");
}

/// `taucal watch` follows a run another process records: running, then stopped (SIGINT), then
/// resumed by a third process, then completed — its page's events say each, and the end is the
/// report's sections.
#[test]
fn watch_follows_a_run_through_a_stop_and_a_resume() {
    let work = tempfile::tempdir().expect("temporary directory");
    let recipe = repo("recipes/rx-gain-sweep.toml");
    let mut run = taucal(
        work.path(),
        &["run", &recipe, "--out", "demo", "--realtime", "-q"],
    );
    let manifest = work.path().join("demo/manifest.toml");
    let deadline = Instant::now() + Duration::from_secs(60);
    while !manifest.is_file() {
        assert!(Instant::now() < deadline, "the run made no manifest");
        std::thread::sleep(Duration::from_millis(50));
    }
    let port = free_port();
    let mut watch = taucal(
        work.path(),
        &["watch", "demo", "--listen", &format!("127.0.0.1:{port}")],
    );
    let mut events = Events::open(port);
    let running = events.until("progress", "a running run's exchanges", |p| {
        p["status"] == "running" && p["exchanges"].as_u64().unwrap_or(0) > 0
    });
    assert!(
        running["stage"]
            .as_str()
            .unwrap_or_default()
            .contains("/4 "),
        "{running}"
    );
    interrupt(&run);
    let stopped = run.wait().expect("the run ends");
    assert_eq!(stopped.code(), Some(3), "a stopped run exits 3");
    events.until("progress", "the stop", |p| p["status"] == "stopped");

    let mut resume = taucal(work.path(), &["resume", "demo", "-q"]);
    events.until("progress", "the resumed run", |p| p["status"] == "running");
    let end = events.until("content", "the report", |c| {
        c["ended"] == true && c["html"].as_str().unwrap_or_default().contains("Accepted")
    });
    let html = end["html"].as_str().unwrap_or_default();
    assert!(html.contains("Accepted"), "{html}");
    events.until("progress", "the completed run", |p| {
        p["status"] == "completed"
    });
    assert_eq!(resume.wait().expect("resume ends").code(), Some(0));

    // The page as a whole, as a browser gets it: the report's sections under a completed strip.
    let page = get(port, "GET", "/");
    assert!(page.starts_with("HTTP/1.1 200"), "{page}");
    assert!(page.contains("data-status=\"completed\""));
    assert!(page
        .to_lowercase()
        .contains("content-security-policy: default-src 'none'"));
    interrupt(&watch);
    let status = watch.wait().expect("watch ends");
    assert_eq!(status.code(), Some(0));
    let mut out = String::new();
    watch
        .stdout
        .take()
        .unwrap()
        .read_to_string(&mut out)
        .unwrap();
    assert!(out.contains(&format!("http://127.0.0.1:{port}/")), "{out}");
}

/// A raw request and the whole response (the server closes the connection after it).
fn get(port: u16, method: &str, path: &str) -> String {
    let mut s = connect(port);
    write!(
        s,
        "{method} {path} HTTP/1.1\r\nHost: 127.0.0.1\r\nConnection: close\r\n\r\n"
    )
    .unwrap();
    let mut out = String::new();
    s.set_read_timeout(Some(Duration::from_secs(10))).unwrap();
    let _ = s.read_to_string(&mut out);
    out
}

/// Read-only: nothing but GET is served, and an unknown path is not found.
#[test]
fn the_live_page_serves_nothing_but_reading() {
    let work = tempfile::tempdir().expect("temporary directory");
    let port = free_port();
    let mut run = taucal(
        work.path(),
        &[
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--out",
            "demo",
            "--realtime",
            "-q",
            "--watch",
            &format!("127.0.0.1:{port}"),
        ],
    );
    connect(port);
    for method in ["POST", "PUT", "DELETE"] {
        let r = get(port, method, "/");
        assert!(r.starts_with("HTTP/1.1 405"), "{method}: {r}");
    }
    assert!(get(port, "GET", "/manifest.toml").starts_with("HTTP/1.1 404"));
    interrupt(&run);
    assert_eq!(run.wait().expect("the run ends").code(), Some(3));
}

#[test]
fn watch_refuses_an_address_others_can_reach_before_anything_runs() {
    let out = Taucal::new()
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--out",
            "demo",
            "--watch",
            "0.0.0.0:0",
        ])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("--allow-remote"), "{}", out.stderr);
    assert!(!out.has_dir("demo"), "a run directory was made");

    let out = Taucal::new()
        .args(["watch", "nowhere", "--listen", "127.0.0.1:0"])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("not a run directory"), "{}", out.stderr);
}
