//! From a bench's role bindings to running instruments: one owner task each, handles returned.

use super::{AttenuatorHandle, Owned, RangingHandle};
use crate::bench::Bench;
use crate::diagnostic::{Diagnostic, KeyError};
use crate::runner::BenchClock;
use crate::sim::front::{SimAttenuatorFront, SimRangingFront, SimShared};
use crate::sim::model::SimBench;
use std::sync::Arc;

/// The instruments a run drives.
pub struct Instruments {
    /// The step attenuator.
    pub attenuator: AttenuatorHandle,
    /// The DUT.
    pub dut: RangingHandle,
}

/// Starts the bench's instruments on `rt`. `seed` overrides a simulated bench's own seed.
pub fn connect(
    bench: &Bench,
    clock: Arc<BenchClock>,
    seed: u64,
    rt: &tokio::runtime::Handle,
) -> Result<Instruments, Diagnostic> {
    let Some(truth) = bench.sim.as_ref().filter(|_| bench.is_simulated()) else {
        return Err(bench.source.key_error(KeyError::new(
            "roles",
            "name instruments this build cannot reach",
            "use `sim:` addresses for the simulated bench",
        )));
    };
    let model = SimBench::new(truth, &bench.path, seed).map_err(|e| bench.source.key_error(e))?;
    let shared = SimShared::new(model, clock);
    let attenuator = SimAttenuatorFront::new(
        shared.clone(),
        truth.attenuator.switch_ms,
        bench.attenuator.range_db[1],
    );
    Ok(Instruments {
        attenuator: AttenuatorHandle(Owned::spawn(rt, "attenuator", Box::new(attenuator))),
        dut: RangingHandle(Owned::spawn(
            rt,
            "dut",
            Box::new(SimRangingFront::new(shared)),
        )),
    })
}
