//! The results store as a run's ledger: which store a run writes to, and the writes
//! themselves. A store that is down costs the run nothing but a warning and a pending mark.

use super::args::StoreArg;
use crate::bench::Bench;
use crate::diagnostic::Diagnostic;
use crate::diagnostic::KeyError;
use crate::runner::ledger::{NoLedger, RunLedger};
use crate::store::resolve::{self, Origin};
use crate::store::url::URL_HINT;
use crate::store::{RunRecord, Store, StoreUrl};
use std::path::Path;

/// A run's store, opened at its first write and again after a failure.
pub struct StoreLedger {
    flag: Option<String>,
    env: Option<String>,
    bench_url: Option<(String, std::path::PathBuf)>,
    store: Option<Box<dyn Store>>,
    shown: String,
}

impl StoreLedger {
    /// The ledger for a run on `bench` (no ledger for `--store none`). A malformed URL is
    /// refused here, before anything runs: the flag's or the environment's by name, the
    /// bench's at its file, line and key.
    pub fn for_run(arg: &StoreArg, bench: &Bench) -> Result<Box<dyn RunLedger>, Diagnostic> {
        let env = std::env::var(resolve::ENV).ok();
        let folder = bench
            .source
            .path
            .parent()
            .unwrap_or(Path::new("."))
            .to_path_buf();
        let bench_url = bench.store.as_ref().map(|s| (s.url.clone(), folder));
        let (url, origin) = resolve::choose(
            arg.url.as_deref(),
            env.as_deref(),
            bench_url.as_ref().map(|(u, f)| (u.as_str(), f.as_path())),
            Path::new(""),
        )
        .map_err(|e| {
            // The URL at fault is the one the choice took: the flag's, the environment's, or
            // the bench file's, which is shown at its line.
            let env_set = env.as_deref().is_some_and(|v| !v.trim().is_empty());
            match (arg.url.is_some(), env_set) {
                (true, _) => Diagnostic::plain(format!("--store: {e}")).with_hint(URL_HINT),
                (false, true) => {
                    Diagnostic::plain(format!("{}: {e}", resolve::ENV)).with_hint(URL_HINT)
                }
                (false, false) => {
                    bench
                        .source
                        .key_error(KeyError::new("store.url", e.to_string(), URL_HINT))
                }
            }
        })?;
        if url == StoreUrl::Off {
            return Ok(Box::new(NoLedger));
        }
        let shown = match origin {
            Origin::Default => "taucal.sqlite beside the run directory".to_string(),
            _ => format!("{} ({})", url.redacted(), origin.describe()),
        };
        Ok(Box::new(StoreLedger {
            flag: arg.url.clone(),
            env,
            bench_url,
            store: None,
            shown,
        }))
    }

    fn url_for(&self, dir: &Path) -> Result<StoreUrl, String> {
        resolve::choose(
            self.flag.as_deref(),
            self.env.as_deref(),
            self.bench_url
                .as_ref()
                .map(|(u, f)| (u.as_str(), f.as_path())),
            dir,
        )
        .map(|(u, _)| u)
        .map_err(|e| e.to_string())
    }
}

impl RunLedger for StoreLedger {
    fn record(&mut self, dir: &Path) -> Result<(), String> {
        let record = RunRecord::from_dir(dir).map_err(|e| e.to_string())?;
        if self.store.is_none() {
            let url = self.url_for(dir)?;
            self.store = crate::store::open(&url).map_err(|e| e.to_string())?;
            if let Some(s) = &self.store {
                self.shown = s.url();
                tracing::info!("results store {}", self.shown);
            }
        }
        let Some(store) = self.store.as_mut() else {
            return Ok(());
        };
        let written = store.put_runs(&[record]).map_err(|e| e.to_string());
        if written.is_err() {
            // Reconnect at the next write: a server that went away may be back by then.
            self.store = None;
        }
        written
    }

    fn describe(&self) -> String {
        self.shown.clone()
    }
}

/// The station's name: `--station`, else the bench's `[bench] station`, else the host name.
pub fn station(flag: Option<&str>, bench: &Bench) -> String {
    flag.map(str::to_string)
        .or_else(|| bench.station.clone())
        .or_else(|| {
            nix::unistd::gethostname()
                .ok()
                .and_then(|h| h.into_string().ok())
        })
        .unwrap_or_else(|| "unknown-station".to_string())
}
