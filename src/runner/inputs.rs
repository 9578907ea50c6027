//! The files a run reads besides its recipe and bench — script files, driver files, and the
//! files the bench names (Touchstone files, the reference's certificate) — each with its
//! SHA-256, kept in the manifest so that `taucal resume` continues a run, and `taucal fit`
//! refits it, only with the very files it began with.

use crate::bench::Bench;
use crate::data::manifest::{sha256_hex, InputFile};
use crate::diagnostic::Diagnostic;
use crate::recipe::{Plan, Stage};
use std::collections::BTreeMap;

/// The run's script files (`script.STAGE`) and driver files (`driver.ROLE`). Inline scripts
/// are part of the recipe, whose own hash covers them.
pub fn input_files(plan: &Plan, bench: &Bench) -> BTreeMap<String, InputFile> {
    let mut files = BTreeMap::new();
    for stage in &plan.stages {
        if let Stage::Script(s) = stage {
            if s.source.file.path != plan.source.path {
                files.insert(
                    format!("script.{}", s.name),
                    InputFile {
                        path: s.source.file.path.display().to_string(),
                        sha256: sha256_hex(s.source.file.text.as_bytes()),
                    },
                );
            }
        }
    }
    files.extend(bench_files(bench));
    for (role, driver) in &bench.drivers {
        files.insert(
            format!("driver.{role}"),
            InputFile {
                path: driver.source.path.display().to_string(),
                sha256: sha256_hex(driver.source.text.as_bytes()),
            },
        );
    }
    files
}

/// The files the bench itself names, by their keys (`path.touchstone`,
/// `path.atten_touchstone.SETTING`, `reference.certificate`): what its numbers came from.
pub fn bench_files(bench: &Bench) -> BTreeMap<String, InputFile> {
    let mut files = BTreeMap::new();
    if let Some(m) = &bench.measured_path {
        for f in m.files() {
            files.insert(
                f.key.clone(),
                InputFile {
                    path: f.path.display().to_string(),
                    sha256: f.sha256.clone(),
                },
            );
        }
    }
    if let Some(c) = &bench.reference.certificate {
        files.insert(
            "reference.certificate".to_string(),
            InputFile {
                path: c.path.display().to_string(),
                sha256: c.sha256.clone(),
            },
        );
    }
    files
}

/// Refuses to go on when a file differs from what the run began with (`recorded`).
pub fn unchanged(
    recorded: &BTreeMap<String, InputFile>,
    now: &BTreeMap<String, InputFile>,
) -> Result<(), Diagnostic> {
    for (key, file) in now {
        let what = if key.starts_with("script.") {
            "script file"
        } else if key.starts_with("driver.") {
            "driver file"
        } else {
            "file the bench names"
        };
        match recorded.get(key) {
            Some(then) if then.sha256 == file.sha256 => {}
            Some(then) => {
                return Err(Diagnostic::in_file(
                    std::path::Path::new(&file.path),
                    format!("the {what} changed since the run began"),
                )
                .with_hint(format!(
                    "restore the {what} the run used (SHA-256 {}), or start a new run",
                    then.sha256
                )))
            }
            None => {
                return Err(Diagnostic::in_file(
                    std::path::Path::new(&file.path),
                    format!("the run did not begin with this {what} (`{key}`)"),
                )
                .with_hint("resume with the files the run began with, or start a new run"))
            }
        }
    }
    Ok(())
}
