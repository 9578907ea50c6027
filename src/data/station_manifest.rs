//! A slotted run's top `manifest.toml`: the station's run as a whole, and its slots. Each slot's
//! own run is a standard run directory `slot-NAME/` beside it (with its own manifest), so every
//! command that reads a run reads a slot; this file only says which slots there are and how
//! each ended.

use super::manifest::write_atomic;
use super::RunStatus;
use serde::{Deserialize, Serialize};
use std::io;
use std::path::Path;

/// What the top manifest says it is (`kind`), telling it from a run's manifest.
pub const KIND_STATION: &str = "station";

/// The folder of slot `name` inside a slotted run's directory.
pub fn slot_dir_name(name: &str) -> String {
    format!("slot-{name}")
}

/// One slot, as the station's manifest lists it.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct SlotEntry {
    /// The slot's name (`[[slot]] name`).
    pub name: String,
    /// Its run directory, relative to the station's.
    pub dir: String,
    /// Where its run stands.
    pub status: RunStatus,
    /// Its run's identity in a results store.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub run_id: Option<String>,
    /// The unit it calibrated.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub unit_serial: Option<String>,
    /// Its bench time, s.
    pub bench_time_s: f64,
    /// Whether its acceptance limits were all met (false until it completes).
    #[serde(default)]
    pub accepted: bool,
    /// Why it did not complete.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub error: Option<String>,
}

/// The top manifest of a slotted run.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct StationManifest {
    /// Always [`KIND_STATION`].
    pub kind: String,
    /// `completed` when every slot completed; else `running`, or how the first slot that did
    /// not complete ended.
    pub status: RunStatus,
    /// Bench time of the station: the longest slot's (the slots run side by side), s.
    pub bench_time_s: f64,
    /// Wall time, s.
    pub wall_time_s: f64,
    /// Units completed per hour of bench time.
    pub units_per_hour: f64,
    /// Start, UTC, RFC 3339.
    pub started_utc: String,
    /// End, UTC, RFC 3339.
    pub finished_utc: Option<String>,
    /// The recipe's name.
    pub recipe: String,
    /// The bench file, absolute (empty for none).
    pub bench_file: String,
    /// taucal's version.
    pub taucal_version: String,
    /// The slots, in the bench's order.
    pub slot: Vec<SlotEntry>,
}

impl StationManifest {
    /// Writes it atomically.
    pub fn write(&self, path: &Path) -> io::Result<()> {
        let text = toml::to_string_pretty(self).map_err(io::Error::other)?;
        write_atomic(path, text.as_bytes())
    }

    /// Reads the manifest at `path` when it is a station's; `None` when it is another kind
    /// (a run's own), an error when it cannot be read.
    pub fn read_if_station(path: &Path) -> io::Result<Option<StationManifest>> {
        let text = std::fs::read_to_string(path)?;
        let table: toml::Table = toml::from_str(&text)
            .map_err(|e| io::Error::new(io::ErrorKind::InvalidData, e.to_string()))?;
        if table.get("kind").and_then(|k| k.as_str()) != Some(KIND_STATION) {
            return Ok(None);
        }
        toml::from_str(&text)
            .map(Some)
            .map_err(|e| io::Error::new(io::ErrorKind::InvalidData, e.to_string()))
    }

    /// Sets the station's status, bench time and rate from its slots.
    pub fn sum_up(&mut self) {
        self.bench_time_s = self.slot.iter().map(|s| s.bench_time_s).fold(0.0, f64::max);
        let done = self
            .slot
            .iter()
            .filter(|s| s.status == RunStatus::Completed)
            .count();
        self.units_per_hour = units_per_hour(done, self.bench_time_s);
        self.status = if done == self.slot.len() {
            RunStatus::Completed
        } else {
            self.slot
                .iter()
                .map(|s| s.status)
                .find(|s| *s != RunStatus::Completed)
                .unwrap_or(RunStatus::Running)
        };
    }
}

/// `units` completed in `bench_time_s` of bench time, per hour; 0 when no time passed.
pub fn units_per_hour(units: usize, bench_time_s: f64) -> f64 {
    if bench_time_s > 0.0 {
        units as f64 * 3600.0 / bench_time_s
    } else {
        0.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn entry(name: &str, status: RunStatus, t: f64) -> SlotEntry {
        SlotEntry {
            name: name.into(),
            dir: slot_dir_name(name),
            status,
            run_id: None,
            unit_serial: None,
            bench_time_s: t,
            accepted: false,
            error: None,
        }
    }

    fn station(slots: Vec<SlotEntry>) -> StationManifest {
        StationManifest {
            kind: KIND_STATION.into(),
            status: RunStatus::Running,
            bench_time_s: 0.0,
            wall_time_s: 0.0,
            units_per_hour: 0.0,
            started_utc: String::new(),
            finished_utc: None,
            recipe: "r".into(),
            bench_file: String::new(),
            taucal_version: String::new(),
            slot: slots,
        }
    }

    #[test]
    fn the_station_takes_its_longest_slot_and_counts_completed_units() {
        let mut m = station(vec![
            entry("a", RunStatus::Completed, 90.0),
            entry("b", RunStatus::Failed, 30.0),
            entry("c", RunStatus::Completed, 120.0),
        ]);
        m.sum_up();
        assert_eq!(m.bench_time_s, 120.0);
        // 2 units in 120 s: 60 units per hour.
        assert!((m.units_per_hour - 60.0).abs() < 1e-9);
        assert_eq!(m.status, RunStatus::Failed);
    }

    #[test]
    fn it_reads_back_and_is_told_from_a_run_manifest() {
        let dir = tempfile::tempdir().expect("tempdir");
        let path = dir.path().join("manifest.toml");
        let mut m = station(vec![entry("a", RunStatus::Completed, 10.0)]);
        m.sum_up();
        m.write(&path).expect("write");
        let back = StationManifest::read_if_station(&path)
            .expect("read")
            .expect("a station");
        assert_eq!(back.slot[0].name, "a");
        assert_eq!(back.status, RunStatus::Completed);
        std::fs::write(&path, "status = \"completed\"\n").expect("write");
        assert!(StationManifest::read_if_station(&path)
            .expect("read")
            .is_none());
    }
}
