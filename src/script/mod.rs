//! Rhai scripts in recipes: the registered API, the sandbox, a stage's budget (time, computing,
//! log volume), and running a script stage.

pub mod api;
pub mod budget;
pub mod limits;
pub mod stage;

pub use stage::{check, run_script};
