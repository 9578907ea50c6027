//! taucal's integration tests: one binary, modules by area.

mod support;

mod bad_input;
mod browser;
mod budget;
mod calibration;
mod chamber;
mod demo_run;
mod examples;
mod exec;
mod fit_offline;
mod fleet;
mod fleet_pages;
mod forms;
mod fuzz;
mod gain_switch;
mod infer;
mod instruments;
mod late_paths;
mod measured_path;
mod plan;
mod plan_preview;
mod points;
mod record_version;
mod report;
mod run_forms;
mod science;
mod script_limits;
mod slots;
mod store;
mod touchstone;
mod truth;
mod unattended;
mod visa;
mod watch;
