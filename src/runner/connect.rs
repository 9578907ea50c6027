//! A run's second phase: the bench's instruments started and asked who they are, and a stop
//! flag listening for SIGINT and SIGTERM.

use super::{RunError, StopFlag};
use crate::bench::Bench;
use crate::clock::BenchClock;
use crate::data::Manifest;
use crate::diagnostic::Diagnostic;
use crate::instrument::AttenuatorHandle;
use crate::sim::shared_reference::Seat;
use crate::wiring::{connect_slot as start_instruments, Instruments};
use std::sync::Arc;

/// The instruments of a run and what stops it.
pub struct Connected {
    /// The running instruments.
    pub instruments: Instruments,
    /// Set when a signal asks the run to stop.
    pub stop: StopFlag,
    /// Listens for the signals for as long as it lives; the instruments run on runtimes of
    /// their own.
    pub signals: tokio::runtime::Runtime,
}

/// Starts the bench's instruments (`seed` for a simulated bench; `seat` at a reference shared
/// with other slots; `attenuator`, the run's channel of an attenuator shared with them) and
/// the signal listener.
/// Errors here are in the bench's configuration; an instrument that cannot be reached shows on
/// its first command.
pub fn connect(
    bench: &Bench,
    clock: Arc<BenchClock>,
    seed: u64,
    seat: Option<Seat>,
    attenuator: Option<AttenuatorHandle>,
) -> Result<Connected, Diagnostic> {
    let signals = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(1)
        .enable_all()
        .build()
        .map_err(|e| Diagnostic::plain(format!("cannot start the signal runtime: {e}")))?;
    let instruments = start_instruments(bench, clock, seed, seat, attenuator)?;
    let stop = StopFlag::default();
    stop.listen(signals.handle());
    Ok(Connected {
        instruments,
        stop,
        signals,
    })
}

/// Records each instrument's identity in the manifest. Every instrument is asked; the first
/// that cannot answer fails the run.
pub fn identify(instruments: &Instruments, manifest: &mut Manifest) -> Result<(), RunError> {
    let chamber_id = instruments
        .chamber
        .as_ref()
        .map(|c| ("chamber", c.identify()));
    let ids = [
        ("attenuator", instruments.attenuator.identify()),
        ("dut", instruments.dut.identify()),
    ];
    let mut identified = Ok(());
    for (role, id) in ids.into_iter().chain(chamber_id) {
        match id {
            Ok(id) => {
                tracing::info!("{role}: {id}");
                manifest.instruments.insert(role.to_string(), id);
            }
            Err(e) => identified = identified.and(Err(e.into())),
        }
    }
    identified
}
