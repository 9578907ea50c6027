//! What a run is asked to do: the plan, the bench, and how (`taucal run`), or the interrupted
//! run to continue (`taucal resume`).

use crate::bench::Bench;
use crate::data::Manifest;
use crate::recipe::Plan;
use std::path::PathBuf;
use std::sync::Arc;

/// What to run, where, and how.
pub struct RunRequest {
    /// The validated recipe.
    pub plan: Plan,
    /// The bench it was validated against.
    pub bench: Arc<Bench>,
    /// `--set` overrides as typed (for the manifest).
    pub overrides: Vec<String>,
    /// `--out`: the run directory to use instead of `runs/<time>-<name>`.
    pub out: Option<PathBuf>,
    /// `--seed`: overrides a simulated bench's seed.
    pub seed: Option<u64>,
    /// `--realtime`: a simulated bench keeps wall-clock pace.
    pub realtime: bool,
    /// Continue an interrupted run instead of starting one.
    pub resume: Option<Resumption>,
    /// `--unit`: the unit's serial, when the operator names it (else the DUT's own, else a
    /// simulated DUT's).
    pub unit: Option<String>,
    /// The station the run is on (`--station`, the bench's `[bench] station`, or the host).
    pub station: String,
    /// The run's place at a reference shared with other slots of a station, when it is one.
    pub seat: Option<crate::sim::shared_reference::Seat>,
    /// The run's channel of an attenuator it shares with other slots of a station (one
    /// connection for them all), when it is one; else the run starts its own.
    pub attenuator: Option<crate::instrument::AttenuatorHandle>,
}

/// What a resumed run starts from.
pub struct Resumption {
    /// The interrupted run's directory.
    pub dir: PathBuf,
    /// Its manifest.
    pub manifest: Manifest,
    /// Its exchanges up to the last checkpoint (the file is already cut there).
    pub replay: Vec<crate::data::Exchange>,
    /// The directory's lock, held from before the record was cut until the run ends.
    pub lock: crate::data::run_lock::RunLock,
}
