//! Typed handles over the owned instruments, one per capability.

use super::capability::{Attenuator, BurstSpec, Chamber, RangingDevice};
use super::owner::{BoxFuture, Owned};
use super::InstrumentError;
use crate::data::DeviceExchange;

/// Handle on the bench's attenuator, or on one channel of an attenuator that several slots
/// share: every command of a channel handle names its channel, inside the same job as the
/// command, so commands of different slots never interleave between the two.
#[derive(Clone)]
pub struct AttenuatorHandle {
    owned: Owned<dyn Attenuator>,
    channel: Option<u32>,
}

impl AttenuatorHandle {
    /// A handle on the whole instrument (its own channel, when it has one, as built).
    pub fn new(owned: Owned<dyn Attenuator>) -> Self {
        AttenuatorHandle {
            owned,
            channel: None,
        }
    }

    /// A handle on the same instrument that drives its channel `channel` (from 1).
    pub fn on_channel(&self, channel: u32) -> Self {
        AttenuatorHandle {
            owned: self.owned.clone(),
            channel: Some(channel),
        }
    }

    fn call<R, F>(&self, f: F) -> Result<R, InstrumentError>
    where
        R: Send + 'static,
        F: for<'a> FnOnce(&'a mut dyn Attenuator) -> BoxFuture<'a, Result<R, InstrumentError>>
            + Send
            + 'static,
    {
        let channel = self.channel;
        self.owned.call(move |a| {
            if let Some(c) = channel {
                a.select_channel(c);
            }
            f(a)
        })
    }

    /// The instrument's identity.
    pub fn identify(&self) -> Result<String, InstrumentError> {
        self.call(|a| a.identify())
    }
    /// Sets the attenuation.
    pub fn set_atten_db(&self, db: f64) -> Result<(), InstrumentError> {
        self.call(move |a| a.set_atten_db(db))
    }
    /// Reads the attenuation back.
    pub fn atten_db(&self) -> Result<f64, InstrumentError> {
        self.call(|a| a.atten_db())
    }
    /// Maximum attenuation.
    pub fn safe_state(&self) -> Result<(), InstrumentError> {
        self.call(|a| a.safe_state())
    }
    /// Every channel of the instrument at maximum attenuation, one after another; each
    /// channel is tried whatever the others did, and the first failure is returned.
    pub fn safe_state_every_channel(&self) -> Result<(), InstrumentError> {
        let channels = self.owned.call(|a| {
            let n = a.channels();
            Box::pin(async move { Ok(n) })
        })?;
        (1..=channels)
            .map(|c| self.on_channel(c).safe_state())
            .fold(Ok(()), Result::and)
    }
}

/// Handle on the bench's ranging device (the DUT).
#[derive(Clone)]
pub struct RangingHandle(pub Owned<dyn RangingDevice>);

impl RangingHandle {
    /// The instrument's identity.
    pub fn identify(&self) -> Result<String, InstrumentError> {
        self.0.call(|d| d.identify())
    }
    /// Runs a burst.
    pub fn burst(&self, spec: BurstSpec) -> Result<Vec<DeviceExchange>, InstrumentError> {
        self.0
            .call(move |d| Box::pin(async move { d.burst(&spec).await }))
    }
    /// Stops ranging.
    pub fn safe_state(&self) -> Result<(), InstrumentError> {
        self.0.call(|d| d.safe_state())
    }
    /// Temperature at the device, if measured.
    pub fn temperature_c(&self) -> Result<Option<f64>, InstrumentError> {
        self.0.call(|d| d.temperature_c())
    }
    /// The unit's serial number, where it reports one.
    pub fn serial(&self) -> Result<Option<String>, InstrumentError> {
        self.0.call(|d| d.serial())
    }
}

/// Handle on the bench's climatic chamber.
#[derive(Clone)]
pub struct ChamberHandle(pub Owned<dyn Chamber>);

impl ChamberHandle {
    /// The instrument's identity.
    pub fn identify(&self) -> Result<String, InstrumentError> {
        self.0.call(|c| c.identify())
    }
    /// Sets the setpoint.
    pub fn set_setpoint_c(&self, setpoint_c: f64) -> Result<(), InstrumentError> {
        self.0.call(move |c| c.set_setpoint_c(setpoint_c))
    }
    /// Reads the air temperature.
    pub fn air_c(&self) -> Result<f64, InstrumentError> {
        self.0.call(|c| c.air_c())
    }
    /// Reads the product temperature, if the chamber has a sensor on it.
    pub fn product_c(&self) -> Result<Option<f64>, InstrumentError> {
        self.0.call(|c| c.product_c())
    }
    /// Into its safe state.
    pub fn safe_state(&self) -> Result<(), InstrumentError> {
        self.0.call(|c| c.safe_state())
    }
}
