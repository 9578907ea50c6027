//! taucal: a declarative test-recipe runner that calibrates the group delay of Wi-Fi ranging
//! devices per receive gain state, on real or simulated benches.

pub mod bench;
pub mod cli;
pub mod clock;
pub mod data;
pub mod diagnostic;
pub mod export;
pub mod fit;
pub mod fleet;
pub mod in_turn;
pub mod instrument;
pub mod recipe;
pub mod report;
pub mod runner;
pub mod script;
pub mod sim;
pub mod store;
pub mod text_file;
pub mod toml_input;
pub mod touchstone;
pub mod web;
pub mod wiring;
