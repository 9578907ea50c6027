//! Records and the files that hold them.

pub mod exchange;

pub use exchange::{DeviceExchange, Exchange, STATUS_OK};
