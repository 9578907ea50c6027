//! `cargo bench --bench watch`: many viewers of the live page do not slow the run.
//!
//! The claim, on a run paced as a real bench paces it: the factory recipe
//! (`recipes/factory-quick.toml`) on the simulated bench at wall-clock pace (`--realtime`),
//! served with `--watch` to no viewer and to 50 viewers holding the page's event stream open
//! and reading all it sends, side by side (the two kinds alternate, so drift in the machine's
//! load falls on both). The figure is the ratio of the median wall times (the manifest's
//! `wall_time_s`), 50 viewers to none; target ≤ 1.05.
//!
//! The stress figures, reported beside it: the demo recipe (`recipes/rx-gain-sweep.toml`) in
//! virtual time, as fast as the machine goes, without `--watch`, with no viewer and with 50,
//! with the taucal process's CPU time (user + system, all threads) beside each wall time: there
//! a whole run lasts about a tenth of a second, so 50 viewers' connections are a visible part
//! of it, and the CPU time says what serving costs.
//!
//! Each viewer must receive the run's end (the report's sections), or the bench fails: a
//! viewer that was never served would make the ratio meaningless.
//!
//! `--smoke` (CI) runs 6 rounds of each; the default runs 20.

use std::io::{Read, Write};
use std::net::{TcpListener, TcpStream};
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

type Error = Box<dyn std::error::Error>;

const VIEWERS: usize = 50;
const TARGET_RATIO: f64 = 1.05;

fn main() -> Result<(), Error> {
    let smoke = std::env::args().any(|a| a == "--smoke");
    let rounds = if smoke { 6 } else { 20 };
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let work = tempfile::tempdir()?;
    let wall = |v: &[Ran]| median(v.iter().map(|r| r.wall_s).collect());
    let cpu = |v: &[Ran]| median(v.iter().map(|r| r.cpu_s).collect());
    let line = |kind: &str, runs: &[Ran]| {
        println!(
            "  {kind:<20} median wall time {:.3} s, median CPU time {:.3} s",
            wall(runs),
            cpu(runs)
        );
    };

    let demo = root.join("recipes/rx-gain-sweep.toml");
    println!(
        "stress: {} in virtual time, {rounds} rounds",
        demo.display()
    );
    let (mut plain, mut alone, mut watched) = (Vec::new(), Vec::new(), Vec::new());
    for round in 0..rounds {
        let dir = |kind: &str| work.path().join(format!("virtual-{kind}-{round}"));
        plain.push(run(&demo, &dir("plain"), &[], None)?);
        alone.push(run(&demo, &dir("alone"), &[], Some(0))?);
        watched.push(run(&demo, &dir("watched"), &[], Some(VIEWERS))?);
    }
    line("without --watch:", &plain);
    line("--watch, no viewer:", &alone);
    line(&format!("--watch, {VIEWERS} viewers:"), &watched);
    println!(
        "  ratio of {VIEWERS} viewers to none: {:.3}; {:.2} MB sent to each viewer on average",
        wall(&watched) / wall(&alone),
        sent_mb(&watched)
    );

    let factory = root.join("recipes/factory-quick.toml");
    println!(
        "claim: {} at wall-clock pace (--realtime), {rounds} rounds",
        factory.display()
    );
    let (mut alone, mut watched) = (Vec::new(), Vec::new());
    for round in 0..rounds {
        let dir = |kind: &str| work.path().join(format!("paced-{kind}-{round}"));
        alone.push(run(&factory, &dir("alone"), &["--realtime"], Some(0))?);
        watched.push(run(
            &factory,
            &dir("watched"),
            &["--realtime"],
            Some(VIEWERS),
        )?);
    }
    line("--watch, no viewer:", &alone);
    line(&format!("--watch, {VIEWERS} viewers:"), &watched);
    let ratio = wall(&watched) / wall(&alone);
    println!(
        "  ratio of {VIEWERS} viewers to none: {ratio:.3} (target ≤ {TARGET_RATIO}); {:.2} MB sent to each viewer on average",
        sent_mb(&watched)
    );
    if ratio > TARGET_RATIO {
        return Err(format!("ratio {ratio:.3} is above the target {TARGET_RATIO}").into());
    }
    Ok(())
}

/// What each viewer received on average, MB.
fn sent_mb(runs: &[Ran]) -> f64 {
    runs.iter().map(|r| r.bytes).sum::<u64>() as f64 / (runs.len() * VIEWERS) as f64 / 1e6
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        (v[n / 2 - 1] + v[n / 2]) / 2.0
    }
}

/// One run's figures.
struct Ran {
    /// The run's wall time, its manifest's.
    wall_s: f64,
    /// The taucal process's CPU time, user and system, all threads.
    cpu_s: f64,
    /// What its viewers received, in all.
    bytes: u64,
}

/// CPU time of this process's ended and waited-for children so far (the bench runs one at a
/// time, so the difference across a wait is that child's).
fn children_cpu_s() -> Result<f64, Error> {
    use nix::sys::resource::{getrusage, UsageWho};
    let u = getrusage(UsageWho::RUSAGE_CHILDREN)?;
    let s = |t: nix::sys::time::TimeVal| t.tv_sec() as f64 + t.tv_usec() as f64 * 1e-6;
    Ok(s(u.user_time()) + s(u.system_time()))
}

/// Runs the recipe into `out` with `extra` arguments, served to `viewers` viewers when given.
fn run(recipe: &Path, out: &Path, extra: &[&str], viewers: Option<usize>) -> Result<Ran, Error> {
    let name = out.display();
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_taucal"));
    cmd.args(["run", "-q", "--store", "none"])
        .arg(recipe)
        .args(extra)
        .arg("--out")
        .arg(out)
        .stdout(Stdio::null())
        .stderr(Stdio::null());
    let port = free_port()?;
    if viewers.is_some() {
        cmd.args(["--watch", &format!("127.0.0.1:{port}")]);
    }
    let cpu_before = children_cpu_s()?;
    let mut child = cmd.spawn()?;
    let readers: Vec<_> = (0..viewers.unwrap_or(0))
        .map(|_| std::thread::spawn(move || view(port)))
        .collect();
    let status = child.wait()?;
    let cpu_s = children_cpu_s()? - cpu_before;
    if !matches!(status.code(), Some(0 | 1)) {
        return Err(format!("{name}: taucal ended {status}").into());
    }
    let mut bytes = 0;
    for r in readers {
        let seen = r.join().map_err(|_| "a viewer panicked")??;
        if !seen.ended {
            return Err(format!("{name}: a viewer never received the run's end").into());
        }
        bytes += seen.bytes;
    }
    let m: toml::Table = toml::from_str(&std::fs::read_to_string(out.join("manifest.toml"))?)?;
    let wall = m
        .get("wall_time_s")
        .and_then(|v| v.as_float())
        .ok_or("no wall_time_s")?;
    Ok(Ran {
        wall_s: wall,
        cpu_s,
        bytes,
    })
}

fn free_port() -> Result<u16, Error> {
    Ok(TcpListener::bind("127.0.0.1:0")?.local_addr()?.port())
}

/// What one viewer received.
struct Seen {
    bytes: u64,
    ended: bool,
}

/// One viewer: connects as soon as the page listens, holds the event stream open and reads
/// everything until the server closes it.
fn view(port: u16) -> Result<Seen, String> {
    let deadline = Instant::now() + Duration::from_secs(30);
    let mut stream = loop {
        match TcpStream::connect(("127.0.0.1", port)) {
            Ok(s) => break s,
            Err(e) if Instant::now() > deadline => return Err(format!("connect: {e}")),
            Err(_) => std::thread::sleep(Duration::from_millis(2)),
        }
    };
    stream
        .write_all(b"GET /events HTTP/1.1\r\nHost: 127.0.0.1\r\nAccept: text/event-stream\r\n\r\n")
        .map_err(|e| e.to_string())?;
    let mut buf = vec![0u8; 64 * 1024];
    let mut seen = Seen {
        bytes: 0,
        ended: false,
    };
    // The end marker may straddle two reads: keep the tail of the last one.
    let mut tail: Vec<u8> = Vec::new();
    loop {
        let n = match stream.read(&mut buf) {
            Ok(0) => break,
            Ok(n) => n,
            Err(e) => return Err(format!("read: {e}")),
        };
        seen.bytes += n as u64;
        tail.extend_from_slice(&buf[..n]);
        if find(&tail, b"\"ended\":true") {
            seen.ended = true;
        }
        let keep = tail.len().saturating_sub(16);
        tail.drain(..keep);
    }
    Ok(seen)
}

fn find(hay: &[u8], needle: &[u8]) -> bool {
    hay.windows(needle.len()).any(|w| w == needle)
}
