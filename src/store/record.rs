//! One run as the store holds it, read from its run directory. The directory stays the record
//! of truth: this is a copy of its manifest, `caltable.csv`, `verify.csv` and acceptance, keyed
//! by the manifest's `run_id`, so importing a run twice gives one run.

use super::StoreError;
use crate::data::manifest::{sha256_hex, Manifest, RunStatus};
use crate::data::run_dir::files;
use crate::fit::read_caltable;
use std::path::Path;

/// The `runs` row.
#[derive(Debug, Clone, PartialEq)]
pub struct RunRow {
    /// The manifest's UUID.
    pub run_id: String,
    /// The unit calibrated.
    pub unit_serial: String,
    /// The station it ran on.
    pub station: String,
    /// Recipe name.
    pub recipe_name: String,
    /// SHA-256 of the recipe, hex.
    pub recipe_sha256: String,
    /// SHA-256 of the bench text, hex.
    pub bench_sha256: String,
    /// `running`, `completed`, `stopped` or `failed`.
    pub status: String,
    /// Completed with every acceptance limit met.
    pub accepted: bool,
    /// Every instrument simulated.
    pub simulated: bool,
    /// The simulated bench's seed.
    pub seed: Option<i64>,
    /// Start, UTC, RFC 3339.
    pub started_utc: String,
    /// End, UTC, RFC 3339, once it ended.
    pub finished_utc: Option<String>,
    /// Bench time, s.
    pub bench_time_s: f64,
    /// Wall time, s.
    pub wall_time_s: f64,
    /// taucal's version.
    pub taucal_version: String,
    /// The run directory, absolute.
    pub dir: String,
    /// The bench's name (a column beyond the contract's).
    pub bench_name: String,
}

/// A `cal_cells` row: one row of `caltable.csv`.
#[derive(Debug, Clone, PartialEq)]
pub struct CellRow {
    /// Channel center, MHz.
    pub center_mhz: i64,
    /// Bandwidth, MHz.
    pub bw_mhz: i64,
    /// Gain state.
    pub gain_index: i64,
    /// K, ps.
    pub delay_ps: f64,
    /// 95 % half-width, ps.
    pub ci95_ps: f64,
    /// Samples kept.
    pub n_used: i64,
    /// Samples rejected.
    pub n_rejected: i64,
    /// `measured`, `modelled`, …
    pub source: String,
}

/// A `verify_levels` row: one row of `verify.csv`.
#[derive(Debug, Clone, PartialEq)]
pub struct VerifyLevel {
    /// Channel center, MHz.
    pub center_mhz: i64,
    /// Bandwidth, MHz.
    pub bw_mhz: i64,
    /// Attenuator setting, dB.
    pub atten_db: f64,
    /// Nominal receive level, dBm.
    pub rx_power_dbm: f64,
    /// Equivalent free-space distance, m.
    pub equiv_distance_m: f64,
    /// Exchanges judged.
    pub n: i64,
    /// Median range error with a single-state calibration, m.
    pub range_error_single_m: f64,
    /// Median range error with the table, m.
    pub range_error_table_m: f64,
}

/// An `acceptance` row.
#[derive(Debug, Clone, PartialEq)]
pub struct AcceptRow {
    /// Limit name.
    pub name: String,
    /// What the run achieved; absent when nothing was measured.
    pub value: Option<f64>,
    /// The limit.
    pub limit_value: f64,
    /// Whether it was met.
    pub passed: bool,
}

/// Everything the store keeps of one run.
#[derive(Debug, Clone, PartialEq)]
pub struct RunRecord {
    /// The run.
    pub run: RunRow,
    /// The unit's model, from the DUT's identity.
    pub model: String,
    /// Its table.
    pub cells: Vec<CellRow>,
    /// Its verification.
    pub verify: Vec<VerifyLevel>,
    /// Its acceptance limits.
    pub acceptance: Vec<AcceptRow>,
}

/// A unit with no serial anyone could tell: stored, but under a name that says so.
pub const UNIDENTIFIED: &str = "UNIDENTIFIED";

impl RunRecord {
    /// Reads the run in `dir`. A directory without a manifest is not a run; a table or
    /// verification that is absent (a run still going, or one that stopped early) is empty.
    pub fn from_dir(dir: &Path) -> Result<RunRecord, StoreError> {
        let err = |path: &Path, message: String| StoreError::RunDir {
            path: path.display().to_string(),
            message,
        };
        let manifest_path = dir.join(files::MANIFEST);
        if !manifest_path.is_file() {
            return Err(err(
                dir,
                format!(
                    "has no {}: it is not a run directory (give directories `taucal run` wrote)",
                    files::MANIFEST
                ),
            ));
        }
        let m = Manifest::read(&manifest_path)
            .map_err(|e| err(&manifest_path, format!("cannot read the manifest: {e}")))?;
        let table_path = dir.join(files::CALTABLE);
        let cells = if table_path.is_file() {
            let file =
                std::fs::File::open(&table_path).map_err(|e| err(&table_path, e.to_string()))?;
            read_caltable(std::io::BufReader::new(file))
                .map_err(|e| err(&table_path, e.to_string()))?
                .into_iter()
                .map(|r| CellRow {
                    center_mhz: i64::from(r.center_mhz),
                    bw_mhz: i64::from(r.bw_mhz),
                    gain_index: i64::from(r.gain_index),
                    delay_ps: r.delay_ps,
                    ci95_ps: r.ci95_ps,
                    n_used: r.n_used as i64,
                    n_rejected: r.n_rejected as i64,
                    source: r.source.as_str().to_string(),
                })
                .collect()
        } else {
            Vec::new()
        };
        let verify_path = dir.join(files::VERIFY);
        let verify = if verify_path.is_file() {
            read_verify(&verify_path).map_err(|e| err(&verify_path, e))?
        } else {
            Vec::new()
        };
        let dir_abs = std::fs::canonicalize(dir).unwrap_or_else(|_| dir.to_path_buf());
        Ok(RunRecord::of_manifest(
            &m,
            &dir_abs.display().to_string(),
            cells,
            verify,
        ))
    }

    /// The record of manifest `m` with its table and verification.
    pub fn of_manifest(
        m: &Manifest,
        dir: &str,
        cells: Vec<CellRow>,
        verify: Vec<VerifyLevel>,
    ) -> RunRecord {
        let status = match m.status {
            RunStatus::Running => "running",
            RunStatus::Completed => "completed",
            RunStatus::Stopped => "stopped",
            RunStatus::Failed => "failed",
        };
        let acceptance: Vec<AcceptRow> = m
            .acceptance
            .iter()
            .map(|c| AcceptRow {
                name: c.name.clone(),
                value: c.value.is_finite().then_some(c.value),
                limit_value: c.limit,
                passed: c.passed,
            })
            .collect();
        let accepted = m.status == RunStatus::Completed && acceptance.iter().all(|a| a.passed);
        // The order a store gives rows back in, so a record read back equals the one written.
        let mut acceptance = acceptance;
        acceptance.sort_by(|a, b| a.name.cmp(&b.name));
        let mut verify = verify;
        verify.sort_by(|a, b| {
            (a.center_mhz, a.bw_mhz)
                .cmp(&(b.center_mhz, b.bw_mhz))
                .then(a.atten_db.total_cmp(&b.atten_db))
        });
        let mut cells = cells;
        cells.sort_by_key(|c| (c.center_mhz, c.bw_mhz, c.gain_index));
        let dut = m.instruments.get("dut").map(String::as_str).unwrap_or("");
        RunRecord {
            run: RunRow {
                run_id: run_id_of(m),
                unit_serial: m
                    .unit_serial
                    .clone()
                    .filter(|s| !s.is_empty())
                    .unwrap_or_else(|| serial_fallback(m)),
                station: m.station.clone().unwrap_or_default(),
                recipe_name: m.recipe.name.clone(),
                recipe_sha256: m.recipe.sha256.clone(),
                bench_sha256: m.bench.sha256.clone(),
                status: status.into(),
                accepted,
                simulated: m.bench.simulated,
                seed: m.seed.map(|s| s as i64),
                started_utc: m.started_utc.clone(),
                finished_utc: m.finished_utc.clone(),
                bench_time_s: m.bench_time_s,
                wall_time_s: m.wall_time_s,
                taucal_version: m.taucal_version.clone(),
                dir: dir.to_string(),
                bench_name: m.bench.name.clone(),
            },
            model: model_of(dut),
            cells,
            verify,
            acceptance,
        }
    }
}

/// The manifest's `run_id`; a run recorded before runs had one gets an id derived from what
/// never changes in its manifest, so importing it twice still gives one run.
fn run_id_of(m: &Manifest) -> String {
    if let Some(id) = m.run_id.as_ref().filter(|s| !s.is_empty()) {
        return id.clone();
    }
    let key = format!(
        "{}\n{}\n{}\n{:?}",
        m.started_utc, m.recipe.sha256, m.bench.sha256, m.seed
    );
    let h = sha256_hex(key.as_bytes());
    // Laid out as a UUID of version 8 (custom), variant RFC 4122.
    format!(
        "{}-{}-8{}-{:x}{}-{}",
        &h[0..8],
        &h[8..12],
        &h[13..16],
        0x8 | (u8::from_str_radix(&h[16..17], 16).unwrap_or(0) & 0x3),
        &h[17..20],
        &h[20..32]
    )
}

/// A unit serial for a manifest that names none: a simulated DUT's `SIM-<seed>`, else
/// [`UNIDENTIFIED`].
fn serial_fallback(m: &Manifest) -> String {
    match (m.bench.simulated, m.seed) {
        (true, Some(seed)) => format!("SIM-{seed}"),
        _ => UNIDENTIFIED.to_string(),
    }
}

/// The model in an identity: the second field of an IEEE 488.2 `*IDN?` reply
/// (maker,model,serial,firmware), else the identity itself.
fn model_of(identity: &str) -> String {
    let fields: Vec<&str> = identity.split(',').map(str::trim).collect();
    if fields.len() == 4 && !fields[1].is_empty() {
        fields[1].to_string()
    } else {
        identity.trim().to_string()
    }
}

/// Reads `verify.csv` by its header's names, so columns appended later are skipped.
fn read_verify(path: &Path) -> Result<Vec<VerifyLevel>, String> {
    let mut r = csv::Reader::from_path(path).map_err(|e| e.to_string())?;
    let header = r.headers().map_err(|e| e.to_string())?.clone();
    let at = |name: &str| {
        header
            .iter()
            .position(|h| h == name)
            .ok_or_else(|| format!("has no `{name}` column"))
    };
    let cols = [
        at("center_mhz")?,
        at("bw_mhz")?,
        at("atten_db")?,
        at("rx_power_dbm")?,
        at("equiv_distance_m")?,
        at("n")?,
        at("range_error_single_m")?,
        at("range_error_table_m")?,
    ];
    let mut out = Vec::new();
    for (i, rec) in r.records().enumerate() {
        let rec = rec.map_err(|e| e.to_string())?;
        let num = |k: usize| -> Result<f64, String> {
            let text = rec.get(cols[k]).unwrap_or("");
            text.parse::<f64>()
                .map_err(|_| format!("line {}: `{}` is not a number", i + 2, text))
        };
        out.push(VerifyLevel {
            center_mhz: num(0)? as i64,
            bw_mhz: num(1)? as i64,
            atten_db: num(2)?,
            rx_power_dbm: num(3)?,
            equiv_distance_m: num(4)?,
            n: num(5)? as i64,
            range_error_single_m: num(6)?,
            range_error_table_m: num(7)?,
        });
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_idn_reply_gives_its_model_field() {
        // IEEE 488.2 §10.14: *IDN? answers manufacturer, model, serial number, firmware.
        assert_eq!(
            model_of("Fenwhistle Devices,Vellisk-5,FW-V5-88341,build11"),
            "Vellisk-5"
        );
        assert_eq!(
            model_of("taucal simulated ranging device"),
            "taucal simulated ranging device"
        );
    }

    #[test]
    fn derived_run_ids_are_uuid_shaped_and_stable() {
        let id = "0123456789abcdef0123456789abcdef";
        let mut m: Manifest = toml::from_str(MINIMAL).expect("manifest");
        let a = run_id_of(&m);
        assert_eq!(a, run_id_of(&m), "stable");
        assert_eq!(a.len(), 36);
        assert_eq!(&a[14..15], "8", "version 8: {a}");
        assert!("89ab".contains(&a[19..20]), "variant: {a}");
        m.started_utc = "2026-12-03T00:00:01Z".into();
        assert_ne!(run_id_of(&m), a);
        m.run_id = Some(id.into());
        assert_eq!(run_id_of(&m), id);
    }

    const MINIMAL: &str = r#"
status = "completed"
bench_time_s = 1.0
wall_time_s = 1.0
taucal_version = "0.1.0"
started_utc = "2026-12-03T00:00:00Z"
instruments = {}
acceptance = []
results = {}
[recipe]
name = "r"
path = "r.toml"
sha256 = "aa"
overrides = []
[bench]
name = "b"
path = "b.toml"
sha256 = "bb"
simulated = true
[counts]
points = 0
bursts = 0
exchanges = 0
exchanges_ok = 0
"#;
}
