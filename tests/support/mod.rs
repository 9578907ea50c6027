//! A small builder that runs the real `taucal` binary in a temporary directory.

pub mod browser;

use std::path::{Path, PathBuf};
use std::process::Command;

pub mod bench;
pub mod python;
pub mod served;
pub mod sweep;

/// The repository root (recipes, benches).
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// A path under the repository root, as a string argument.
pub fn repo(rel: &str) -> String {
    root().join(rel).display().to_string()
}

/// One invocation of the binary.
pub struct Taucal {
    args: Vec<String>,
    dir: tempfile::TempDir,
}

/// What an invocation did.
pub struct Outcome {
    pub code: i32,
    pub stdout: String,
    pub stderr: String,
    pub dir: tempfile::TempDir,
}

impl Taucal {
    pub fn new() -> Self {
        Taucal {
            args: Vec::new(),
            dir: tempfile::tempdir().expect("temporary directory"),
        }
    }

    /// Reuses the working directory of an earlier outcome.
    pub fn in_dir(dir: tempfile::TempDir) -> Self {
        Taucal {
            args: Vec::new(),
            dir,
        }
    }

    /// Copies folders of the repository (`recipes`, `drivers`, `demo-data` …) into the working
    /// directory, so a command written with the repository's relative paths runs as printed
    /// without writing into the repository.
    pub fn with_repo(self, folders: &[&str]) -> Self {
        for folder in folders {
            copy_tree(&root().join(folder), &self.dir.path().join(folder));
        }
        self
    }

    pub fn args<I, S>(mut self, args: I) -> Self
    where
        I: IntoIterator<Item = S>,
        S: Into<String>,
    {
        self.args.extend(args.into_iter().map(Into::into));
        self
    }

    /// The working directory, to prepare files in before the run.
    pub fn dir(&self) -> &Path {
        self.dir.path()
    }

    /// Writes a file into the working directory.
    pub fn file(self, name: &str, text: &str) -> Self {
        let path = self.dir.path().join(name);
        if let Some(parent) = path.parent() {
            std::fs::create_dir_all(parent).expect("mkdir");
        }
        std::fs::write(path, text).expect("write file");
        self
    }

    pub fn run(self) -> Outcome {
        let out = Command::new(env!("CARGO_BIN_EXE_taucal"))
            .args(&self.args)
            .current_dir(self.dir.path())
            .env_remove("RUST_LOG")
            .output()
            .expect("run taucal");
        Outcome {
            code: out.status.code().unwrap_or(-1),
            stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
            stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
            dir: self.dir,
        }
    }
}

impl Outcome {
    pub fn path(&self, rel: &str) -> PathBuf {
        self.dir.path().join(rel)
    }

    pub fn read(&self, rel: &str) -> String {
        std::fs::read_to_string(self.path(rel))
            .unwrap_or_else(|e| panic!("read {rel}: {e}\nstderr:\n{}", self.stderr))
    }

    /// Panics with the whole output unless the exit status is `code`.
    pub fn expect_code(&self, code: i32) -> &Self {
        assert_eq!(
            self.code, code,
            "exit status {} (wanted {code})\nstdout:\n{}\nstderr:\n{}",
            self.code, self.stdout, self.stderr
        );
        assert!(!self.stderr.contains("panicked"), "panic:\n{}", self.stderr);
        self
    }

    pub fn has_dir(&self, rel: &str) -> bool {
        Path::is_dir(&self.path(rel))
    }
}

/// An exchanges file without its `time_s` column. Bench time is the runner's own clock
/// (virtual on an in-process simulated bench, wall time through served instruments); every other
/// column is what the bench reported, so two runs of one seed agree on them.
pub fn without_bench_time(text: &str) -> String {
    let Some(at) = text
        .lines()
        .next()
        .and_then(|h| h.split(',').position(|c| c == "time_s"))
    else {
        return text.to_string();
    };
    text.lines()
        .map(|line| {
            let mut fields: Vec<&str> = line.split(',').collect();
            if at < fields.len() {
                fields.remove(at);
            }
            fields.join(",") + "\n"
        })
        .collect()
}

/// Copies a folder and everything in it.
fn copy_tree(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).expect("mkdir");
    for entry in std::fs::read_dir(from).expect("read folder") {
        let entry = entry.expect("folder entry");
        let target = to.join(entry.file_name());
        if entry.file_type().expect("file type").is_dir() {
            copy_tree(&entry.path(), &target);
        } else {
            std::fs::copy(entry.path(), &target).expect("copy");
        }
    }
}

/// A CSV file's data rows as numbers (a field that is not one reads as NaN).
pub fn csv_numbers(text: &str) -> Vec<Vec<f64>> {
    text.lines()
        .skip(1)
        .map(|l| {
            l.split(',')
                .map(|v| v.parse().unwrap_or(f64::NAN))
                .collect()
        })
        .collect()
}

/// A `caltable.csv` cut to its design §4 contract columns (those up to `source`): what a table
/// of either layout holds alike.
pub fn contract_columns(table: &str) -> String {
    table
        .lines()
        .map(|l| l.split(',').take(8).collect::<Vec<_>>().join(",") + "\n")
        .collect()
}

/// Panics if `exchanges.csv` holds any exchange (stage, point, burst, seq) twice.
pub fn assert_recorded_once(exchanges: &str) {
    let mut keys = std::collections::BTreeSet::new();
    for line in exchanges.lines().skip(1) {
        let key: Vec<&str> = line.split(',').take(4).collect();
        assert!(keys.insert(key.join(",")), "recorded twice: {line}");
    }
}

/// Panics unless two calibration tables have the same rows and each delay agrees within the
/// 99 % bound of the difference of two independent estimates: the root sum of squares of the
/// 95 % half-widths, widened by the normal quantiles 2.576 / 1.960.
pub fn assert_tables_agree(a: &str, b: &str) {
    let (a, b) = (csv_numbers(a), csv_numbers(b));
    assert_eq!(a.len(), b.len());
    for (x, y) in a.iter().zip(&b) {
        let limit = (x[4].powi(2) + y[4].powi(2)).sqrt() * 2.576 / 1.960;
        assert!(
            (x[3] - y[3]).abs() <= limit,
            "gain {}: {} vs {} (limit {limit})",
            x[2],
            x[3],
            y[3]
        );
    }
}

/// Says that a test is skipped because `tool` is missing, where `cargo test` shows it whether or
/// not the test's own output is captured; under CI (`CI` set), where `.ci/run` installs the
/// tool, a missing tool fails the test instead.
pub fn skip_without(tool: &str, test: &str) {
    use std::io::Write;
    assert!(
        std::env::var_os("CI").is_none(),
        "{test}: {tool} is missing; CI installs it (.ci/run)"
    );
    // Written to the handle, not with eprintln!, which the test harness captures.
    let _ = writeln!(
        std::io::stderr(),
        "SKIPPED {test}: {tool} is not installed (apt-get install {tool} to run it)"
    );
}

/// An `exec:` address for `words`, each quoted for the address's shell-like splitting.
pub fn exec_address(words: &[&str]) -> String {
    let quoted: Vec<String> = words
        .iter()
        .map(|w| format!("'{}'", w.replace('\'', r"'\''")))
        .collect();
    format!("exec:{}", quoted.join(" "))
}
