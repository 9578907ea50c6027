//! The script sandbox: how much a recipe script may do (its time and log volume are in
//! `budget.rs`). Scripts reach instruments, files and processes only through the registered
//! API; Rhai itself has no file, network or process access.

use rhai::Engine;

/// Most operations one script stage may run before it is stopped as a runaway.
pub const MAX_OPERATIONS: u64 = 50_000_000;

/// Most elements in one array value, nested ones included. Rhai measures a value after each
/// change by walking it, so filling an array costs the square of its length: 65 536 elements (a
/// few thousand exchanges as maps) take seconds, a million took minutes.
pub const MAX_ARRAY_SIZE: usize = 1 << 16;
/// Most entries in one map value, nested ones included.
pub const MAX_MAP_SIZE: usize = 1 << 16;
/// Longest string, bytes.
pub const MAX_STRING_BYTES: usize = 1 << 20;

/// An engine with the sandbox limits set and `eval` disabled.
pub fn sandboxed_engine() -> Engine {
    let mut engine = Engine::new();
    engine.set_max_operations(MAX_OPERATIONS);
    engine.set_max_call_levels(64);
    engine.set_max_expr_depths(64, 32);
    engine.set_max_string_size(MAX_STRING_BYTES);
    engine.set_max_array_size(MAX_ARRAY_SIZE);
    engine.set_max_map_size(MAX_MAP_SIZE);
    engine.disable_symbol("eval");
    engine
}
