//! Where a run reports itself beyond its directory: the results store, seen from the runner as
//! a ledger it tells "this run, as its files now stand". The runner knows no database; the
//! command that starts a run decides what the ledger is.
//!
//! A ledger never stops a run: the files are written first, and a ledger that fails leaves the
//! manifest marked `store_pending` for `taucal store import` or `sync` to catch up.

use std::path::Path;

/// Records a run, from its directory.
pub trait RunLedger {
    /// Records the run in `dir` as its files stand now (called when it starts, and again when
    /// it ends). An error is said plainly and remembered; the run goes on.
    fn record(&mut self, dir: &Path) -> Result<(), String>;

    /// Where records go, for messages.
    fn describe(&self) -> String;
}

/// No ledger: runs are directories only (`--store none`, tests, `taucal check`).
pub struct NoLedger;

impl RunLedger for NoLedger {
    fn record(&mut self, _dir: &Path) -> Result<(), String> {
        Ok(())
    }

    fn describe(&self) -> String {
        "no results store".into()
    }
}
