//! Capability traits: what the runner may ask of an instrument, whatever drives it.
//!
//! The runner depends on these traits only; simulated, TCP and serial instruments all sit
//! behind them. Optional capabilities are default methods that answer "unsupported".

use super::InstrumentError;
use crate::data::DeviceExchange;
use crate::recipe::Channel;
use async_trait::async_trait;

/// A programmable step attenuator.
#[async_trait]
pub trait Attenuator: Send {
    /// The instrument's identity string.
    async fn identify(&mut self) -> Result<String, InstrumentError>;
    /// Sets the attenuation and returns once it has taken effect.
    async fn set_atten_db(&mut self, db: f64) -> Result<(), InstrumentError>;
    /// Reads back the attenuation.
    async fn atten_db(&mut self) -> Result<f64, InstrumentError>;
    /// Goes to maximum attenuation, the state that protects both receivers.
    async fn safe_state(&mut self) -> Result<(), InstrumentError>;
    /// How many channels the instrument has, each set on its own (most have one).
    fn channels(&self) -> u32 {
        1
    }
    /// Makes `channel` (from 1) the one the following commands set and read: slots sharing a
    /// multi-channel attenuator take turns on one instrument, each naming its own channel
    /// (a single-channel attenuator has only the one, and ignores this).
    fn select_channel(&mut self, _channel: u32) {}
}

/// One burst of ranging exchanges to run.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BurstSpec {
    /// Exchanges in the burst.
    pub frames: u32,
    /// Channel to range on.
    pub channel: Channel,
}

/// A ranging device (the DUT as FTM initiator) that runs bursts against the reference.
#[async_trait]
pub trait RangingDevice: Send {
    /// The instrument's identity string.
    async fn identify(&mut self) -> Result<String, InstrumentError>;
    /// Runs one burst and returns what the device reported, one entry per exchange.
    async fn burst(&mut self, spec: &BurstSpec) -> Result<Vec<DeviceExchange>, InstrumentError>;
    /// Stops any ranging in progress.
    async fn safe_state(&mut self) -> Result<(), InstrumentError>;
    /// Temperature at the device, where the bench measures one.
    async fn temperature_c(&mut self) -> Result<Option<f64>, InstrumentError> {
        Ok(None)
    }
    /// The unit's serial number, where its identity names one (a driver's `serial` capture).
    async fn serial(&mut self) -> Result<Option<String>, InstrumentError> {
        Ok(None)
    }
}

/// A climatic chamber around the DUT.
#[async_trait]
pub trait Chamber: Send {
    /// The instrument's identity string.
    async fn identify(&mut self) -> Result<String, InstrumentError>;
    /// Sets the air temperature setpoint.
    async fn set_setpoint_c(&mut self, setpoint_c: f64) -> Result<(), InstrumentError>;
    /// Reads the air temperature.
    async fn air_c(&mut self) -> Result<f64, InstrumentError>;
    /// Reads the product (DUT) temperature, where the chamber has a sensor on it.
    async fn product_c(&mut self) -> Result<Option<f64>, InstrumentError> {
        Ok(None)
    }
    /// Puts the chamber in its safe state (room temperature, or stopped, as its driver says),
    /// so nothing is left hot or cold unattended.
    async fn safe_state(&mut self) -> Result<(), InstrumentError>;
}
