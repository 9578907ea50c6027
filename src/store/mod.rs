//! The results store: every run indexed in a database, so people and programs can ask what a
//! unit's table is, which units failed, and hand firmware provisioning the accepted table of a
//! serial number. The run directory stays the record of truth; the store is a copy that
//! `store import` and `store sync` can always rebuild.
//!
//! SQLite (embedded, the default) and PostgreSQL (a server shared by a line of stations) sit
//! behind one [`Store`] trait; a run is written in one transaction, so a store never holds half
//! a run. Nothing here reads instruments or runs anything: data flow into the store only.

pub mod error;
pub mod postgres;
pub mod record;
pub mod resolve;
pub mod schema;
pub mod sqlite;
pub mod sync;
pub mod table;
pub mod url;

pub use error::StoreError;
pub use record::{RunRecord, RunRow};
pub use url::StoreUrl;

/// A run's state as a store holds it, for `sync` to see what a destination lacks.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RunVersion {
    /// The run.
    pub run_id: String,
    /// Its status.
    pub status: String,
    /// When it ended, once it did.
    pub finished_utc: Option<String>,
}

/// One line of `store units`.
#[derive(Debug, Clone, PartialEq)]
pub struct UnitSummary {
    /// Serial number.
    pub serial: String,
    /// Model, from the DUT's identity.
    pub model: String,
    /// Runs recorded.
    pub runs: i64,
    /// Start of its latest run, UTC.
    pub last_run_utc: String,
    /// Status of its latest run.
    pub last_status: String,
    /// Whether any of its runs was accepted (so `store table` has a table to give).
    pub accepted: bool,
}

/// One cell of a unit's latest accepted table, for the fleet's statistics.
#[derive(Debug, Clone, PartialEq)]
pub struct FleetCell {
    /// The unit.
    pub serial: String,
    /// The station its latest accepted run was on.
    pub station: String,
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
    /// Exchanges the estimate used or rejected (the cell's cost on the bench).
    pub exchanges: i64,
}

/// A results store.
pub trait Store {
    /// Its URL, password hidden.
    fn url(&self) -> String;
    /// Writes `runs` (inserting or replacing each, by `run_id`) in one transaction.
    fn put_runs(&mut self, runs: &[RunRecord]) -> Result<(), StoreError>;
    /// The state of every run it holds.
    fn run_versions(&mut self) -> Result<Vec<RunVersion>, StoreError>;
    /// One run, whole.
    fn get_run(&mut self, run_id: &str) -> Result<Option<RunRecord>, StoreError>;
    /// Every unit, by serial.
    fn units(&mut self) -> Result<Vec<UnitSummary>, StoreError>;
    /// The latest accepted run of unit `serial`.
    fn latest_accepted(&mut self, serial: &str) -> Result<Option<RunRecord>, StoreError>;
    /// The measured cells of every unit's latest accepted run, in no particular order.
    fn fleet_cells(&mut self) -> Result<Vec<FleetCell>, StoreError>;
    /// The runs of unit `serial`, or of every unit, each unit's oldest first (without their
    /// tables).
    fn runs(&mut self, serial: Option<&str>) -> Result<Vec<RunRow>, StoreError>;
}

/// Opens the store at `url` as it is, for reading: a missing SQLite file is an error, not an
/// empty store, and a schema other than this taucal's is refused, not migrated. `None` for
/// `none`.
pub fn open_existing(url: &StoreUrl) -> Result<Option<Box<dyn Store>>, StoreError> {
    Ok(match url {
        StoreUrl::Off => None,
        StoreUrl::Sqlite(path) => Some(Box::new(sqlite::SqliteStore::open_existing(path)?)),
        StoreUrl::Postgres(u) => Some(Box::new(postgres::PgStore::open_existing(
            u,
            &url.redacted(),
        )?)),
    })
}

/// Opens (creating or migrating) the store at `url`; `None` for `none`.
pub fn open(url: &StoreUrl) -> Result<Option<Box<dyn Store>>, StoreError> {
    Ok(match url {
        StoreUrl::Off => None,
        StoreUrl::Sqlite(path) => Some(Box::new(sqlite::SqliteStore::open(path)?)),
        StoreUrl::Postgres(u) => Some(Box::new(postgres::PgStore::open(u, &url.redacted())?)),
    })
}
