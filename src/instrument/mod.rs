//! Instruments: capability traits, the task that owns each instrument, typed handles,
//! transports and line framing, the SCPI client, and driver files that turn a transport into a
//! capability without a recompile.

pub mod capability;
pub mod command;
pub mod driven_attenuator;
pub mod driven_chamber;
pub mod driven_console;
pub mod driver_file;
pub mod error;
pub mod handles;
pub mod line;
pub mod owner;
pub mod scpi_client;
pub mod template;
pub mod transport;

pub use capability::{Attenuator, BurstSpec, Chamber, RangingDevice};
pub use error::InstrumentError;
pub use handles::{AttenuatorHandle, ChamberHandle, RangingHandle};
pub use owner::Owned;
