//! The runner: executes a plan's stages against instrument handles, through one clock, into a
//! record sink.

pub mod accept;
pub mod cells;
pub mod claim;
pub mod connect;
pub mod error;
pub mod estimate;
pub mod events;
pub mod finalise;
pub mod inputs;
pub mod journal;
pub mod ledger;
pub mod outputs;
pub mod prepare;
pub mod record;
pub mod report_watch;
pub mod request;
pub mod resume;
pub mod run;
pub mod session;
pub mod slots;
pub mod station_estimate;
pub mod stop;
pub mod sweep;
pub mod tabulate;

pub use cells::run_cells;
pub use error::RunError;
pub use events::{RunEvent, RunObserver, Unobserved};
pub use session::{PointSummary, Session};
pub use stop::StopFlag;
pub use sweep::{run_gain_map, run_soak, run_sweep, run_verify};
