//! The Python that the checks against independent Python libraries run.

use std::io::Write;
use std::process::Command;

/// The Python that can `import` each of `modules`: `TAUCAL_TEST_PYTHON` (`.ci/run` installs
/// them into its virtual environment and sets it), else `python3`. Where one is missing:
/// under CI (`CI` set), which requires them, the test fails; elsewhere `None`, and the skip of
/// `check` is said with `pip` (the packages to install).
pub fn python_with(modules: &[&str], check: &str, pip: &str) -> Option<String> {
    let python = std::env::var("TAUCAL_TEST_PYTHON").unwrap_or_else(|_| "python3".into());
    let ok = Command::new(&python)
        .args(["-c", &format!("import {}", modules.join(", "))])
        .output()
        .is_ok_and(|o| o.status.success());
    if ok {
        return Some(python);
    }
    assert!(
        std::env::var_os("CI").is_none(),
        "{pip} is missing for {python}; .ci/run installs it and sets TAUCAL_TEST_PYTHON"
    );
    // Written to the handle, not with eprintln!, which the test harness captures.
    let _ = writeln!(
        std::io::stderr(),
        "SKIPPED {check}: {python} cannot import {} (pip install {pip})",
        modules.join(", ")
    );
    None
}
