//! Rhai scripts in recipes: the registered API, the sandbox, and running a script stage.

pub mod api;
pub mod limits;
pub mod stage;

pub use stage::{check, run_script};
