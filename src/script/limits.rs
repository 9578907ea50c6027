//! The script sandbox: how much a recipe script may do. Scripts reach instruments, files and
//! processes only through the registered API; Rhai itself has no file, network or process access.

use rhai::Engine;

/// Most operations one script stage may run before it is stopped as a runaway.
pub const MAX_OPERATIONS: u64 = 50_000_000;

/// An engine with the sandbox limits set and `eval` disabled.
pub fn sandboxed_engine() -> Engine {
    let mut engine = Engine::new();
    engine.set_max_operations(MAX_OPERATIONS);
    engine.set_max_call_levels(64);
    engine.set_max_expr_depths(64, 32);
    engine.set_max_string_size(1 << 20);
    engine.set_max_array_size(1 << 20);
    engine.set_max_map_size(1 << 16);
    engine.disable_symbol("eval");
    engine
}
