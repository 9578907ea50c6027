//! In-process front ends: the simulated bench's instruments behind the capability traits.
//!
//! Both front ends share one [`SimBench`], so the attenuator's setting is what the ranging
//! device's radios see. Time they take is spent on the run's [`BenchClock`], never read from
//! the wall, so a run is the same for a seed whether it runs in virtual time or paced.

use super::model::{BurstRequest, SimBench};
use crate::data::DeviceExchange;
use crate::instrument::{Attenuator, BurstSpec, InstrumentError, RangingDevice};
use crate::runner::BenchClock;
use async_trait::async_trait;
use std::sync::{Arc, Mutex, MutexGuard};

/// The shared model plus the clock its instruments spend time on.
#[derive(Clone)]
pub struct SimShared {
    model: Arc<Mutex<SimBench>>,
    clock: Arc<BenchClock>,
}

impl SimShared {
    /// Wraps a model and a clock.
    pub fn new(model: SimBench, clock: Arc<BenchClock>) -> Self {
        SimShared {
            model: Arc::new(Mutex::new(model)),
            clock,
        }
    }

    fn lock(&self, role: &str) -> Result<MutexGuard<'_, SimBench>, InstrumentError> {
        self.model.lock().map_err(|_| InstrumentError::Failed {
            role: role.to_string(),
            message: "the simulated bench failed earlier".into(),
        })
    }

    async fn spend(&self, ps: u64) {
        let pause = self.clock.spend(ps);
        if !pause.is_zero() {
            tokio::time::sleep(pause).await;
        }
    }
}

/// The simulated step attenuator.
pub struct SimAttenuatorFront {
    shared: SimShared,
    switch_ps: u64,
    max_db: f64,
}

impl SimAttenuatorFront {
    /// An attenuator whose safe state is `max_db`.
    pub fn new(shared: SimShared, switch_ms: f64, max_db: f64) -> Self {
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
        let changed = {
            let mut m = self.shared.lock("attenuator")?;
            let changed = m.atten_db() != db;
            m.set_atten_db(db);
            changed
        };
        if changed {
            self.shared.spend(self.switch_ps).await;
        }
        Ok(())
    }

    async fn atten_db(&mut self) -> Result<f64, InstrumentError> {
        Ok(self.shared.lock("attenuator")?.atten_db())
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
        let outcome = {
            let start_ps = self.shared.clock.now_ps();
            self.shared.lock("dut")?.run_burst(start_ps, &request)
        };
        self.shared.spend(outcome.duration_ps).await;
        Ok(outcome.exchanges)
    }

    async fn safe_state(&mut self) -> Result<(), InstrumentError> {
        Ok(())
    }

    async fn temperature_c(&mut self) -> Result<Option<f64>, InstrumentError> {
        Ok(self.shared.lock("dut")?.ambient_c())
    }
}
