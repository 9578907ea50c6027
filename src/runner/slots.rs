//! A station's slots run side by side: one thread per slot, each a whole run of its own
//! ([`execute`]) on its own instruments and clock, into its own run directory. What they share
//! they reach through one owner each: the reference through its [`SharedReference`] seats (a
//! simulated bench), the results store through this thread, which records every slot's run
//! as the slot asks.
//!
//! A driven attenuator the slots share (one address) is opened once, here: a multi-channel
//! instrument on a serial port, or one that takes a single socket, cannot be opened once per
//! slot. Its one owner takes the slots' commands one at a time, each naming the slot's own
//! channel; when every slot has ended, every channel goes to its safe state, whatever became of
//! the slots.
//!
//! A slot that fails ends alone: its own run stops (per the recipe's `[faults]`), its
//! instruments (its channel, on a shared attenuator) go to their safe state, and the other
//! slots go on.

use super::finalise::RunReport;
use super::ledger::RunLedger;
use super::request::RunRequest;
use super::run::execute;
use super::Unobserved;
use crate::diagnostic::Diagnostic;
use crate::instrument::AttenuatorHandle;
use crate::sim::shared_reference::SharedReference;
use std::path::{Path, PathBuf};
use std::sync::mpsc;

/// One slot's run, to be made.
pub struct SlotRun {
    /// The slot's name.
    pub name: String,
    /// Its run (its `out` or resumption names its directory).
    pub request: RunRequest,
}

/// How one slot's run ended.
pub struct SlotOutcome {
    /// The slot's name.
    pub name: String,
    /// Its report, or why it never started (bad input, or its thread failed).
    pub report: Result<RunReport, Diagnostic>,
}

/// A request from a slot's thread to record its run directory in the store.
type LedgerAsk = (PathBuf, mpsc::Sender<Result<(), String>>);

/// A slot's ledger: hands each request to the thread that owns the real one, and waits.
struct Relay {
    asks: mpsc::Sender<LedgerAsk>,
    describe: String,
}

impl RunLedger for Relay {
    fn record(&mut self, dir: &Path) -> Result<(), String> {
        let (reply, answer) = mpsc::channel();
        self.asks
            .send((dir.to_path_buf(), reply))
            .map_err(|_| "the station's store is gone".to_string())?;
        answer
            .recv()
            .unwrap_or_else(|_| Err("the station's store is gone".to_string()))
    }

    fn describe(&self) -> String {
        self.describe.clone()
    }
}

/// Runs every slot at once and returns how each ended, in the order given. `on_dir` is called
/// on the slot's thread once its directory exists (to start its log there); `ledger` records
/// every slot's run, from this thread.
pub fn execute_slots(
    runs: Vec<SlotRun>,
    on_dir: &(dyn Fn(&str, &Path) + Sync),
    ledger: &mut dyn RunLedger,
) -> Vec<SlotOutcome> {
    let (_reference, seats) = SharedReference::new(runs.len());
    let mut runs = runs;
    let attenuators = share_attenuators(&mut runs);
    let (asks, asked) = mpsc::channel::<LedgerAsk>();
    let describe = ledger.describe();
    std::thread::scope(|scope| {
        let threads: Vec<_> = runs
            .into_iter()
            .zip(seats)
            .map(|(run, seat)| {
                let mut relay = Relay {
                    asks: asks.clone(),
                    describe: describe.clone(),
                };
                let name = run.name.clone();
                let thread = std::thread::Builder::new()
                    .name(format!("slot-{name}"))
                    .spawn_scoped(scope, move || {
                        let mut request = run.request;
                        request.seat = Some(seat);
                        let slot = run.name.clone();
                        let _span = tracing::info_span!("slot", name = %slot).entered();
                        execute(
                            request,
                            |dir| on_dir(&slot, dir),
                            Box::new(Unobserved),
                            &mut relay,
                        )
                    });
                (name, thread)
            })
            .collect();
        // The slots' relays hold the only senders left: the loop ends when every slot has.
        drop(asks);
        for (dir, reply) in asked {
            let _ = reply.send(ledger.record(&dir));
        }
        let outcomes: Vec<_> = threads
            .into_iter()
            .map(|(name, thread)| {
                let report = match thread {
                    Ok(t) => t.join().unwrap_or_else(|_| {
                        Err(Diagnostic::plain(format!(
                            "slot {name}: its run ended abnormally (a bug: please report it); \
                             its directory keeps what it recorded"
                        )))
                    }),
                    Err(e) => Err(Diagnostic::plain(format!(
                        "slot {name}: cannot start its thread: {e}"
                    ))),
                };
                SlotOutcome { name, report }
            })
            .collect();
        for (address, attenuator) in &attenuators {
            match attenuator.safe_state_every_channel() {
                Ok(()) => tracing::info!(
                    "attenuator at {address}: every channel in its safe state (the station's end)"
                ),
                Err(e) => tracing::error!("safe state: attenuator at {address}: {e}"),
            }
        }
        outcomes
    })
}

/// Gives the runs whose driven attenuator has the same address one owner of it between them,
/// each run its own channel; returns the shared attenuators by address. A run whose attenuator
/// cannot be started here starts its own, which reports why.
fn share_attenuators(runs: &mut [SlotRun]) -> Vec<(String, AttenuatorHandle)> {
    let mut shared: Vec<(String, AttenuatorHandle)> = Vec::new();
    for run in runs.iter_mut() {
        let bench = &run.request.bench;
        let Some(channel) = bench.slot.as_ref().map(|s| s.channel) else {
            continue;
        };
        let Some(address) = bench.roles.get("attenuator").map(|b| b.address.as_str()) else {
            continue;
        };
        let known = shared.iter().find(|(a, _)| a == address).map(|(_, h)| h);
        let handle = match known {
            Some(h) => h.clone(),
            None => match crate::wiring::shared_attenuator(bench) {
                Ok(Some((address, h))) => {
                    shared.push((address, h.clone()));
                    h
                }
                Ok(None) | Err(_) => continue,
            },
        };
        run.request.attenuator = Some(handle.on_channel(channel));
    }
    shared
}
