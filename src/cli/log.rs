//! Logging at the edge: a human log on stderr, and the same events (with more detail) in the
//! run directory's `run.log` once a run has one.

use std::fs::File;
use std::io::{self, IsTerminal, Write};
use std::path::Path;
use std::sync::Mutex;
use tracing_subscriber::filter::LevelFilter;
use tracing_subscriber::fmt::MakeWriter;
use tracing_subscriber::layer::SubscriberExt;
use tracing_subscriber::util::SubscriberInitExt;
use tracing_subscriber::Layer;

static RUN_LOG: Mutex<Option<File>> = Mutex::new(None);

struct RunLogWriter;

impl Write for RunLogWriter {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        match RUN_LOG.lock().ok().as_mut().and_then(|g| g.as_mut()) {
            Some(f) => f.write(buf),
            None => Ok(buf.len()),
        }
    }
    fn flush(&mut self) -> io::Result<()> {
        match RUN_LOG.lock().ok().as_mut().and_then(|g| g.as_mut()) {
            Some(f) => f.flush(),
            None => Ok(()),
        }
    }
}

impl<'a> MakeWriter<'a> for RunLogWriter {
    type Writer = RunLogWriter;
    fn make_writer(&'a self) -> Self::Writer {
        RunLogWriter
    }
}

/// Installs the subscriber: info and above on stderr, debug and above to the run log.
pub fn init() {
    let stderr = tracing_subscriber::fmt::layer()
        .with_writer(io::stderr)
        .without_time()
        .with_target(false)
        .with_ansi(io::stderr().is_terminal() && std::env::var_os("NO_COLOR").is_none())
        .with_filter(LevelFilter::INFO);
    let file = tracing_subscriber::fmt::layer()
        .with_writer(RunLogWriter)
        .with_ansi(false)
        .with_filter(LevelFilter::DEBUG);
    let _ = tracing_subscriber::registry()
        .with(stderr)
        .with(file)
        .try_init();
}

/// Continues a run's log in `path` (a resumed run).
pub fn append_run_log(path: &Path) {
    match std::fs::OpenOptions::new()
        .create(true)
        .append(true)
        .open(path)
    {
        Ok(f) => {
            if let Ok(mut g) = RUN_LOG.lock() {
                *g = Some(f);
            }
        }
        Err(e) => tracing::warn!(
            "cannot open {}: {e}; logging to stderr only",
            path.display()
        ),
    }
}

/// Starts copying the log into `path`.
pub fn open_run_log(path: &Path) {
    match File::create(path) {
        Ok(f) => {
            if let Ok(mut g) = RUN_LOG.lock() {
                *g = Some(f);
            }
        }
        Err(e) => tracing::warn!(
            "cannot create {}: {e}; logging to stderr only",
            path.display()
        ),
    }
}
