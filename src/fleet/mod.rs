//! Population science on the results store: statistics across units per cell, outlier units,
//! and station bias. Everything here is pure: cells in, numbers out; the store and the command
//! line sit outside.

pub mod cells;
pub mod centred;
pub mod outliers;
pub mod plan;
pub mod plan_recipe;
pub mod plan_validate;
pub mod shown;
pub mod shrinkage;
pub mod station_cells;
pub mod stations;
pub mod tolerance;
