//! In-process front ends: the simulated bench's instruments behind the capability traits.
//!
//! Both front ends share one [`SimBench`], so the attenuator's setting is what the ranging
//! device's radios see. Time they take is spent on the run's [`BenchClock`], never read from
//! the wall, so a run is the same for a seed whether it runs in virtual time or paced.
//!
//! The radio model itself sees only the time its instruments spend (its own virtual clock), not
//! the runner's waits: a served instrument in another process cannot see those waits either, and
//! this way the in-process bench and the served one (`taucal sim serve`) make the same model
//! calls at the same model times, so they record the same exchanges for a seed. A simulated
//! chamber is different: temperature changes while the runner waits (that is what a soak is), so
//! it follows the run's bench time — in-process the run's clock, served the wall (the runner of
//! a served bench waits in wall time).

use super::chamber::SimChamber;
use super::device_report::DeviceReport;
use super::faults::{CommandFault, FaultInjector};
use super::model::{BurstRequest, SimBench};
use super::shared_reference::Seat;
use super::truth::SimFaultsTruth;
use crate::clock::{BenchClock, ClockMode};
use crate::data::DeviceExchange;
use crate::instrument::{Attenuator, BurstSpec, Chamber, InstrumentError, RangingDevice};
use async_trait::async_trait;
use std::sync::{Arc, Mutex, MutexGuard};
use std::time::Duration;

/// Status of an exchange the (simulated) device reports as failed.
pub const STATUS_FAIL: &str = "fail";

/// Everything simulated on the bench: the radio model and, optionally, a chamber around the DUT.
pub struct SimWorld {
    /// The conducted bench and its radios.
    pub bench: SimBench,
    /// The chamber, when the bench has one.
    pub chamber: Option<SimChamber>,
    /// Injected faults.
    pub faults: FaultInjector,
}

impl SimWorld {
    /// A world without a chamber.
    pub fn radios(bench: SimBench) -> Self {
        SimWorld {
            bench,
            chamber: None,
            faults: FaultInjector::new(&SimFaultsTruth::default(), 0),
        }
    }

    /// Brings the chamber to bench time `now_ps` and hands the DUT its temperature.
    fn settle_to(&mut self, now_ps: u64) {
        if let Some(c) = &mut self.chamber {
            c.advance_to(now_ps);
            self.bench.set_dut_temp_c(c.dut_c());
        }
    }
}

/// The shared world plus the clock its instruments spend time on.
#[derive(Clone)]
pub struct SimShared {
    model: Arc<Mutex<SimWorld>>,
    model_clock: Arc<BenchClock>,
    clock: Arc<BenchClock>,
    chamber_clock: Arc<BenchClock>,
    seat: Option<Arc<Seat>>,
}

impl SimShared {
    /// Wraps a world and the clock its instruments spend time on (the run's clock in-process,
    /// the server's own when served).
    pub fn new(world: SimWorld, clock: Arc<BenchClock>) -> Self {
        SimShared {
            model: Arc::new(Mutex::new(world)),
            model_clock: Arc::new(BenchClock::new(ClockMode::Virtual)),
            chamber_clock: clock.clone(),
            clock,
            seat: None,
        }
    }

    /// The same world as one slot of a station whose reference it shares through `seat`:
    /// its exchanges contend for the reference's air time, on the run's clock.
    pub fn with_seat(mut self, seat: Seat) -> Self {
        seat.attach(self.clock.clone());
        self.seat = Some(Arc::new(seat));
        self
    }

    /// The same world with its chamber, and so the DUT's temperature, following `clock`
    /// instead of the instruments' clock.
    pub fn with_chamber_clock(mut self, clock: Arc<BenchClock>) -> Self {
        self.chamber_clock = clock;
        self
    }

    /// Sets the attenuation; returns the wall time to wait for the switch (zero in virtual
    /// time). Switching takes `switch_ps` only when the setting changes.
    pub fn set_atten_db(&self, db: f64, switch_ps: u64) -> Result<Duration, InstrumentError> {
        let changed = {
            let mut m = self.lock("attenuator")?;
            let changed = m.bench.atten_db() != db;
            m.bench.set_atten_db(db);
            changed
        };
        Ok(if changed {
            self.spend_now(switch_ps)
        } else {
            Duration::ZERO
        })
    }

    /// Where a simulated attenuator stands when it powers up: at its safe state, so a bench
    /// switched on before any command has its receivers protected. Takes no switching time.
    pub fn power_up_atten_db(&self, db: f64) {
        // A poisoned lock cannot happen before the first command; nothing to power up then.
        if let Ok(mut m) = self.model.lock() {
            m.bench.set_atten_db(db);
        }
    }

    /// The fault, if any, that strikes the next command sent to the bench's instruments (one
    /// stream for all of them, drawn in the order commands arrive).
    pub fn command_fault(&self, role: &str) -> Result<Option<CommandFault>, InstrumentError> {
        Ok(self.lock(role)?.faults.command())
    }

    /// The DUT was initialised (identified) again, which a restart requires before bursts.
    pub fn dut_initialised(&self) -> Result<(), InstrumentError> {
        self.lock("dut")?.faults.dut_initialised();
        Ok(())
    }

    /// The attenuation.
    pub fn atten_db(&self) -> Result<f64, InstrumentError> {
        Ok(self.lock("attenuator")?.bench.atten_db())
    }

    /// Runs a burst at the model's time now; returns what the DUT reports (in its form, after
    /// any injected failures of single exchanges) and the wall time to wait.
    pub fn run_burst(
        &self,
        request: &BurstRequest,
    ) -> Result<(DeviceReport, Duration), InstrumentError> {
        let (report, duration_ps) = {
            let start_ps = self.model_clock.now_ps();
            let now_ps = self.chamber_clock.now_ps();
            let mut world = self.lock("dut")?;
            world.faults.burst(request.frames)?;
            world.settle_to(now_ps);
            // On a shared reference the burst books its exchanges' air time on the run's
            // clock, which all slots share from the start; the model's own clock takes the
            // same delays.
            let delays_ps = match &self.seat {
                Some(seat) => {
                    let run_start_ps = self.clock.now_ps();
                    let nominal = world.bench.departures_ps(run_start_ps, request.frames);
                    seat.book(
                        run_start_ps,
                        &nominal,
                        world.bench.exchange_air_ps(),
                        world.bench.interval_ps(),
                    )
                }
                None => Vec::new(),
            };
            let mut outcome = world.bench.run_burst_delayed(start_ps, request, &delays_ps);
            for x in &mut outcome.exchanges {
                if world.faults.exchange_fails() {
                    *x = DeviceExchange {
                        t1_ps: x.t1_ps,
                        ..DeviceExchange::empty(STATUS_FAIL)
                    };
                }
            }
            let report = world.bench.report(outcome.exchanges, request);
            (report, outcome.duration_ps)
        };
        Ok((report, self.spend_now(duration_ps)))
    }

    /// The DUT's temperature, if the bench has one (a chamber's, else the ambient).
    pub fn dut_temp_c(&self) -> Result<Option<f64>, InstrumentError> {
        let now_ps = self.chamber_clock.now_ps();
        let mut world = self.lock("dut")?;
        world.settle_to(now_ps);
        Ok(world.bench.dut_temp_c())
    }

    /// Runs `f` on the chamber at the chamber's bench time now.
    pub fn with_chamber<R>(
        &self,
        f: impl FnOnce(&mut SimChamber, u64) -> R,
    ) -> Result<R, InstrumentError> {
        let now_ps = self.chamber_clock.now_ps();
        let mut world = self.lock("chamber")?;
        world.settle_to(now_ps);
        world
            .chamber
            .as_mut()
            .map(|c| f(c, now_ps))
            .ok_or_else(|| InstrumentError::Failed {
                role: "chamber".into(),
                message: "the simulated bench has no [sim.chamber]".into(),
            })
    }

    fn spend_now(&self, ps: u64) -> Duration {
        self.model_clock.spend(ps);
        self.clock.spend(ps)
    }

    fn lock(&self, role: &str) -> Result<MutexGuard<'_, SimWorld>, InstrumentError> {
        self.model.lock().map_err(|_| InstrumentError::Failed {
            role: role.to_string(),
            message: "the simulated bench failed earlier".into(),
        })
    }
}

async fn pause(wall: Duration) {
    if !wall.is_zero() {
        tokio::time::sleep(wall).await;
    }
}

/// The simulated step attenuator.
pub struct SimAttenuatorFront {
    shared: SimShared,
    switch_ps: u64,
    max_db: f64,
}

impl SimAttenuatorFront {
    /// An attenuator whose safe state is `max_db`; it powers up there.
    pub fn new(shared: SimShared, switch_ms: f64, max_db: f64) -> Self {
        shared.power_up_atten_db(max_db);
        SimAttenuatorFront {
            shared,
            switch_ps: BenchClock::ms_to_ps(switch_ms),
            max_db,
        }
    }
}

#[async_trait]
impl Attenuator for SimAttenuatorFront {
    async fn identify(&mut self) -> Result<String, InstrumentError> {
        Ok(format!(
            "taucal simulated step attenuator, 0-{} dB",
            self.max_db
        ))
    }

    async fn set_atten_db(&mut self, db: f64) -> Result<(), InstrumentError> {
        if let Some(fault) = self.shared.command_fault("attenuator")? {
            return Err(fault.error("attenuator"));
        }
        pause(self.shared.set_atten_db(db, self.switch_ps)?).await;
        Ok(())
    }

    async fn atten_db(&mut self) -> Result<f64, InstrumentError> {
        self.shared.atten_db()
    }

    async fn safe_state(&mut self) -> Result<(), InstrumentError> {
        self.set_atten_db(self.max_db).await
    }
}

/// The simulated DUT, ranging against the simulated reference.
pub struct SimRangingFront {
    shared: SimShared,
}

impl SimRangingFront {
    /// A ranging device on the shared model.
    pub fn new(shared: SimShared) -> Self {
        SimRangingFront { shared }
    }
}

#[async_trait]
impl RangingDevice for SimRangingFront {
    async fn identify(&mut self) -> Result<String, InstrumentError> {
        // Identifying is how the runner (re)initialises a device after a restart.
        self.shared.dut_initialised()?;
        Ok(
            "taucal simulated ranging device (FTM initiator) with simulated reference responder"
                .into(),
        )
    }

    async fn burst(&mut self, spec: &BurstSpec) -> Result<Vec<DeviceExchange>, InstrumentError> {
        let request = BurstRequest {
            frames: spec.frames,
            center_mhz: spec.channel.center_mhz,
            bw_mhz: spec.channel.bw_mhz,
        };
        if let Some(fault) = self.shared.command_fault("dut")? {
            return Err(fault.error("dut"));
        }
        let (report, wall) = self.shared.run_burst(&request)?;
        pause(wall).await;
        Ok(report.rows)
    }

    async fn safe_state(&mut self) -> Result<(), InstrumentError> {
        Ok(())
    }

    async fn temperature_c(&mut self) -> Result<Option<f64>, InstrumentError> {
        self.shared.dut_temp_c()
    }
}

/// The simulated climatic chamber.
pub struct SimChamberFront {
    shared: SimShared,
    room_c: f64,
}

impl SimChamberFront {
    /// A chamber whose safe state is `room_c`.
    pub fn new(shared: SimShared, room_c: f64) -> Self {
        SimChamberFront { shared, room_c }
    }
}

#[async_trait]
impl Chamber for SimChamberFront {
    async fn identify(&mut self) -> Result<String, InstrumentError> {
        Ok("taucal simulated climatic chamber".into())
    }

    async fn set_setpoint_c(&mut self, setpoint_c: f64) -> Result<(), InstrumentError> {
        self.shared
            .with_chamber(|c, now_ps| c.set_setpoint_c(now_ps, setpoint_c))
    }

    async fn air_c(&mut self) -> Result<f64, InstrumentError> {
        self.shared.with_chamber(|c, _| c.air_c())
    }

    async fn safe_state(&mut self) -> Result<(), InstrumentError> {
        let room_c = self.room_c;
        self.shared
            .with_chamber(|c, now_ps| c.set_setpoint_c(now_ps, room_c))
    }
}
