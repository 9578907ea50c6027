//! Typed handles over the owned instruments, one per capability.

use super::capability::{Attenuator, BurstSpec, Chamber, RangingDevice};
use super::owner::Owned;
use super::InstrumentError;
use crate::data::DeviceExchange;

/// Handle on the bench's attenuator.
#[derive(Clone)]
pub struct AttenuatorHandle(pub Owned<dyn Attenuator>);

impl AttenuatorHandle {
    /// The instrument's identity.
    pub fn identify(&self) -> Result<String, InstrumentError> {
        self.0.call(|a| a.identify())
    }
    /// Sets the attenuation.
    pub fn set_atten_db(&self, db: f64) -> Result<(), InstrumentError> {
        self.0.call(move |a| a.set_atten_db(db))
    }
    /// Reads the attenuation back.
    pub fn atten_db(&self) -> Result<f64, InstrumentError> {
        self.0.call(|a| a.atten_db())
    }
    /// Maximum attenuation.
    pub fn safe_state(&self) -> Result<(), InstrumentError> {
        self.0.call(|a| a.safe_state())
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
