//! `cargo bench --bench scale`: the three speed claims of the README's Performance section,
//! measured side by side in one run, repeated, reported as median and spread.
//!
//! 1. `taucal fit` (the release binary, a child process) on generated exchanges with known
//!    truth, against the pandas baseline (`benches/baseline_fit.py`, same computation)
//!    and against a bare csv `ByteRecord` loop over the same file (the parse limit); the fit's K
//!    is checked against the simulator's truth, and the fit's peak RSS is measured on a larger
//!    file.
//! 2. `recipes/overnight-soak.toml` dry-run on its simulated bench: `bench_time_s / wall_time_s`
//!    from the run's manifest.
//! 3. One SCPI `*IDN?` query through the runner's instrument layer (blocking handle on the
//!    instrument's own runtime, SCPI client, line link) against the served simulated attenuator
//!    on loopback, against a bare tokio socket sending the same bytes to the same server from a
//!    current-thread runtime (and, for comparison, from a multi-thread one).
//!
//! Generated files are cached in the work directory by row count and generator version, so a
//! repeat run skips generation. Every loop is bounded; everything stays on 127.0.0.1.

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::Arc;
use std::time::{Duration, Instant};
use taucal::bench::Bench;
use taucal::clock::{BenchClock, ClockMode};
use taucal::data::{Exchange, ExchangeWriter, RecordSink, Taken};
use taucal::sim::serve::{Listen, ServedBench};
use taucal::sim::{BurstRequest, SimBench};
use taucal::wiring::connect;
use tokio::io::{AsyncReadExt, AsyncWriteExt};

/// Bumped whenever the generator's output changes, so cached files are not reused.
const GENERATOR_VERSION: u32 = 2;
/// Exchanges per generated burst.
const FRAMES: u32 = 16;
/// Seed of the generated data's simulated bench.
const SEED: u64 = 20_240_601;
/// Channel of the generated data.
const CENTER_MHZ: u32 = 5180;
/// Bandwidths swept, each its own stage.
const BANDWIDTHS_MHZ: [u32; 3] = [20, 40, 80];
/// Mid-plateau attenuations of the demo bench's three DUT gain states (as in the soak recipe).
const ATTENS_DB: [f64; 9] = [24.0, 27.0, 30.0, 46.0, 49.0, 52.0, 72.0, 75.0, 78.0];

type Error = Box<dyn std::error::Error>;

/// Command-line settings (`cargo bench --bench scale -- --rows 2000000 ...`).
struct Settings {
    rows: u64,
    mem_rows: u64,
    repeats: usize,
    pandas_repeats: usize,
    pings: usize,
    python: String,
    baseline: PathBuf,
    dir: PathBuf,
    soak: bool,
}

impl Settings {
    fn parse() -> Result<Settings, Error> {
        let root = Path::new(env!("CARGO_MANIFEST_DIR"));
        let mut s = Settings {
            rows: 2_000_000,
            mem_rows: 10_000_000,
            repeats: 5,
            pandas_repeats: 3,
            pings: 20_000,
            python: std::env::var("TAUCAL_BENCH_PYTHON").unwrap_or_else(|_| "python3".into()),
            baseline: root.join("benches/baseline_fit.py"),
            dir: std::env::temp_dir().join("taucal-bench"),
            soak: true,
        };
        let mut args = std::env::args().skip(1);
        while let Some(arg) = args.next() {
            let mut value = || args.next().ok_or_else(|| format!("{arg} needs a value"));
            match arg.as_str() {
                // cargo bench passes --bench to every bench target.
                "--bench" => {}
                "--rows" => s.rows = value()?.parse()?,
                "--mem-rows" => s.mem_rows = value()?.parse()?,
                "--repeats" => s.repeats = value()?.parse()?,
                "--pandas-repeats" => s.pandas_repeats = value()?.parse()?,
                "--pings" => s.pings = value()?.parse()?,
                "--python" => s.python = value()?,
                "--baseline" => s.baseline = value()?.into(),
                "--dir" => s.dir = value()?.into(),
                "--no-soak" => s.soak = false,
                "--smoke" => {
                    s.rows = 20_000;
                    s.mem_rows = 0;
                    s.repeats = 1;
                    s.pandas_repeats = 0;
                    s.pings = 500;
                    s.soak = false;
                }
                other => return Err(format!("unknown argument `{other}`").into()),
            }
        }
        if s.repeats == 0 || s.rows < u64::from(FRAMES) {
            return Err("--repeats must be at least 1 and --rows at least one burst".into());
        }
        Ok(s)
    }
}

/// Median, lowest and highest of repeated measurements.
struct Spread {
    median: f64,
    min: f64,
    max: f64,
}

fn spread(values: &[f64]) -> Spread {
    let mut v = values.to_vec();
    v.sort_by(f64::total_cmp);
    let n = v.len();
    let median = if n % 2 == 1 {
        v[n / 2]
    } else {
        (v[n / 2 - 1] + v[n / 2]) / 2.0
    };
    Spread {
        median,
        min: v[0],
        max: v[n - 1],
    }
}

fn show(label: &str, unit: &str, values: &[f64]) {
    let s = spread(values);
    println!(
        "  {label:<44} median {:>10.3} {unit}  (min {:.3}, max {:.3}, n = {})",
        s.median,
        s.min,
        s.max,
        values.len()
    );
}

fn repo(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}

fn taucal() -> Command {
    Command::new(env!("CARGO_BIN_EXE_taucal"))
}

/// Writes `rows` exchanges (rounded up to whole bursts) from the demo bench's simulator, in the
/// contract format: three bandwidth stages, nine attenuations across the three gain states,
/// bursts of 16 with random 48-bit counter starts and many wraps. Returns nothing: the truth is
/// the bench's `[sim]` table.
fn generate(bench: &Bench, path: &Path, rows: u64) -> Result<(), Error> {
    let truth = bench
        .sim
        .as_ref()
        .ok_or("the demo bench has no [sim] table")?;
    let mut sim = SimBench::new(truth, &bench.path, SEED)
        .map_err(|e| format!("sim.{}: {}", e.key, e.message))?;
    let partial = path.with_extension("partial");
    let mut writer = ExchangeWriter::create(&partial)?;
    let stages: Vec<String> = BANDWIDTHS_MHZ
        .iter()
        .map(|bw| format!("sweep-{bw}mhz"))
        .collect();
    let mut bench_ps: u64 = 0;
    let mut written = 0u64;
    let mut rows_of_burst = Vec::with_capacity(FRAMES as usize);
    let mut round = 0u32;
    while written < rows {
        for (stage, &bw_mhz) in stages.iter().zip(&BANDWIDTHS_MHZ) {
            for (point, &atten_db) in ATTENS_DB.iter().enumerate() {
                if written >= rows {
                    break;
                }
                sim.set_atten_db(atten_db);
                let req = BurstRequest {
                    frames: FRAMES,
                    center_mhz: CENTER_MHZ,
                    bw_mhz,
                };
                let time_s = Some(bench_ps as f64 * 1e-12);
                let outcome = sim.run_burst(bench_ps, &req);
                bench_ps += outcome.duration_ps;
                rows_of_burst.clear();
                let at = Taken {
                    stage,
                    point: point as u32,
                    burst: round,
                    atten_db,
                    center_mhz: CENTER_MHZ,
                    bw_mhz,
                    temp_c: sim.dut_temp_c(),
                    time_s,
                };
                for (seq, x) in outcome.exchanges.into_iter().enumerate() {
                    rows_of_burst.push(Exchange::recorded(&at, seq as u32, x));
                }
                writer.write_burst(&rows_of_burst)?;
                written += u64::from(FRAMES);
            }
        }
        round += 1;
    }
    drop(writer);
    std::fs::rename(&partial, path)?;
    Ok(())
}

/// The cached file of `rows` generated exchanges, generated first if missing.
fn exchanges_file(s: &Settings, bench: &Bench, rows: u64) -> Result<PathBuf, Error> {
    let path = s
        .dir
        .join(format!("exchanges-{rows}-v{GENERATOR_VERSION}.csv"));
    if !path.is_file() {
        let t = Instant::now();
        generate(bench, &path, rows)?;
        println!(
            "  generated {} ({rows} exchanges) in {:.1} s",
            path.display(),
            t.elapsed().as_secs_f64()
        );
    }
    Ok(path)
}

/// Runs `taucal fit` on `file`; returns wall seconds and the caltable text.
fn time_fit(file: &Path) -> Result<(f64, String), Error> {
    let t = Instant::now();
    let out = taucal()
        .arg("fit")
        .arg(file)
        .arg("--bench")
        .arg(repo("recipes/benches/sim-demo.toml"))
        .stderr(Stdio::null())
        .output()?;
    let secs = t.elapsed().as_secs_f64();
    if !out.status.success() {
        return Err(format!("taucal fit exited {}", out.status).into());
    }
    Ok((secs, String::from_utf8(out.stdout)?))
}

/// The parse limit: every record of `file` split into fields by the csv crate, nothing else.
fn time_byte_records(file: &Path) -> Result<f64, Error> {
    let t = Instant::now();
    let mut rdr = csv::Reader::from_path(file)?;
    let mut record = csv::ByteRecord::new();
    let mut fields = 0usize;
    while rdr.read_byte_record(&mut record)? {
        fields += record.len();
    }
    std::hint::black_box(fields);
    Ok(t.elapsed().as_secs_f64())
}

/// Runs the pandas baseline on `file` with the demo bench's cable and reference delays.
fn time_pandas(s: &Settings, bench: &Bench, file: &Path) -> Result<f64, Error> {
    let t = Instant::now();
    let status = Command::new(&s.python)
        .arg(&s.baseline)
        .arg(file)
        .arg(bench.path.cable_delay_ps.to_string())
        .arg(reference_delay_ps(bench)?.to_string())
        .stdout(Stdio::null())
        .status()?;
    if !status.success() {
        return Err(format!("the pandas baseline exited {status}").into());
    }
    Ok(t.elapsed().as_secs_f64())
}

fn reference_delay_ps(bench: &Bench) -> Result<f64, Error> {
    bench
        .reference
        .delay_ps
        .at(Some(0))
        .ok_or_else(|| "the demo bench has no reference delay".into())
}

/// Why the pandas baseline cannot run, if it cannot.
fn pandas_missing(s: &Settings) -> Option<String> {
    if !s.baseline.is_file() {
        return Some(format!("{} not found", s.baseline.display()));
    }
    let ok = Command::new(&s.python)
        .args(["-c", "import numpy, pandas"])
        .stderr(Stdio::null())
        .status()
        .is_ok_and(|st| st.success());
    (!ok).then(|| format!("`{} -c 'import numpy, pandas'` failed", s.python))
}

/// Checks every row of the fitted table against the simulator's truth: within 4 of its own
/// 95 % half-widths plus 0.5 ps (the fit pools the exchanges of a cell; the simulator's burst
/// offsets and rounding to counter ticks stay in the interval). Returns the worst error in ps.
fn check_truth(bench: &Bench, caltable: &str) -> Result<f64, Error> {
    let truth = bench.sim.as_ref().ok_or("no [sim] table")?;
    let mut worst: f64 = 0.0;
    let mut cells = 0;
    for line in caltable.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        if f.len() < 8 {
            return Err(format!("short caltable row `{line}`").into());
        }
        let gain: u32 = f[2].parse()?;
        let delay: f64 = f[3].parse()?;
        let ci95: f64 = f[4].parse()?;
        let k = truth.dut_k_ps(gain).ok_or("gain outside the truth")?;
        let err = (delay - k).abs();
        if err > 4.0 * ci95 + 0.5 {
            return Err(format!("cell {line}: K {delay} vs truth {k} (± {ci95})").into());
        }
        worst = worst.max(err);
        cells += 1;
    }
    if cells != BANDWIDTHS_MHZ.len() * 3 {
        return Err(format!("{cells} cells fitted, expected 9:\n{caltable}").into());
    }
    Ok(worst)
}

fn fit_section(s: &Settings, bench: &Bench) -> Result<Vec<(String, f64)>, Error> {
    println!("\n== fit: {} exchanges", s.rows);
    let file = exchanges_file(s, bench, s.rows)?;
    let size_mb = std::fs::metadata(&file)?.len() as f64 / 1e6;
    println!("  file {} ({size_mb:.0} MB)", file.display());
    let pandas_reason = pandas_missing(s);
    if let Some(why) = &pandas_reason {
        println!("  pandas baseline SKIPPED: {why} (pip install pandas numpy)");
    }
    let (mut fit, mut parse, mut pandas) = (Vec::new(), Vec::new(), Vec::new());
    let (mut vs_parse, mut vs_pandas) = (Vec::new(), Vec::new());
    let mut worst_error = 0.0;
    for round in 0..s.repeats {
        // Interleaved, so drifting machine load hits all three alike.
        let (t_fit, table) = time_fit(&file)?;
        worst_error = check_truth(bench, &table)?;
        let t_parse = time_byte_records(&file)?;
        fit.push(t_fit);
        parse.push(t_parse);
        vs_parse.push(t_fit / t_parse);
        if pandas_reason.is_none() && round < s.pandas_repeats {
            let t_pandas = time_pandas(s, bench, &file)?;
            pandas.push(t_pandas);
            vs_pandas.push(t_pandas / t_fit);
        }
    }
    show("taucal fit", "s", &fit);
    show("csv ByteRecord loop (parse limit)", "s", &parse);
    if !pandas.is_empty() {
        show("pandas baseline", "s", &pandas);
    }
    println!(
        "  fit K vs truth: worst error {worst_error:.3} ps over 9 cells (within 4·ci95 + 0.5 ps)"
    );
    let mut ratios = vec![("fit / ByteRecord loop (≤ 2)".to_string(), 0.0)];
    show("ratio fit / ByteRecord, per round", "×", &vs_parse);
    ratios[0].1 = spread(&vs_parse).median;
    if !vs_pandas.is_empty() {
        show("ratio pandas / fit, per round", "×", &vs_pandas);
        ratios.push(("pandas / fit (≥ 10)".to_string(), spread(&vs_pandas).median));
    }
    Ok(ratios)
}

/// Peak resident memory of `taucal fit` on `rows` exchanges, via `/usr/bin/time`.
fn memory_section(s: &Settings, bench: &Bench) -> Result<(), Error> {
    println!("\n== fit memory: {} exchanges", s.mem_rows);
    let time_bin = Path::new("/usr/bin/time");
    if !time_bin.is_file() {
        println!("  SKIPPED: /usr/bin/time not found");
        return Ok(());
    }
    let file = exchanges_file(s, bench, s.mem_rows)?;
    let size_mb = std::fs::metadata(&file)?.len() as f64 / 1e6;
    let report = s.dir.join("time-report.txt");
    let t = Instant::now();
    let out = Command::new(time_bin)
        .arg("-f")
        .arg("%M")
        .arg("-o")
        .arg(&report)
        .arg(env!("CARGO_BIN_EXE_taucal"))
        .arg("fit")
        .arg(&file)
        .arg("--bench")
        .arg(repo("recipes/benches/sim-demo.toml"))
        .stderr(Stdio::null())
        .output()?;
    let secs = t.elapsed().as_secs_f64();
    if !out.status.success() {
        return Err(format!("taucal fit exited {}", out.status).into());
    }
    check_truth(bench, &String::from_utf8(out.stdout)?)?;
    let kib: f64 = std::fs::read_to_string(&report)?.trim().parse()?;
    let mib = kib / 1024.0;
    println!(
        "  peak RSS {mib:.0} MiB for a {size_mb:.0} MB file ({:.1} bytes per exchange), {secs:.1} s",
        kib * 1024.0 / s.mem_rows as f64
    );
    Ok(())
}

/// Dry-runs the overnight-soak recipe `repeats` times; returns the median ratio.
fn soak_section(s: &Settings) -> Result<Option<f64>, Error> {
    println!("\n== overnight-soak dry run");
    if !s.soak {
        println!("  SKIPPED (--no-soak)");
        return Ok(None);
    }
    let (mut ratios, mut walls) = (Vec::new(), Vec::new());
    let mut bench_h = 0.0;
    for round in 0..s.repeats {
        let out = s.dir.join(format!("soak-{round}"));
        if out.exists() {
            std::fs::remove_dir_all(&out)?;
        }
        let status = taucal()
            .arg("run")
            .arg(repo("recipes/overnight-soak.toml"))
            .arg("--bench")
            .arg(repo("recipes/benches/overnight-soak.toml"))
            .arg("--out")
            .arg(&out)
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .status()?;
        if !status.success() {
            return Err(format!("the overnight-soak dry run exited {status}").into());
        }
        let manifest: toml::Table =
            toml::from_str(&std::fs::read_to_string(out.join("manifest.toml"))?)?;
        let number = |key: &str| {
            manifest
                .get(key)
                .and_then(toml::Value::as_float)
                .ok_or_else(|| format!("manifest has no `{key}`"))
        };
        let (bench_s, wall_s) = (number("bench_time_s")?, number("wall_time_s")?);
        bench_h = bench_s / 3600.0;
        walls.push(wall_s);
        ratios.push(bench_s / wall_s);
    }
    println!("  bench time {bench_h:.2} h per run");
    show("wall time (manifest wall_time_s)", "s", &walls);
    show("bench_time_s / wall_time_s", "×", &ratios);
    Ok(Some(spread(&ratios).median))
}

/// Seconds per `*IDN?` round trip over a bare tokio socket to `port` (`n` queries).
async fn bare_pings(port: u16, n: usize) -> Result<f64, Error> {
    let mut stream = tokio::net::TcpStream::connect(("127.0.0.1", port)).await?;
    stream.set_nodelay(true)?;
    let mut buf = [0u8; 256];
    let t = Instant::now();
    for _ in 0..n {
        stream.write_all(b"*IDN?\n").await?;
        let mut got = 0;
        loop {
            let k = stream.read(&mut buf[got..]).await?;
            if k == 0 {
                return Err("the server closed the connection".into());
            }
            got += k;
            if buf[..got].ends_with(b"\n") || got == buf.len() {
                break;
            }
        }
    }
    Ok(t.elapsed().as_secs_f64() / n as f64)
}

/// The layer's cost per query against two bare clients of the same server: one on a
/// current-thread runtime (the calling thread waits on the socket itself) and one on a
/// multi-thread runtime like the runner's (a worker waits on the socket, then wakes the caller).
/// Returns the median ratios (layer / current-thread, layer / multi-thread).
fn scpi_section(s: &Settings) -> Result<(f64, f64), Error> {
    println!(
        "\n== SCPI *IDN? over loopback: {} queries per round",
        s.pings
    );
    let served_bench = Bench::load(&repo("recipes/benches/sim-served.toml"))?;
    // The server gets its own runtime and thread, as `taucal sim serve` would be its own process.
    let server_rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(1)
        .enable_all()
        .build()?;
    let served = ServedBench::new(&served_bench, 1, false).map_err(|d| d.message.clone())?;
    let listen = Listen::parse("attenuator=tcp:127.0.0.1:0")?;
    let address = server_rt.block_on(served.start(&listen))?;
    let port: u16 = address
        .rsplit_once(':')
        .and_then(|(_, p)| p.parse().ok())
        .ok_or("no port in the served address")?;
    let bench = served_bench.reconnect(&[format!("attenuator={address}")])?;
    // A runtime like the one `taucal run` keeps for signals, for the second bare client: the
    // instruments run on runtimes of their own.
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()?;
    let clock = Arc::new(BenchClock::new(ClockMode::Virtual));
    let instruments = connect(&bench, clock, 1).map_err(|d| d.message.clone())?;
    let attenuator = instruments.attenuator;
    let bare_rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()?;
    let warm = s.pings.min(500);
    for _ in 0..warm {
        attenuator.identify()?;
    }
    bare_rt.block_on(bare_pings(port, warm))?;
    let (mut bare, mut layer, mut ratio) = (Vec::new(), Vec::new(), Vec::new());
    let (mut bare_mt, mut ratio_mt) = (Vec::new(), Vec::new());
    for _ in 0..s.repeats {
        let b = bare_rt.block_on(bare_pings(port, s.pings))?;
        let b_mt = rt.block_on(bare_pings(port, s.pings))?;
        let t = Instant::now();
        for _ in 0..s.pings {
            attenuator.identify()?;
        }
        let l = t.elapsed().as_secs_f64() / s.pings as f64;
        bare.push(b * 1e6);
        layer.push(l * 1e6);
        ratio.push(l / b);
        bare_mt.push(b_mt * 1e6);
        ratio_mt.push(l / b_mt);
    }
    show("bare socket, current-thread runtime", "µs", &bare);
    show("bare socket, multi-thread runtime", "µs", &bare_mt);
    show("instrument layer (handle, SCPI client, link)", "µs", &layer);
    show("ratio layer / bare current-thread", "×", &ratio);
    show("ratio layer / bare multi-thread", "×", &ratio_mt);
    drop(attenuator);
    drop(rt);
    server_rt.shutdown_timeout(Duration::from_secs(1));
    Ok((spread(&ratio).median, spread(&ratio_mt).median))
}

fn main() -> Result<(), Error> {
    let s = Settings::parse()?;
    std::fs::create_dir_all(&s.dir)?;
    let bench = Bench::built_in().map_err(|d| d.message.clone())?;
    println!(
        "taucal scale bench: {} logical CPUs, work dir {}",
        std::thread::available_parallelism().map_or(0, |n| n.get()),
        s.dir.display()
    );
    let mut ratios = fit_section(&s, &bench)?;
    if s.mem_rows > 0 {
        memory_section(&s, &bench)?;
    }
    if let Some(r) = soak_section(&s)? {
        ratios.push(("overnight-soak bench / wall (≥ 3000)".to_string(), r));
    }
    let (vs_current, vs_multi) = scpi_section(&s)?;
    ratios.push((
        "SCPI layer / bare, current-thread (≤ 1.3)".to_string(),
        vs_current,
    ));
    ratios.push(("SCPI layer / bare, multi-thread".to_string(), vs_multi));
    println!("\n== ratios (medians over rounds)");
    for (name, r) in ratios {
        println!("  {name:<42} {r:>10.2}");
    }
    Ok(())
}
