//! `manifest.toml`: what ran, on what, with what outcome. Rewritten atomically (temporary file,
//! sync, rename) so a crash never leaves half a manifest.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::io::{self, Write};
use std::path::Path;

/// Where a run stands.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum RunStatus {
    /// Under way (or the process died; see `taucal resume`).
    Running,
    /// Every stage ran and the table was written.
    Completed,
    /// Stopped by an interrupt; data kept.
    Stopped,
    /// Stopped by an instrument or script failure; data kept.
    Failed,
}

/// The recipe that ran.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct RecipeInfo {
    /// Recipe name.
    pub name: String,
    /// Path as given.
    pub path: String,
    /// Absolute path, for `taucal resume` from another directory.
    #[serde(default)]
    pub file: String,
    /// SHA-256 of the file's bytes, hex.
    pub sha256: String,
    /// `--set` overrides, as given.
    pub overrides: Vec<String>,
}

/// The bench it ran on.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct BenchInfo {
    /// Bench name.
    pub name: String,
    /// Path, or the built-in label.
    pub path: String,
    /// Absolute path (empty for the built-in bench).
    #[serde(default)]
    pub file: String,
    /// SHA-256 of the bench text, hex.
    pub sha256: String,
    /// True when every instrument was simulated.
    pub simulated: bool,
}

/// A file the run read besides its recipe and bench: a script file or a driver file.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct InputFile {
    /// Path as read.
    pub path: String,
    /// SHA-256 of its bytes, hex.
    pub sha256: String,
}

/// Faults seen on one instrument.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct FaultTally {
    /// Failed commands.
    pub faults: u64,
    /// Retries made.
    pub retries: u64,
    /// Device restarts detected.
    pub restarts: u64,
}

/// Exchange counts.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct Counts {
    /// Attenuation points visited.
    pub points: u64,
    /// Bursts run.
    pub bursts: u64,
    /// Exchanges recorded.
    pub exchanges: u64,
    /// Exchanges with status `ok`.
    pub exchanges_ok: u64,
}

/// One acceptance limit and how the run did against it.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct AcceptCheck {
    /// Limit name as in the recipe's `[accept]`.
    pub name: String,
    /// The limit.
    pub limit: f64,
    /// What the run achieved.
    pub value: f64,
    /// Whether the limit was met.
    pub passed: bool,
}

impl AcceptCheck {
    /// One line for the log and the terminal: the value to four significant digits, the
    /// relation it truly has to the limit, and the verdict — or, when the run did not finish
    /// (`judged` false), that its data were not judged.
    pub fn summary(&self, judged: bool) -> String {
        let verdict = match (judged, self.passed) {
            (false, _) => "not judged: the run did not finish",
            (true, true) => "met",
            (true, false) => "NOT MET",
        };
        let limit = self.limit;
        if !self.value.is_finite() {
            return format!(
                "{}: nothing measured (limit {limit}) — {verdict}",
                self.name
            );
        }
        let op = match (self.name.starts_with("max"), self.value <= self.limit) {
            (true, true) => "≤",
            (true, false) => ">",
            (false, _) if self.value >= self.limit => "≥",
            (false, _) => "<",
        };
        format!(
            "{}: {} {op} {limit} — {verdict}",
            self.name,
            significant(self.value)
        )
    }
}

/// A number with four significant digits, the way a limit is read.
fn significant(v: f64) -> String {
    if v.fract() == 0.0 || !v.is_finite() {
        return v.to_string();
    }
    let decimals = (3 - v.abs().log10().floor() as i32).clamp(0, 9) as usize;
    format!("{v:.decimals$}")
}

/// The single-state calibration a verification compared against.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct SingleState {
    /// Channel center, MHz.
    pub center_mhz: u32,
    /// Bandwidth, MHz.
    pub bw_mhz: u32,
    /// The reference receive level.
    pub rx_dbm: f64,
    /// The gain state in force there.
    pub gain_index: u32,
    /// Its K from the table.
    pub delay_ps: f64,
}

/// How the table was fitted, so `taucal fit` can do the same offline.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct FitInfo {
    /// Rejection threshold, scaled MADs.
    pub reject_mad: f64,
    /// Stages whose exchanges verified the table instead of fitting it.
    pub verify_stages: Vec<String>,
    /// Single-state calibrations used by the verification.
    #[serde(default)]
    pub single_state: Vec<SingleState>,
    /// The DUT's number of gain states, when the recipe gave it (unmeasured ones are modelled).
    #[serde(default)]
    pub gain_states: Option<u32>,
    /// The K the DUT reported removing from its ranges (a range-reporting device that says);
    /// absent when it did not say, and the bench or driver must.
    #[serde(default)]
    pub applied_k_ps: Option<f64>,
    /// The population model that predicted unmeasured cells (`[fit] predict`), as found.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub predict: Option<String>,
}

impl Default for FitInfo {
    fn default() -> Self {
        FitInfo {
            reject_mad: crate::recipe::plan::DEFAULT_REJECT_MAD,
            verify_stages: Vec::new(),
            single_state: Vec::new(),
            gain_states: None,
            applied_k_ps: None,
            predict: None,
        }
    }
}

/// The whole manifest.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Manifest {
    /// Where the run stands.
    pub status: RunStatus,
    /// Bench time elapsed (virtual on a simulated bench), s.
    pub bench_time_s: f64,
    /// Wall time elapsed, s.
    pub wall_time_s: f64,
    /// taucal's version.
    pub taucal_version: String,
    /// Seed of the simulated bench, when simulated.
    pub seed: Option<u64>,
    /// The run's identity in a results store: a UUID (absent in runs recorded before runs had
    /// one).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub run_id: Option<String>,
    /// The unit calibrated: `--unit`, else the DUT's reported serial, else a simulated DUT's.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub unit_serial: Option<String>,
    /// The station it ran on: `--station`, else the bench's `[bench] station`, else the host.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub station: Option<String>,
    /// True while the results store lacks the run's latest state (it was down): `taucal store
    /// import` or `sync` catches up.
    #[serde(default)]
    pub store_pending: bool,
    /// Start, UTC, RFC 3339.
    pub started_utc: String,
    /// End, UTC, RFC 3339.
    pub finished_utc: Option<String>,
    /// Why the run did not complete.
    pub error: Option<String>,
    /// The recipe.
    pub recipe: RecipeInfo,
    /// The bench.
    pub bench: BenchInfo,
    /// Script files (`script.STAGE`) and driver files (`driver.ROLE`) the run read.
    #[serde(default)]
    pub inputs: BTreeMap<String, InputFile>,
    /// Identity each instrument reported, by role.
    pub instruments: BTreeMap<String, String>,
    /// Counts.
    pub counts: Counts,
    /// Acceptance limits and outcomes.
    pub acceptance: Vec<AcceptCheck>,
    /// Values scripts recorded with `record(name, value)`.
    pub results: BTreeMap<String, toml::Value>,
    /// Fit settings.
    #[serde(default)]
    pub fit: FitInfo,
    /// Whether a simulated bench kept wall-clock pace (`--realtime`).
    #[serde(default)]
    pub realtime: bool,
    /// How many times `taucal resume` continued this run.
    #[serde(default)]
    pub resumes: u32,
    /// Instrument faults and retries, by role.
    #[serde(default)]
    pub faults: BTreeMap<String, FaultTally>,
    /// Points skipped after their retries ran out.
    #[serde(default)]
    pub skipped_points: Vec<String>,
    /// Record version of the run's `exchanges.csv` (see
    /// [`RecordVersion`](super::RecordVersion)); a manifest without it is of a version 1 run.
    #[serde(default = "version_one")]
    pub record_version: u32,
    /// Version of the run's `caltable.csv` layout: 1 ends at `source`, 2 appends the budget
    /// columns ([`CALTABLE_VERSION`](crate::fit::caltable::CALTABLE_VERSION)).
    #[serde(default = "version_one")]
    pub caltable_version: u32,
    /// The reference unit's calibration certificate, when the bench names one (its file's
    /// SHA-256 is under `inputs`, as `reference.certificate`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reference_certificate: Option<CertificateRecord>,
    /// The bench's slot this run calibrated (`[[slot]] name`), when the bench has slots: the
    /// run directory is then `slot-NAME/` inside the station's run.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub slot: Option<String>,
}

/// What a run records of the reference's certificate.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct CertificateRecord {
    /// The certificate's id.
    pub id: String,
    /// The issuing lab.
    pub lab: String,
    /// Date of issue, YYYY-MM-DD.
    pub issued: String,
    /// Due date, YYYY-MM-DD.
    pub due: String,
    /// True when the run started after the due date.
    pub overdue: bool,
}

/// Runs recorded before the manifest said otherwise wrote record version 1.
fn version_one() -> u32 {
    1
}

impl Manifest {
    /// Writes the manifest atomically to `path`. On a full disk, where the temporary copy finds
    /// no room, it is rewritten in place instead: the old manifest's own blocks hold the new one,
    /// and a manifest that says how the run ended is worth the small risk of a torn write.
    pub fn write(&self, path: &Path) -> io::Result<()> {
        let text = toml::to_string_pretty(self).map_err(io::Error::other)?;
        match write_atomic(path, text.as_bytes()) {
            Err(e) if e.kind() == io::ErrorKind::StorageFull => {
                overwrite(path, text.as_bytes()).map_err(|_| e)
            }
            other => other,
        }
    }

    /// Reads a manifest.
    pub fn read(path: &Path) -> io::Result<Manifest> {
        let text = std::fs::read_to_string(path)?;
        toml::from_str(&text).map_err(|e| {
            // A station's top manifest is not a run's: say where its runs are.
            let station = toml::from_str::<toml::Table>(&text).ok().and_then(|t| {
                let kind = t.get("kind")?.as_str()? == super::station_manifest::KIND_STATION;
                let first = t
                    .get("slot")?
                    .as_array()?
                    .first()?
                    .get("dir")?
                    .as_str()?
                    .to_string();
                kind.then_some(first)
            });
            let message = match station {
                Some(first) => format!(
                    "this is a station's run of several slots; each slot's run is in its own \
                     directory, e.g. {}",
                    path.parent()
                        .unwrap_or(Path::new("."))
                        .join(first)
                        .display()
                ),
                None => e.to_string(),
            };
            io::Error::new(io::ErrorKind::InvalidData, message)
        })
    }
}

/// Writes `bytes` to `path` through a synced temporary file and a rename. On failure the
/// temporary file is removed, so a file that cannot be written leaves no partial copy behind.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> io::Result<()> {
    let tmp = path.with_extension("tmp");
    let write = || -> io::Result<()> {
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    };
    write().inspect_err(|_| {
        let _ = std::fs::remove_file(&tmp);
    })
}

/// Rewrites the file at `path` in place, reusing its blocks.
fn overwrite(path: &Path, bytes: &[u8]) -> io::Result<()> {
    let mut f = std::fs::OpenOptions::new()
        .write(true)
        .truncate(false)
        .open(path)?;
    f.write_all(bytes)?;
    f.set_len(bytes.len() as u64)?;
    f.sync_all()
}

/// Lower-case hex SHA-256 of `bytes`.
pub fn sha256_hex(bytes: &[u8]) -> String {
    use sha2::{Digest, Sha256};
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn check(name: &str, limit: f64, value: f64, passed: bool) -> AcceptCheck {
        AcceptCheck {
            name: name.into(),
            limit,
            value,
            passed,
        }
    }

    #[test]
    fn an_acceptance_summary_states_the_true_relation_rounded() {
        assert_eq!(
            check("max_ci95_ps", 50.0, 57.938_765, false).summary(true),
            "max_ci95_ps: 57.94 > 50 — NOT MET"
        );
        assert_eq!(
            check("max_ci95_ps", 60.0, 41.123_456, true).summary(true),
            "max_ci95_ps: 41.12 ≤ 60 — met"
        );
        assert_eq!(
            check("min_gain_states", 3.0, 2.0, false).summary(true),
            "min_gain_states: 2 < 3 — NOT MET"
        );
        assert_eq!(
            check("max_range_error_m", 0.05, 0.012_345_6, true).summary(true),
            "max_range_error_m: 0.01235 ≤ 0.05 — met"
        );
        assert_eq!(
            check("max_range_error_m", 0.05, f64::NAN, false).summary(true),
            "max_range_error_m: nothing measured (limit 0.05) — NOT MET"
        );
        assert_eq!(
            check("min_gain_states", 3.0, 3.0, true).summary(false),
            "min_gain_states: 3 ≥ 3 — not judged: the run did not finish"
        );
    }

    #[test]
    fn sha256_matches_the_fips_180_2_example() {
        // FIPS 180-2, appendix B.1: SHA-256("abc").
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }
}
