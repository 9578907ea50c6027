//! Instruments: capability traits, the task that owns each instrument, and typed handles.

pub mod capability;
pub mod connect;
pub mod error;
pub mod handles;
pub mod owner;

pub use capability::{Attenuator, BurstSpec, Chamber, RangingDevice};
pub use error::InstrumentError;
pub use handles::{AttenuatorHandle, ChamberHandle, RangingHandle};
pub use owner::Owned;
