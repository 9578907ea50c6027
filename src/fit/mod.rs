//! The fitter: pure functions from recorded exchanges to a calibration table.

pub mod budget;
pub mod budget_cell;
pub mod cal_row;
pub mod caltable;
pub mod deembed;
pub mod device_rtt;
pub mod drift;
pub mod fitter;
pub mod gainmap;
pub mod infer_states;
pub mod late_tail;
pub mod level_spread;
pub mod lsq;
pub mod model;
pub mod ota;
pub mod pairs;
pub mod predict;
pub mod predict_file;
pub mod rtt;
pub mod state_labels;
pub mod stats;
pub mod switch_point;
pub mod verify;

pub use cal_row::{CalRow, RowSource};
pub use caltable::{
    read_caltable, write_caltable, write_table_rows, CalTableError, TableRow, CALTABLE_HEADER,
};
pub use deembed::Deembed;
pub use fitter::{burst_delays, fit, FitOptions, FitResult, FitSummary, Fitter};
