//! Records and the files that hold them: exchanges, the run directory and its manifest.

pub mod csv_io;
mod digits;
pub mod exchange;
pub mod file_parts;
pub mod manifest;
mod plain_line;
mod record_split;
pub mod record_version;
mod row_batches;
pub mod run_dir;
pub mod run_lock;
pub mod station_manifest;

pub use csv_io::{read_exchanges, ExchangeWriter, ReadError, RecordSink};
pub use exchange::{DeviceExchange, Exchange, Taken, STATUS_OK, TIMESTAMP_END_PS};
pub use manifest::{Manifest, RunStatus};
pub use record_version::{RecordVersion, EXCHANGES_COLUMNS, EXCHANGES_HEADER};
