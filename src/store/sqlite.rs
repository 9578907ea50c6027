//! The embedded store: one SQLite file, in WAL mode with a busy timeout so several runs on one
//! station can write to it at once.

use super::record::{AcceptRow, CellRow, RunRow, VerifyLevel};
use super::schema::{check_existing, create_v1, Dialect, SCHEMA_VERSION};
use super::{FleetCell, RunRecord, RunVersion, Store, StoreError, UnitSummary};
use rusqlite::{params, Connection, OpenFlags, OptionalExtension, TransactionBehavior};
use std::path::Path;
use std::time::Duration;

/// A SQLite store.
pub struct SqliteStore {
    conn: Connection,
    url: String,
}

/// How long a writer waits for another to finish before it gives up.
const BUSY_TIMEOUT: Duration = Duration::from_secs(30);

impl SqliteStore {
    /// Opens the file at `path` (creating it and its folder), then creates or checks the schema.
    /// Several processes opening a new file at once contend for the switch to WAL and the
    /// schema's creation, where SQLite does not always wait on its own: a busy or locked
    /// database is retried until the busy timeout.
    pub fn open(path: &Path) -> Result<SqliteStore, StoreError> {
        let url = format!("sqlite:{}", path.display());
        let connect = |message: String| StoreError::Connect {
            url: url.clone(),
            message,
        };
        if let Some(parent) = path.parent().filter(|p| !p.as_os_str().is_empty()) {
            std::fs::create_dir_all(parent).map_err(|e| connect(e.to_string()))?;
        }
        let started = std::time::Instant::now();
        loop {
            match open_once(path) {
                Ok((conn, found)) => {
                    if let Some(v) = found.filter(|v| *v > SCHEMA_VERSION) {
                        return Err(StoreError::NewerSchema {
                            url,
                            found: v,
                            known: SCHEMA_VERSION,
                        });
                    }
                    return Ok(SqliteStore { conn, url });
                }
                Err(e) if is_busy(&e) && started.elapsed() < BUSY_TIMEOUT => {
                    std::thread::sleep(Duration::from_millis(25));
                }
                Err(e) => {
                    return Err(connect(format!(
                        "not a SQLite database taucal can use, or not writable: {e}"
                    )))
                }
            }
        }
    }

    /// Opens the file at `path`, which must exist and hold this taucal's schema, changing
    /// nothing in it.
    pub fn open_existing(path: &Path) -> Result<SqliteStore, StoreError> {
        let url = format!("sqlite:{}", path.display());
        let connect = |message: String| StoreError::Connect {
            url: url.clone(),
            message,
        };
        if !path.is_file() {
            return Err(connect("the file does not exist".into()));
        }
        // Read-write so WAL works, but without CREATE: the file is never made here.
        let flags = OpenFlags::SQLITE_OPEN_READ_WRITE
            | OpenFlags::SQLITE_OPEN_URI
            | OpenFlags::SQLITE_OPEN_NO_MUTEX;
        let conn = Connection::open_with_flags(path, flags).map_err(|e| connect(e.to_string()))?;
        conn.busy_timeout(BUSY_TIMEOUT)
            .map_err(|e| connect(e.to_string()))?;
        let found: Option<i64> = conn
            .query_row("SELECT MAX(version) FROM taucal_schema", [], |r| r.get(0))
            .map_err(|e| connect(format!("not a taucal store: {e}")))?;
        check_existing(&url, found)?;
        Ok(SqliteStore { conn, url })
    }

    fn query_err(&self, e: rusqlite::Error) -> StoreError {
        StoreError::Query {
            url: self.url.clone(),
            message: e.to_string(),
        }
    }

    fn run_row(&self, run_id: &str) -> Result<Option<(RunRow, String)>, StoreError> {
        self.conn
            .query_row(
                "SELECT r.run_id, r.unit_serial, r.station, r.recipe_name, r.recipe_sha256,
                        r.bench_sha256, r.status, r.accepted, r.simulated, r.seed, r.started_utc,
                        r.finished_utc, r.bench_time_s, r.wall_time_s, r.taucal_version, r.dir,
                        r.bench_name, u.model
                 FROM runs r JOIN units u ON u.serial = r.unit_serial WHERE r.run_id = ?1",
                [run_id],
                |r| Ok((run_from(r)?, r.get(17)?)),
            )
            .optional()
            .map_err(|e| self.query_err(e))
    }
}

/// A run's row from a query whose first columns are those of [`super::schema::runs_query`].
fn run_from(r: &rusqlite::Row) -> rusqlite::Result<RunRow> {
    Ok(RunRow {
        run_id: r.get(0)?,
        unit_serial: r.get(1)?,
        station: r.get(2)?,
        recipe_name: r.get(3)?,
        recipe_sha256: r.get(4)?,
        bench_sha256: r.get(5)?,
        status: r.get(6)?,
        accepted: r.get(7)?,
        simulated: r.get(8)?,
        seed: r.get(9)?,
        started_utc: r.get(10)?,
        finished_utc: r.get(11)?,
        bench_time_s: r.get(12)?,
        wall_time_s: r.get(13)?,
        taucal_version: r.get(14)?,
        dir: r.get(15)?,
        bench_name: r.get(16)?,
    })
}

/// Whether `e` is another connection holding the lock.
fn is_busy(e: &rusqlite::Error) -> bool {
    matches!(
        e.sqlite_error_code(),
        Some(rusqlite::ErrorCode::DatabaseBusy | rusqlite::ErrorCode::DatabaseLocked)
    )
}

/// One attempt: the connection, WAL, and the schema created where absent; returns the schema
/// version found (a newer one is left untouched for the caller to refuse).
fn open_once(path: &Path) -> Result<(Connection, Option<i64>), rusqlite::Error> {
    let mut conn = Connection::open(path)?;
    conn.busy_timeout(BUSY_TIMEOUT)?;
    // WAL lets readers and one writer work at once; NORMAL sync is durable across a process
    // crash, and the run directory is the record of truth across a power loss.
    conn.pragma_update(None, "journal_mode", "WAL")?;
    conn.pragma_update(None, "synchronous", "NORMAL")?;
    conn.pragma_update(None, "foreign_keys", "ON")?;
    let tx = conn.transaction_with_behavior(TransactionBehavior::Immediate)?;
    for stmt in create_v1(Dialect::Sqlite) {
        tx.execute(&stmt, [])?;
    }
    let found: Option<i64> =
        tx.query_row("SELECT MAX(version) FROM taucal_schema", [], |r| r.get(0))?;
    if found.is_none() {
        tx.execute(
            "INSERT INTO taucal_schema (version) VALUES (?1)",
            [SCHEMA_VERSION],
        )?;
    }
    tx.commit()?;
    Ok((conn, found))
}

impl Store for SqliteStore {
    fn url(&self) -> String {
        self.url.clone()
    }

    fn put_runs(&mut self, runs: &[RunRecord]) -> Result<(), StoreError> {
        let url = self.url.clone();
        let q = |e: rusqlite::Error| StoreError::Query {
            url: url.clone(),
            message: e.to_string(),
        };
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)
            .map_err(q)?;
        for rec in runs {
            let r = &rec.run;
            let seen = r.finished_utc.as_deref().unwrap_or(&r.started_utc);
            tx.prepare_cached(
                "INSERT INTO units (serial, model, first_seen_utc, last_seen_utc)
                 VALUES (?1, ?2, ?3, ?4)
                 ON CONFLICT(serial) DO UPDATE SET
                   model = CASE WHEN excluded.model <> '' THEN excluded.model ELSE units.model END,
                   first_seen_utc = MIN(units.first_seen_utc, excluded.first_seen_utc),
                   last_seen_utc = MAX(units.last_seen_utc, excluded.last_seen_utc)",
            )
            .and_then(|mut s| s.execute(params![r.unit_serial, rec.model, r.started_utc, seen]))
            .map_err(q)?;
            tx.prepare_cached(
                "INSERT INTO runs (run_id, unit_serial, station, recipe_name, recipe_sha256,
                   bench_sha256, status, accepted, simulated, seed, started_utc, finished_utc,
                   bench_time_s, wall_time_s, taucal_version, dir, bench_name)
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17)
                 ON CONFLICT(run_id) DO UPDATE SET
                   unit_serial = excluded.unit_serial, station = excluded.station,
                   recipe_name = excluded.recipe_name, recipe_sha256 = excluded.recipe_sha256,
                   bench_sha256 = excluded.bench_sha256, status = excluded.status,
                   accepted = excluded.accepted, simulated = excluded.simulated,
                   seed = excluded.seed, started_utc = excluded.started_utc,
                   finished_utc = excluded.finished_utc, bench_time_s = excluded.bench_time_s,
                   wall_time_s = excluded.wall_time_s, taucal_version = excluded.taucal_version,
                   dir = excluded.dir, bench_name = excluded.bench_name",
            )
            .and_then(|mut s| {
                s.execute(params![
                    r.run_id,
                    r.unit_serial,
                    r.station,
                    r.recipe_name,
                    r.recipe_sha256,
                    r.bench_sha256,
                    r.status,
                    r.accepted,
                    r.simulated,
                    r.seed,
                    r.started_utc,
                    r.finished_utc,
                    r.bench_time_s,
                    r.wall_time_s,
                    r.taucal_version,
                    r.dir,
                    r.bench_name
                ])
            })
            .map_err(q)?;
            for table in ["cal_cells", "verify_levels", "acceptance"] {
                tx.prepare_cached(&format!("DELETE FROM {table} WHERE run_id = ?1"))
                    .and_then(|mut s| s.execute([&r.run_id]))
                    .map_err(q)?;
            }
            let mut cell = tx
                .prepare_cached(
                    "INSERT INTO cal_cells (run_id, center_mhz, bw_mhz, gain_index, delay_ps,
                       ci95_ps, n_used, n_rejected, source)
                     VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
                )
                .map_err(q)?;
            for c in &rec.cells {
                cell.execute(params![
                    r.run_id,
                    c.center_mhz,
                    c.bw_mhz,
                    c.gain_index,
                    c.delay_ps,
                    c.ci95_ps,
                    c.n_used,
                    c.n_rejected,
                    c.source
                ])
                .map_err(q)?;
            }
            drop(cell);
            let mut level = tx
                .prepare_cached(
                    "INSERT INTO verify_levels (run_id, center_mhz, bw_mhz, atten_db,
                       rx_power_dbm, equiv_distance_m, n, range_error_single_m,
                       range_error_table_m)
                     VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
                )
                .map_err(q)?;
            for v in &rec.verify {
                level
                    .execute(params![
                        r.run_id,
                        v.center_mhz,
                        v.bw_mhz,
                        v.atten_db,
                        v.rx_power_dbm,
                        v.equiv_distance_m,
                        v.n,
                        v.range_error_single_m,
                        v.range_error_table_m
                    ])
                    .map_err(q)?;
            }
            drop(level);
            let mut accept = tx
                .prepare_cached(
                    "INSERT INTO acceptance (run_id, name, value, limit_value, passed)
                     VALUES (?1, ?2, ?3, ?4, ?5)",
                )
                .map_err(q)?;
            for a in &rec.acceptance {
                accept
                    .execute(params![r.run_id, a.name, a.value, a.limit_value, a.passed])
                    .map_err(q)?;
            }
        }
        tx.commit().map_err(q)
    }

    fn run_versions(&mut self) -> Result<Vec<RunVersion>, StoreError> {
        let mut s = self
            .conn
            .prepare("SELECT run_id, status, finished_utc FROM runs ORDER BY run_id")
            .map_err(|e| self.query_err(e))?;
        let rows = s
            .query_map([], |r| {
                Ok(RunVersion {
                    run_id: r.get(0)?,
                    status: r.get(1)?,
                    finished_utc: r.get(2)?,
                })
            })
            .and_then(|rows| rows.collect::<Result<Vec<_>, _>>());
        drop(s);
        rows.map_err(|e| self.query_err(e))
    }

    fn get_run(&mut self, run_id: &str) -> Result<Option<RunRecord>, StoreError> {
        let Some((run, model)) = self.run_row(run_id)? else {
            return Ok(None);
        };
        let q = |e: rusqlite::Error| StoreError::Query {
            url: self.url.clone(),
            message: e.to_string(),
        };
        let cells = self
            .conn
            .prepare_cached(
                "SELECT center_mhz, bw_mhz, gain_index, delay_ps, ci95_ps, n_used, n_rejected,
                        source
                 FROM cal_cells WHERE run_id = ?1 ORDER BY center_mhz, bw_mhz, gain_index",
            )
            .and_then(|mut s| {
                s.query_map([run_id], |r| {
                    Ok(CellRow {
                        center_mhz: r.get(0)?,
                        bw_mhz: r.get(1)?,
                        gain_index: r.get(2)?,
                        delay_ps: r.get(3)?,
                        ci95_ps: r.get(4)?,
                        n_used: r.get(5)?,
                        n_rejected: r.get(6)?,
                        source: r.get(7)?,
                    })
                })?
                .collect::<Result<Vec<_>, _>>()
            })
            .map_err(q)?;
        let verify = self
            .conn
            .prepare_cached(
                "SELECT center_mhz, bw_mhz, atten_db, rx_power_dbm, equiv_distance_m, n,
                        range_error_single_m, range_error_table_m
                 FROM verify_levels WHERE run_id = ?1
                 ORDER BY center_mhz, bw_mhz, atten_db",
            )
            .and_then(|mut s| {
                s.query_map([run_id], |r| {
                    Ok(VerifyLevel {
                        center_mhz: r.get(0)?,
                        bw_mhz: r.get(1)?,
                        atten_db: r.get(2)?,
                        rx_power_dbm: r.get(3)?,
                        equiv_distance_m: r.get(4)?,
                        n: r.get(5)?,
                        range_error_single_m: r.get(6)?,
                        range_error_table_m: r.get(7)?,
                    })
                })?
                .collect::<Result<Vec<_>, _>>()
            })
            .map_err(q)?;
        let acceptance = self
            .conn
            .prepare_cached(
                "SELECT name, value, limit_value, passed FROM acceptance
                 WHERE run_id = ?1 ORDER BY name",
            )
            .and_then(|mut s| {
                s.query_map([run_id], |r| {
                    Ok(AcceptRow {
                        name: r.get(0)?,
                        value: r.get(1)?,
                        limit_value: r.get(2)?,
                        passed: r.get(3)?,
                    })
                })?
                .collect::<Result<Vec<_>, _>>()
            })
            .map_err(q)?;
        Ok(Some(RunRecord {
            run,
            model,
            cells,
            verify,
            acceptance,
        }))
    }

    fn units(&mut self) -> Result<Vec<UnitSummary>, StoreError> {
        let mut s = self
            .conn
            .prepare(super::schema::UNITS_QUERY)
            .map_err(|e| self.query_err(e))?;
        let rows = s
            .query_map([], |r| {
                Ok(UnitSummary {
                    serial: r.get(0)?,
                    model: r.get(1)?,
                    runs: r.get(2)?,
                    last_run_utc: r.get::<_, Option<String>>(3)?.unwrap_or_default(),
                    last_status: r.get::<_, Option<String>>(4)?.unwrap_or_default(),
                    accepted: r.get(5)?,
                })
            })
            .and_then(|rows| rows.collect::<Result<Vec<_>, _>>());
        drop(s);
        rows.map_err(|e| self.query_err(e))
    }

    fn latest_accepted(&mut self, serial: &str) -> Result<Option<RunRecord>, StoreError> {
        let id: Option<String> = self
            .conn
            .query_row(
                super::schema::LATEST_ACCEPTED_QUERY
                    .replace("$1", "?1")
                    .as_str(),
                [serial],
                |r| r.get(0),
            )
            .optional()
            .map_err(|e| self.query_err(e))?;
        match id {
            Some(id) => self.get_run(&id),
            None => Ok(None),
        }
    }

    fn fleet_cells(&mut self) -> Result<Vec<FleetCell>, StoreError> {
        let mut s = self
            .conn
            .prepare(super::schema::FLEET_CELLS_QUERY)
            .map_err(|e| self.query_err(e))?;
        let rows = s
            .query_map([], |r| {
                Ok(FleetCell {
                    serial: r.get(0)?,
                    station: r.get(1)?,
                    center_mhz: r.get(2)?,
                    bw_mhz: r.get(3)?,
                    gain_index: r.get(4)?,
                    delay_ps: r.get(5)?,
                    ci95_ps: r.get(6)?,
                    exchanges: r.get(7)?,
                })
            })
            .and_then(|rows| rows.collect::<Result<Vec<_>, _>>());
        drop(s);
        rows.map_err(|e| self.query_err(e))
    }

    fn runs(&mut self, serial: Option<&str>) -> Result<Vec<RunRow>, StoreError> {
        let sql = super::schema::runs_query(serial.is_some()).replace("$1", "?1");
        let mut s = self.conn.prepare(&sql).map_err(|e| self.query_err(e))?;
        let rows = match serial {
            Some(serial) => s.query_map([serial], run_from),
            None => s.query_map([], run_from),
        }
        .and_then(|rows| rows.collect::<Result<Vec<_>, _>>());
        drop(s);
        rows.map_err(|e| self.query_err(e))
    }
}
