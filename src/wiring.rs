//! From a bench's role bindings to running instruments, each behind its lock on a runtime of its
//! own; handles returned.
//! A role at `sim:` is served by the in-process simulated bench; any other address is driven
//! by the role's driver file over the transport its address names. It sits above `instrument/`
//! and `sim/` because it chooses between them, so `instrument/` needs neither `sim/` nor the
//! runner.

use crate::bench::Bench;
use crate::clock::BenchClock;
use crate::diagnostic::{Diagnostic, KeyError};
use crate::instrument::driven_attenuator::DrivenAttenuator;
use crate::instrument::driven_chamber::DrivenChamber;
use crate::instrument::driven_console::DrivenConsole;
use crate::instrument::driver_file::{DriverFile, DriverKind};
use crate::instrument::scpi_client::ScpiClient;
use crate::instrument::transport::{Address, Link};
use crate::instrument::{
    Attenuator, AttenuatorHandle, Chamber, ChamberHandle, Owned, RangingDevice, RangingHandle,
};
use crate::sim::chamber::SimChamber;
use crate::sim::faults::FaultInjector;
use crate::sim::front::{
    SimAttenuatorFront, SimChamberFront, SimRangingFront, SimShared, SimWorld,
};
use crate::sim::model::SimBench;
use crate::sim::shared_reference::Seat;
use std::sync::Arc;

/// The instruments a run drives.
pub struct Instruments {
    /// The step attenuator.
    pub attenuator: AttenuatorHandle,
    /// The DUT.
    pub dut: RangingHandle,
    /// The climatic chamber, when the bench has one.
    pub chamber: Option<ChamberHandle>,
}

/// Where a chamber's safe state leaves its setpoint: room temperature (common practice).
const ROOM_C: f64 = 25.0;

/// Starts the bench's instruments, each on a runtime of its own. `seed` overrides a simulated
/// bench's own seed.
/// Driven instruments connect on their first command, so an unreachable instrument stops the
/// run (with its data kept) rather than failing validation.
pub fn connect(
    bench: &Bench,
    clock: Arc<BenchClock>,
    seed: u64,
) -> Result<Instruments, Diagnostic> {
    connect_slot(bench, clock, seed, None, None)
}

/// The driven attenuator of `bench` (a slot's bench), started once for all the slots that
/// share it: one connection, one owner, commands of the slots one at a time. Returns its
/// address, which slots sharing it have in common, and a handle on the whole instrument
/// ([`AttenuatorHandle::on_channel`] gives each slot its own); `None` for a simulated
/// attenuator, which each slot's in-process bench has in its own world.
pub fn shared_attenuator(bench: &Bench) -> Result<Option<(String, AttenuatorHandle)>, Diagnostic> {
    let Some((DriverKind::Attenuator(d), link)) = driven(bench, "attenuator")? else {
        return Ok(None);
    };
    let address = bench
        .roles
        .get("attenuator")
        .map(|b| b.address.clone())
        .unwrap_or_default();
    let driven: Box<dyn Attenuator> = Box::new(DrivenAttenuator::new(
        "attenuator",
        d,
        ScpiClient::new(link),
    ));
    Ok(Some((
        address,
        AttenuatorHandle::new(spawn("attenuator", driven)?),
    )))
}

/// [`connect`] for one slot of a station: an in-process simulated bench takes its place at the
/// shared reference through `seat` (a driven bench's reference is a real one, and the seat is
/// let go), and `attenuator`, when given, is the slot's channel of an attenuator the station's
/// slots share ([`shared_attenuator`]) instead of one of its own.
pub fn connect_slot(
    bench: &Bench,
    clock: Arc<BenchClock>,
    seed: u64,
    seat: Option<Seat>,
    attenuator: Option<AttenuatorHandle>,
) -> Result<Instruments, Diagnostic> {
    let in_process = |role: &str| bench.roles.get(role).is_none_or(|b| b.address == "sim:");
    let shared = if in_process("attenuator") || in_process("dut") {
        let Some(truth) = bench.sim.as_ref() else {
            return Err(bench.source.key_error(KeyError::new(
                "roles",
                "use `sim:` but the bench has no [sim] table",
                "add [sim], or give every role a driver file and an address",
            )));
        };
        let model = SimBench::new(truth, &truth.true_path(&bench.path), seed)
            .map_err(|e| bench.source.key_error(e))?;
        let world = SimWorld {
            bench: model,
            chamber: truth.chamber.as_ref().map(SimChamber::new),
            faults: FaultInjector::new(&truth.faults, seed),
        };
        let shared = SimShared::new(world, clock);
        let shared = match seat {
            Some(seat) => shared.with_seat(seat),
            None => shared,
        };
        Some((shared, truth.attenuator.switch_ms))
    } else {
        None
    };
    let attenuator = match attenuator {
        Some(handle) => handle,
        None => AttenuatorHandle::new(spawn("attenuator", own_attenuator(bench, &shared)?)?),
    };
    let dut: Box<dyn RangingDevice> = match (&shared, driven(bench, "dut")?) {
        (_, Some((DriverKind::RangingConsole(d), link))) => {
            Box::new(DrivenConsole::new("dut", *d, link))
        }
        (Some((shared, _)), _) => Box::new(SimRangingFront::new(shared.clone())),
        _ => return Err(unreachable_role(bench, "dut")),
    };
    let chamber = match (
        &shared,
        bench.roles.get("chamber"),
        driven(bench, "chamber")?,
    ) {
        (_, _, Some((DriverKind::Chamber(d), link))) => {
            let driven: Box<dyn Chamber> =
                Box::new(DrivenChamber::new("chamber", *d, ScpiClient::new(link)));
            Some(ChamberHandle(spawn("chamber", driven)?))
        }
        (Some((shared, _)), Some(b), _) if b.address == "sim:" => {
            let front = SimChamberFront::new(shared.clone(), ROOM_C);
            let front: Box<dyn Chamber> = Box::new(front);
            Some(ChamberHandle(spawn("chamber", front)?))
        }
        (_, Some(_), _) => return Err(unreachable_role(bench, "chamber")),
        (_, None, _) => None,
    };
    Ok(Instruments {
        attenuator,
        dut: RangingHandle(spawn("dut", dut)?),
        chamber,
    })
}

/// The bench's attenuator for this run alone: driven by its driver file on the slot's channel,
/// or the simulated one in front of `shared`'s world.
fn own_attenuator(
    bench: &Bench,
    shared: &Option<(SimShared, f64)>,
) -> Result<Box<dyn Attenuator>, Diagnostic> {
    Ok(match (shared, driven(bench, "attenuator")?) {
        (_, Some((DriverKind::Attenuator(d), link))) => Box::new(
            DrivenAttenuator::new("attenuator", d, ScpiClient::new(link))
                .on_channel(bench.slot.as_ref().map_or(1, |s| s.channel)),
        ),
        (Some((shared, switch_ms)), _) => Box::new(SimAttenuatorFront::new(
            shared.clone(),
            *switch_ms,
            bench.attenuator.range_db[1],
        )),
        _ => return Err(unreachable_role(bench, "attenuator")),
    })
}

/// [`Owned::spawn`], its failure (no runtime could be started) as a diagnostic.
fn spawn<T: ?Sized + Send + 'static>(
    role: &str,
    instrument: Box<T>,
) -> Result<Owned<T>, Diagnostic> {
    Owned::spawn(role, instrument)
        .map_err(|e| Diagnostic::plain(format!("cannot start the runtime for the {role}: {e}")))
}

/// The driver and link of a role not served in-process (validated when the bench was loaded).
fn driven(bench: &Bench, role: &str) -> Result<Option<(DriverKind, Link)>, Diagnostic> {
    let (Some(binding), Some(DriverFile { kind, link, .. })) =
        (bench.roles.get(role), bench.drivers.get(role))
    else {
        return Ok(None);
    };
    let address = Address::parse(&binding.address).map_err(|e| {
        bench.source.key_error(KeyError::new(
            format!("roles.{role}.address"),
            e.explained(),
            "see the README's addresses",
        ))
    })?;
    let timeout = binding.timeout_ms.map_or(link.timeout, |ms| {
        std::time::Duration::from_micros((ms * 1000.0) as u64)
    });
    Ok(Some((
        kind.clone(),
        Link::new(address, &link.line_ending, timeout),
    )))
}

fn unreachable_role(bench: &Bench, role: &str) -> Diagnostic {
    bench.source.key_error(KeyError::new(
        format!("roles.{role}.driver"),
        "names no driver this build can run for the role",
        "use the role's sim driver at `sim:`, or a driver file of the role's kind",
    ))
}
