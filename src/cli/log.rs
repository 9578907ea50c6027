//! Logging at the edge: a human log on stderr, and the same events with more detail in the run
//! directory once a run has one — `run.log` for people, `run.jsonl` (one JSON object a line)
//! for tools.
//!
//! While a progress display is on screen, stderr lines go through it so the two never tangle.

use indicatif::ProgressBar;
use std::fs::File;
use std::io::{self, IsTerminal, Write};
use std::path::Path;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Mutex;
use tracing_subscriber::filter::LevelFilter;
use tracing_subscriber::fmt::MakeWriter;
use tracing_subscriber::layer::SubscriberExt;
use tracing_subscriber::util::SubscriberInitExt;
use tracing_subscriber::Layer;

/// How much goes to stderr.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Verbosity {
    /// Warnings and errors only, and no progress display.
    Quiet,
    /// Information, warnings and errors.
    Normal,
    /// Debug detail as well.
    Verbose,
}

impl Verbosity {
    /// From `--quiet` and `--verbose` (clap refuses both together).
    pub fn from_flags(quiet: bool, verbose: bool) -> Self {
        match (quiet, verbose) {
            (true, _) => Verbosity::Quiet,
            (false, true) => Verbosity::Verbose,
            (false, false) => Verbosity::Normal,
        }
    }

    fn level(self) -> LevelFilter {
        match self {
            Verbosity::Quiet => LevelFilter::WARN,
            Verbosity::Normal => LevelFilter::INFO,
            Verbosity::Verbose => LevelFilter::DEBUG,
        }
    }
}

/// True when stderr may carry colour: a terminal, and `NO_COLOR` unset (no-color.org).
pub fn colour() -> bool {
    io::stderr().is_terminal() && std::env::var_os("NO_COLOR").is_none_or(|v| v.is_empty())
}

static QUIET: AtomicBool = AtomicBool::new(false);
static RUN_LOG: Mutex<Option<File>> = Mutex::new(None);
static RUN_JSONL: Mutex<Option<File>> = Mutex::new(None);
static PROGRESS: Mutex<Option<ProgressBar>> = Mutex::new(None);

thread_local! {
    /// A slot's own `run.log` and `run.jsonl`, on the thread that runs the slot: its lines go
    /// there instead of the station's.
    static SLOT_LOGS: std::cell::RefCell<Option<[File; 2]>> = const { std::cell::RefCell::new(None) };
}

/// Writes into one of the run directory's log files once it is open; drops lines before that.
#[derive(Clone, Copy)]
struct FileWriter(&'static Mutex<Option<File>>);

impl FileWriter {
    /// Which of a slot's two files this writer stands for.
    fn slot_file(&self) -> usize {
        usize::from(std::ptr::eq(self.0, &RUN_JSONL))
    }

    /// Runs `f` on this thread's slot file, if the thread has one.
    fn on_slot_file<R>(&self, f: impl FnOnce(&mut File) -> io::Result<R>) -> Option<io::Result<R>> {
        SLOT_LOGS.with(|logs| {
            logs.borrow_mut()
                .as_mut()
                .map(|files| f(&mut files[self.slot_file()]))
        })
    }
}

impl Write for FileWriter {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        if let Some(done) = self.on_slot_file(|f| f.write(buf)) {
            return done;
        }
        match self.0.lock().ok().as_mut().and_then(|g| g.as_mut()) {
            Some(f) => f.write(buf),
            None => Ok(buf.len()),
        }
    }
    fn flush(&mut self) -> io::Result<()> {
        if let Some(done) = self.on_slot_file(|f| f.flush()) {
            return done;
        }
        match self.0.lock().ok().as_mut().and_then(|g| g.as_mut()) {
            Some(f) => f.flush(),
            None => Ok(()),
        }
    }
}

impl<'a> MakeWriter<'a> for FileWriter {
    type Writer = FileWriter;
    fn make_writer(&'a self) -> Self::Writer {
        *self
    }
}

/// Writes to stderr, lifting the progress display out of the way while it does.
struct StderrWriter;

impl Write for StderrWriter {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        let bar = PROGRESS.lock().ok().and_then(|g| g.clone());
        match bar {
            Some(bar) => bar
                .suspend(|| io::stderr().write_all(buf))
                .map(|()| buf.len()),
            None => io::stderr().write(buf),
        }
    }
    fn flush(&mut self) -> io::Result<()> {
        io::stderr().flush()
    }
}

impl<'a> MakeWriter<'a> for StderrWriter {
    type Writer = StderrWriter;
    fn make_writer(&'a self) -> Self::Writer {
        StderrWriter
    }
}

/// Installs the subscriber: stderr at `verbosity`; debug and above to the run's log files.
pub fn init(verbosity: Verbosity) {
    QUIET.store(verbosity == Verbosity::Quiet, Ordering::Relaxed);
    let stderr = tracing_subscriber::fmt::layer()
        .with_writer(StderrWriter)
        .without_time()
        .with_target(false)
        .with_ansi(colour())
        .with_filter(verbosity.level());
    let file = tracing_subscriber::fmt::layer()
        .with_writer(FileWriter(&RUN_LOG))
        .with_ansi(false)
        .with_filter(LevelFilter::DEBUG);
    let json = tracing_subscriber::fmt::layer()
        .json()
        .with_writer(FileWriter(&RUN_JSONL))
        .with_filter(LevelFilter::DEBUG);
    let _ = tracing_subscriber::registry()
        .with(stderr)
        .with(file)
        .with(json)
        .try_init();
}

/// Writes a command's notice (what it uses, where it wrote, what it found) to stderr, with a
/// line end; nothing with `--quiet`, which keeps stderr to warnings and errors.
pub fn notice(text: &str) {
    if QUIET.load(Ordering::Relaxed) {
        return;
    }
    let mut out = StderrWriter;
    let end = if text.ends_with('\n') { "" } else { "\n" };
    let _ = out.write_all(format!("{text}{end}").as_bytes());
}

/// Starts copying the log into `run.log` (text) and `run.jsonl` (JSON lines) in `dir`; a
/// resumed run (`append`) continues them.
pub fn open_run_logs(dir: &Path, text: &str, json: &str, append: bool) {
    for (name, slot) in [(text, &RUN_LOG), (json, &RUN_JSONL)] {
        let path = dir.join(name);
        let file = std::fs::OpenOptions::new()
            .create(true)
            .write(true)
            .append(append)
            .truncate(!append)
            .open(&path);
        match file {
            Ok(f) => {
                if let Ok(mut g) = slot.lock() {
                    *g = Some(f);
                }
            }
            Err(e) => tracing::warn!(
                "cannot create {}: {e}; logging to stderr only",
                path.display()
            ),
        }
    }
}

/// Starts a slot's own `run.log` and `run.jsonl` in `dir`, for the lines logged on this
/// thread (the slot's); a resumed slot (`append`) continues them.
pub fn open_thread_logs(dir: &Path, text: &str, json: &str, append: bool) {
    let open = |name: &str| {
        let path = dir.join(name);
        std::fs::OpenOptions::new()
            .create(true)
            .write(true)
            .append(append)
            .truncate(!append)
            .open(&path)
            .inspect_err(|e| tracing::warn!("cannot create {}: {e}", path.display()))
    };
    if let (Ok(t), Ok(j)) = (open(text), open(json)) {
        SLOT_LOGS.with(|logs| *logs.borrow_mut() = Some([t, j]));
    }
}

/// Routes stderr log lines around `bar` while it shows (`None` when it is gone).
pub fn set_progress(bar: Option<ProgressBar>) {
    if let Ok(mut g) = PROGRESS.lock() {
        *g = bar;
    }
}
