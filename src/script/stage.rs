//! Running a script stage, and compiling one for `taucal check`.

use super::api::{self, Bridge};
use super::budget::Budget;
use super::limits::sandboxed_engine;
use crate::diagnostic::Diagnostic;
use crate::recipe::{Script, ScriptSource, Vars};
use crate::runner::{RunError, Session};
use rhai::{EvalAltResult, Position, Scope};
use std::cell::RefCell;
use std::rc::Rc;

fn located(src: &ScriptSource, pos: Position, message: String) -> Diagnostic {
    match (pos.line(), pos.position()) {
        (Some(line), col) => src.error_at(line, col.unwrap_or(1), message),
        _ => Diagnostic::at(&src.file, Some(src.start..src.start), message),
    }
}

/// Compiles a script without running it: syntax errors at the right line of the file.
pub fn check(src: &ScriptSource) -> Result<(), Diagnostic> {
    sandboxed_engine()
        .compile(&src.code)
        .map(drop)
        .map_err(|e| located(src, e.1, format!("script syntax: {}", e.0)))
}

fn describe(e: &EvalAltResult) -> String {
    match e {
        EvalAltResult::ErrorTooManyOperations(_) => format!(
            "the script ran more than {} operations and was stopped (an endless loop?)",
            super::limits::MAX_OPERATIONS
        ),
        EvalAltResult::ErrorInFunctionCall(name, _, inner, _) => {
            format!("in `{name}`: {}", describe(inner))
        }
        EvalAltResult::ErrorRuntime(msg, _) => msg.to_string(),
        EvalAltResult::ErrorDataTooLarge(what, _) => format!(
            "{what} grew past the sandbox's limit (arrays {} elements, maps {} entries, strings {} bytes)",
            super::limits::MAX_ARRAY_SIZE,
            super::limits::MAX_MAP_SIZE,
            super::limits::MAX_STRING_BYTES
        ),
        other => {
            let text = other.to_string();
            text.split(" (line ").next().unwrap_or(&text).to_string()
        }
    }
}

/// Runs a script stage on the session.
pub fn run_script(
    session: Rc<RefCell<Session>>,
    script: &Script,
    vars: &Vars,
) -> Result<(), RunError> {
    session
        .borrow_mut()
        .begin_stage(&script.name, script.channel)?;
    let stop = session.borrow().stop().clone();
    let bench_s = session.borrow().clock().now_s();
    let bridge = Bridge {
        session: session.clone(),
        fault: Rc::new(RefCell::new(None)),
        budget: Rc::new(Budget::start(script.limits, bench_s)),
    };
    let mut engine = sandboxed_engine();
    api::register(&mut engine, &bridge, vars);
    // A stop request or a spent budget ends a script between operations, even one that never
    // calls the bench. The clocks are read every 256 operations (a few microseconds apart).
    let budget = bridge.budget.clone();
    engine.on_progress(move |ops| {
        let stopped = stop.requested() || budget.over().is_some();
        let spent = ops % 256 == 0
            && session
                .try_borrow()
                .is_ok_and(|s| budget.exceeded(s.clock().now_s()).is_some());
        (stopped || spent).then_some(rhai::Dynamic::UNIT)
    });
    let src = &script.source;
    let ast = engine.compile(&src.code).map_err(|e| {
        RunError::Script(Box::new(located(
            src,
            e.1,
            format!("script syntax: {}", e.0),
        )))
    })?;
    let mut scope = Scope::new();
    scope.push_constant("vars", api::vars_map(vars));
    let result = engine.run_ast_with_scope(&mut scope, &ast);
    drop(engine);
    match result {
        Ok(()) => Ok(()),
        Err(e) => {
            let fault = bridge.fault.borrow_mut().take();
            if let Some(over) = bridge.budget.over() {
                let (message, hint) = over.describe();
                let mut d = located(
                    src,
                    e.position(),
                    format!("script stage `{}`: {message}", script.name),
                );
                d.hint = Some(hint);
                return Err(RunError::Script(Box::new(d)));
            }
            if matches!(*e, EvalAltResult::ErrorTerminated(..)) {
                return Err(RunError::Interrupted);
            }
            let hint = match fault {
                Some(
                    f @ (RunError::Instrument(_)
                    | RunError::Io { .. }
                    | RunError::Interrupted
                    | RunError::Diverged { .. }),
                ) => return Err(f),
                Some(RunError::Refused { hint, .. }) => Some(hint),
                _ => None,
            };
            let mut d = located(
                src,
                e.position(),
                format!("script stage `{}`: {}", script.name, describe(&e)),
            );
            d.hint = hint;
            Err(RunError::Script(Box::new(d)))
        }
    }
}
