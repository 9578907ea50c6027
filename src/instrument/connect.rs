//! From a bench's role bindings to running instruments: one owner task each, handles returned.

use super::{AttenuatorHandle, ChamberHandle, Owned, RangingHandle};
use crate::bench::Bench;
use crate::diagnostic::{Diagnostic, KeyError};
use crate::runner::BenchClock;
use crate::sim::chamber::SimChamber;
use crate::sim::front::{
    SimAttenuatorFront, SimChamberFront, SimRangingFront, SimShared, SimWorld,
};
use crate::sim::model::SimBench;
use std::sync::Arc;

/// Where a chamber's safe state leaves its setpoint: room temperature (common practice).
const ROOM_C: f64 = 25.0;

/// The instruments a run drives.
pub struct Instruments {
    /// The step attenuator.
    pub attenuator: AttenuatorHandle,
    /// The DUT.
    pub dut: RangingHandle,
    /// The climatic chamber, when the bench has one.
    pub chamber: Option<ChamberHandle>,
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
    let chamber_model = truth.chamber.as_ref().map(SimChamber::new);
    let has_chamber = bench.roles.contains_key("chamber");
    let shared = SimShared::new(
        SimWorld {
            bench: model,
            chamber: chamber_model,
        },
        clock,
    );
    let attenuator = SimAttenuatorFront::new(
        shared.clone(),
        truth.attenuator.switch_ms,
        bench.attenuator.range_db[1],
    );
    let chamber = has_chamber.then(|| {
        let front = SimChamberFront::new(shared.clone(), ROOM_C);
        ChamberHandle(Owned::spawn(rt, "chamber", Box::new(front)))
    });
    Ok(Instruments {
        attenuator: AttenuatorHandle(Owned::spawn(rt, "attenuator", Box::new(attenuator))),
        dut: RangingHandle(Owned::spawn(
            rt,
            "dut",
            Box::new(SimRangingFront::new(shared)),
        )),
        chamber,
    })
}
