//! The store's tables, one text for both databases, and the version it is at. The tables and
//! columns the issue lists are a contract; more may be appended, never renamed or reordered.

/// The schema version this taucal writes. A store at a higher version was made by a newer
/// taucal and is refused; a lower one is migrated on connect.
pub const SCHEMA_VERSION: i64 = 1;

/// The SQL dialect's type names.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Dialect {
    /// SQLite (type affinity; booleans as 0/1).
    Sqlite,
    /// PostgreSQL.
    Postgres,
}

impl Dialect {
    fn real(self) -> &'static str {
        match self {
            Dialect::Sqlite => "REAL",
            Dialect::Postgres => "DOUBLE PRECISION",
        }
    }

    fn boolean(self) -> &'static str {
        match self {
            Dialect::Sqlite => "INTEGER",
            Dialect::Postgres => "BOOLEAN",
        }
    }
}

/// Statements that create version 1 from nothing. Each is idempotent (`IF NOT EXISTS`), so
/// two stations connecting at once to a new server both succeed.
pub fn create_v1(d: Dialect) -> Vec<String> {
    let (real, boolean) = (d.real(), d.boolean());
    vec![
        "CREATE TABLE IF NOT EXISTS taucal_schema (version BIGINT NOT NULL)".to_string(),
        "CREATE TABLE IF NOT EXISTS units (
            serial TEXT PRIMARY KEY,
            model TEXT NOT NULL,
            first_seen_utc TEXT NOT NULL,
            last_seen_utc TEXT NOT NULL)"
            .to_string(),
        format!(
            "CREATE TABLE IF NOT EXISTS runs (
            run_id TEXT PRIMARY KEY,
            unit_serial TEXT NOT NULL REFERENCES units(serial),
            station TEXT NOT NULL,
            recipe_name TEXT NOT NULL,
            recipe_sha256 TEXT NOT NULL,
            bench_sha256 TEXT NOT NULL,
            status TEXT NOT NULL,
            accepted {boolean} NOT NULL,
            simulated {boolean} NOT NULL,
            seed BIGINT,
            started_utc TEXT NOT NULL,
            finished_utc TEXT,
            bench_time_s {real} NOT NULL,
            wall_time_s {real} NOT NULL,
            taucal_version TEXT NOT NULL,
            dir TEXT NOT NULL,
            bench_name TEXT NOT NULL DEFAULT '')"
        ),
        "CREATE INDEX IF NOT EXISTS runs_by_unit ON runs (unit_serial, started_utc)".to_string(),
        format!(
            "CREATE TABLE IF NOT EXISTS cal_cells (
            run_id TEXT NOT NULL REFERENCES runs(run_id) ON DELETE CASCADE,
            center_mhz BIGINT NOT NULL,
            bw_mhz BIGINT NOT NULL,
            gain_index BIGINT NOT NULL,
            delay_ps {real} NOT NULL,
            ci95_ps {real} NOT NULL,
            n_used BIGINT NOT NULL,
            n_rejected BIGINT NOT NULL,
            source TEXT NOT NULL,
            PRIMARY KEY (run_id, center_mhz, bw_mhz, gain_index))"
        ),
        format!(
            "CREATE TABLE IF NOT EXISTS verify_levels (
            run_id TEXT NOT NULL REFERENCES runs(run_id) ON DELETE CASCADE,
            center_mhz BIGINT NOT NULL,
            bw_mhz BIGINT NOT NULL,
            atten_db {real} NOT NULL,
            rx_power_dbm {real} NOT NULL,
            equiv_distance_m {real} NOT NULL,
            n BIGINT NOT NULL,
            range_error_single_m {real} NOT NULL,
            range_error_table_m {real} NOT NULL)"
        ),
        "CREATE INDEX IF NOT EXISTS verify_by_run ON verify_levels (run_id)".to_string(),
        format!(
            "CREATE TABLE IF NOT EXISTS acceptance (
            run_id TEXT NOT NULL REFERENCES runs(run_id) ON DELETE CASCADE,
            name TEXT NOT NULL,
            value {real},
            limit_value {real} NOT NULL,
            passed {boolean} NOT NULL,
            PRIMARY KEY (run_id, name))"
        ),
    ]
}

/// `store units`: each unit with its run count, its latest run and whether any run was
/// accepted. Plain SQL both databases read alike.
pub const UNITS_QUERY: &str = "SELECT u.serial, u.model,
    (SELECT COUNT(*) FROM runs r WHERE r.unit_serial = u.serial),
    (SELECT MAX(r.started_utc) FROM runs r WHERE r.unit_serial = u.serial),
    (SELECT r.status FROM runs r WHERE r.unit_serial = u.serial
       ORDER BY r.started_utc DESC, r.run_id DESC LIMIT 1),
    EXISTS (SELECT 1 FROM runs r WHERE r.unit_serial = u.serial AND r.accepted)
  FROM units u ORDER BY u.serial";

/// The latest accepted run of a unit (`$1`), by when it ended.
pub const LATEST_ACCEPTED_QUERY: &str = "SELECT run_id FROM runs
  WHERE unit_serial = $1 AND accepted
  ORDER BY COALESCE(finished_utc, started_utc) DESC, run_id DESC LIMIT 1";

/// The measured cells of each unit's latest accepted run (the same choice as
/// [`LATEST_ACCEPTED_QUERY`]), chosen by the database in one pass with a window function.
/// Predicted or modelled cells are left out: the population is what was measured.
pub const FLEET_CELLS_QUERY: &str = "WITH latest AS (
    SELECT run_id, unit_serial, station,
      ROW_NUMBER() OVER (PARTITION BY unit_serial
        ORDER BY COALESCE(finished_utc, started_utc) DESC, run_id DESC) AS pick
    FROM runs WHERE accepted)
  SELECT l.unit_serial, l.station, c.center_mhz, c.bw_mhz, c.gain_index, c.delay_ps, c.ci95_ps,
    c.n_used + c.n_rejected
  FROM latest l JOIN cal_cells c ON c.run_id = l.run_id
  WHERE l.pick = 1 AND c.source IN ('measured', 'inferred')";

/// The columns of a `runs` row, in [`crate::store::record::RunRow`]'s order.
const RUN_COLUMNS: &str = "run_id, unit_serial, station, recipe_name, recipe_sha256, bench_sha256,
    status, accepted, simulated, seed, started_utc, finished_utc, bench_time_s, wall_time_s,
    taucal_version, dir, bench_name";

/// Every run's row (`one_unit` false), or one unit's (`$1`), each unit's oldest first, in the
/// order [`UNITS_QUERY`] takes a unit's latest from.
pub fn runs_query(one_unit: bool) -> String {
    let filter = if one_unit {
        " WHERE unit_serial = $1"
    } else {
        ""
    };
    format!("SELECT {RUN_COLUMNS} FROM runs{filter} ORDER BY unit_serial, started_utc, run_id")
}

/// Checks the schema version `found` of an existing store at `url` (shown with the password
/// hidden) without changing it: only this taucal's own is read.
pub fn check_existing(url: &str, found: Option<i64>) -> Result<(), super::StoreError> {
    match found {
        Some(SCHEMA_VERSION) => Ok(()),
        Some(v) if v > SCHEMA_VERSION => Err(super::StoreError::NewerSchema {
            url: url.to_string(),
            found: v,
            known: SCHEMA_VERSION,
        }),
        other => Err(super::StoreError::Connect {
            url: url.to_string(),
            message: match other {
                Some(v) => format!(
                    "schema version {v} is older than this taucal's {SCHEMA_VERSION}; a writing \
                     command (store import) brings it up to date"
                ),
                None => "no taucal schema version in it".into(),
            },
        }),
    }
}
