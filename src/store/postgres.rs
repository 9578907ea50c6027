//! The shared store: a PostgreSQL server for a line of stations. Each batch of runs is one
//! transaction; statements are prepared once per connection, and a run's rows go in as one
//! multi-row insert per table, so a sync over a network costs a few round trips per run.

use super::record::{AcceptRow, CellRow, RunRow, VerifyLevel};
use super::schema::{
    check_existing, create_v1, Dialect, FLEET_CELLS_QUERY, LATEST_ACCEPTED_QUERY, SCHEMA_VERSION,
    UNITS_QUERY,
};
use super::{FleetCell, RunRecord, RunVersion, Store, StoreError, UnitSummary};
use postgres::types::ToSql;
use postgres::{Client, NoTls, Statement, Transaction};
use std::collections::HashMap;

/// A PostgreSQL store.
pub struct PgStore {
    client: Client,
    url: String,
    /// Statements prepared on this connection, by their text (they outlive transactions).
    prepared: HashMap<String, Statement>,
}

/// The statement for `sql`, prepared once per connection.
fn prepared(
    tx: &mut Transaction,
    cache: &mut HashMap<String, Statement>,
    sql: &str,
) -> Result<Statement, postgres::Error> {
    if let Some(s) = cache.get(sql) {
        return Ok(s.clone());
    }
    let s = tx.prepare(sql)?;
    cache.insert(sql.to_string(), s.clone());
    Ok(s)
}

/// An advisory lock key, so two stations creating the schema at once take turns.
const SCHEMA_LOCK: i64 = 0x7461_7563_616c; // "taucal"

impl PgStore {
    /// Connects to `url` (`shown` is it with the password hidden) and creates or checks the
    /// schema.
    pub fn open(url: &str, shown: &str) -> Result<PgStore, StoreError> {
        let client = Client::connect(url, NoTls).map_err(|e| StoreError::Connect {
            url: shown.to_string(),
            message: describe(&e),
        })?;
        let mut store = PgStore {
            client,
            url: shown.to_string(),
            prepared: HashMap::new(),
        };
        store.migrate()?;
        Ok(store)
    }

    /// Connects to `url` (`shown` is it with the password hidden), whose schema must be this
    /// taucal's already; nothing is created or migrated.
    pub fn open_existing(url: &str, shown: &str) -> Result<PgStore, StoreError> {
        let connect = |message: String| StoreError::Connect {
            url: shown.to_string(),
            message,
        };
        let mut client = Client::connect(url, NoTls).map_err(|e| connect(describe(&e)))?;
        let found: Option<i64> = client
            .query_one("SELECT MAX(version) FROM taucal_schema", &[])
            .map_err(|e| connect(format!("not a taucal store: {}", describe(&e))))?
            .get(0);
        check_existing(shown, found)?;
        Ok(PgStore {
            client,
            url: shown.to_string(),
            prepared: HashMap::new(),
        })
    }

    fn err(&self, e: postgres::Error) -> StoreError {
        StoreError::Query {
            url: self.url.clone(),
            message: describe(&e),
        }
    }

    fn migrate(&mut self) -> Result<(), StoreError> {
        let url = self.url.clone();
        let q = |e: postgres::Error| StoreError::Query {
            url: url.clone(),
            message: describe(&e),
        };
        let mut tx = self.client.transaction().map_err(q)?;
        tx.execute("SELECT pg_advisory_xact_lock($1)", &[&SCHEMA_LOCK])
            .map_err(q)?;
        for stmt in create_v1(Dialect::Postgres) {
            tx.batch_execute(&stmt).map_err(q)?;
        }
        let found: Option<i64> = tx
            .query_one("SELECT MAX(version) FROM taucal_schema", &[])
            .map_err(q)?
            .get(0);
        match found {
            None => {
                tx.execute(
                    "INSERT INTO taucal_schema (version) VALUES ($1)",
                    &[&SCHEMA_VERSION],
                )
                .map_err(q)?;
            }
            Some(v) if v > SCHEMA_VERSION => {
                return Err(StoreError::NewerSchema {
                    url: url.clone(),
                    found: v,
                    known: SCHEMA_VERSION,
                })
            }
            Some(_) => {}
        }
        tx.commit().map_err(q)
    }
}

/// The server's own message where there is one (wrong password, no such database), else the
/// driver's.
fn describe(e: &postgres::Error) -> String {
    match e.as_db_error() {
        Some(db) => format!("{} ({})", db.message(), db.code().code()),
        None => {
            let mut text = e.to_string();
            let mut source = std::error::Error::source(e);
            while let Some(s) = source {
                text = format!("{text}: {s}");
                source = s.source();
            }
            text
        }
    }
}

/// A run's row from a query whose first columns are those of [`super::schema::runs_query`].
fn run_from(r: &postgres::Row) -> RunRow {
    RunRow {
        run_id: r.get(0),
        unit_serial: r.get(1),
        station: r.get(2),
        recipe_name: r.get(3),
        recipe_sha256: r.get(4),
        bench_sha256: r.get(5),
        status: r.get(6),
        accepted: r.get(7),
        simulated: r.get(8),
        seed: r.get(9),
        started_utc: r.get(10),
        finished_utc: r.get(11),
        bench_time_s: r.get(12),
        wall_time_s: r.get(13),
        taucal_version: r.get(14),
        dir: r.get(15),
        bench_name: r.get(16),
    }
}

/// `INSERT INTO table (cols) VALUES ($1, …), ($k, …)` for `rows` rows.
fn multi_insert(table: &str, cols: &[&str], rows: usize) -> String {
    let mut sql = format!("INSERT INTO {table} ({}) VALUES ", cols.join(", "));
    let n = cols.len();
    for r in 0..rows {
        if r > 0 {
            sql.push_str(", ");
        }
        sql.push('(');
        for c in 0..n {
            if c > 0 {
                sql.push_str(", ");
            }
            sql.push_str(&format!("${}", r * n + c + 1));
        }
        sql.push(')');
    }
    sql
}

const CELL_COLS: [&str; 9] = [
    "run_id",
    "center_mhz",
    "bw_mhz",
    "gain_index",
    "delay_ps",
    "ci95_ps",
    "n_used",
    "n_rejected",
    "source",
];
const VERIFY_COLS: [&str; 9] = [
    "run_id",
    "center_mhz",
    "bw_mhz",
    "atten_db",
    "rx_power_dbm",
    "equiv_distance_m",
    "n",
    "range_error_single_m",
    "range_error_table_m",
];
const ACCEPT_COLS: [&str; 5] = ["run_id", "name", "value", "limit_value", "passed"];

/// Runs one multi-row insert of `params` (a whole number of rows of `cols`).
fn insert_rows(
    tx: &mut Transaction,
    cache: &mut HashMap<String, Statement>,
    table: &str,
    cols: &[&str],
    params: &[&(dyn ToSql + Sync)],
) -> Result<(), postgres::Error> {
    if params.is_empty() {
        return Ok(());
    }
    // The server caps a statement at 65 535 parameters.
    let per = (60_000 / cols.len()) * cols.len();
    for chunk in params.chunks(per) {
        let sql = multi_insert(table, cols, chunk.len() / cols.len());
        let stmt = prepared(tx, cache, &sql)?;
        tx.execute(&stmt, chunk)?;
    }
    Ok(())
}

fn put_run(
    tx: &mut Transaction,
    cache: &mut HashMap<String, Statement>,
    rec: &RunRecord,
) -> Result<(), postgres::Error> {
    let r = &rec.run;
    let seen = r.finished_utc.as_deref().unwrap_or(&r.started_utc);
    let unit = prepared(
        tx,
        cache,
        "INSERT INTO units (serial, model, first_seen_utc, last_seen_utc) VALUES ($1, $2, $3, $4)
         ON CONFLICT (serial) DO UPDATE SET
           model = CASE WHEN excluded.model <> '' THEN excluded.model ELSE units.model END,
           first_seen_utc = LEAST(units.first_seen_utc, excluded.first_seen_utc),
           last_seen_utc = GREATEST(units.last_seen_utc, excluded.last_seen_utc)",
    )?;
    tx.execute(&unit, &[&r.unit_serial, &rec.model, &r.started_utc, &seen])?;
    let run = prepared(
        tx,
        cache,
        "INSERT INTO runs (run_id, unit_serial, station, recipe_name, recipe_sha256,
           bench_sha256, status, accepted, simulated, seed, started_utc, finished_utc,
           bench_time_s, wall_time_s, taucal_version, dir, bench_name)
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17)
         ON CONFLICT (run_id) DO UPDATE SET
           unit_serial = excluded.unit_serial, station = excluded.station,
           recipe_name = excluded.recipe_name, recipe_sha256 = excluded.recipe_sha256,
           bench_sha256 = excluded.bench_sha256, status = excluded.status,
           accepted = excluded.accepted, simulated = excluded.simulated, seed = excluded.seed,
           started_utc = excluded.started_utc, finished_utc = excluded.finished_utc,
           bench_time_s = excluded.bench_time_s, wall_time_s = excluded.wall_time_s,
           taucal_version = excluded.taucal_version, dir = excluded.dir,
           bench_name = excluded.bench_name",
    )?;
    tx.execute(
        &run,
        &[
            &r.run_id,
            &r.unit_serial,
            &r.station,
            &r.recipe_name,
            &r.recipe_sha256,
            &r.bench_sha256,
            &r.status,
            &r.accepted,
            &r.simulated,
            &r.seed,
            &r.started_utc,
            &r.finished_utc,
            &r.bench_time_s,
            &r.wall_time_s,
            &r.taucal_version,
            &r.dir,
            &r.bench_name,
        ],
    )?;
    // One round trip clears the run's rows in all three tables.
    let clear = prepared(
        tx,
        cache,
        "WITH a AS (DELETE FROM cal_cells WHERE run_id = $1),
              b AS (DELETE FROM verify_levels WHERE run_id = $1)
         DELETE FROM acceptance WHERE run_id = $1",
    )?;
    tx.execute(&clear, &[&r.run_id])?;
    let mut p: Vec<&(dyn ToSql + Sync)> = Vec::new();
    for c in &rec.cells {
        p.extend([
            &r.run_id as &(dyn ToSql + Sync),
            &c.center_mhz,
            &c.bw_mhz,
            &c.gain_index,
            &c.delay_ps,
            &c.ci95_ps,
            &c.n_used,
            &c.n_rejected,
            &c.source,
        ]);
    }
    insert_rows(tx, cache, "cal_cells", &CELL_COLS, &p)?;
    let mut p: Vec<&(dyn ToSql + Sync)> = Vec::new();
    for v in &rec.verify {
        p.extend([
            &r.run_id as &(dyn ToSql + Sync),
            &v.center_mhz,
            &v.bw_mhz,
            &v.atten_db,
            &v.rx_power_dbm,
            &v.equiv_distance_m,
            &v.n,
            &v.range_error_single_m,
            &v.range_error_table_m,
        ]);
    }
    insert_rows(tx, cache, "verify_levels", &VERIFY_COLS, &p)?;
    let mut p: Vec<&(dyn ToSql + Sync)> = Vec::new();
    for a in &rec.acceptance {
        p.extend([
            &r.run_id as &(dyn ToSql + Sync),
            &a.name,
            &a.value,
            &a.limit_value,
            &a.passed,
        ]);
    }
    insert_rows(tx, cache, "acceptance", &ACCEPT_COLS, &p)
}

impl Store for PgStore {
    fn url(&self) -> String {
        self.url.clone()
    }

    fn put_runs(&mut self, runs: &[RunRecord]) -> Result<(), StoreError> {
        let result = (|| {
            let mut tx = self.client.transaction()?;
            for rec in runs {
                put_run(&mut tx, &mut self.prepared, rec)?;
            }
            tx.commit()
        })();
        result.map_err(|e| self.err(e))
    }

    fn run_versions(&mut self) -> Result<Vec<RunVersion>, StoreError> {
        let rows = self
            .client
            .query(
                "SELECT run_id, status, finished_utc FROM runs ORDER BY run_id",
                &[],
            )
            .map_err(|e| self.err(e))?;
        Ok(rows
            .iter()
            .map(|r| RunVersion {
                run_id: r.get(0),
                status: r.get(1),
                finished_utc: r.get(2),
            })
            .collect())
    }

    fn get_run(&mut self, run_id: &str) -> Result<Option<RunRecord>, StoreError> {
        let result = (|| {
            let Some(r) = self.client.query_opt(
                "SELECT r.run_id, r.unit_serial, r.station, r.recipe_name, r.recipe_sha256,
                        r.bench_sha256, r.status, r.accepted, r.simulated, r.seed,
                        r.started_utc, r.finished_utc, r.bench_time_s, r.wall_time_s,
                        r.taucal_version, r.dir, r.bench_name, u.model
                 FROM runs r JOIN units u ON u.serial = r.unit_serial WHERE r.run_id = $1",
                &[&run_id],
            )?
            else {
                return Ok(None);
            };
            let run = run_from(&r);
            let model: String = r.get(17);
            let cells = self
                .client
                .query(
                    "SELECT center_mhz, bw_mhz, gain_index, delay_ps, ci95_ps, n_used,
                            n_rejected, source
                     FROM cal_cells WHERE run_id = $1 ORDER BY center_mhz, bw_mhz, gain_index",
                    &[&run_id],
                )?
                .iter()
                .map(|r| CellRow {
                    center_mhz: r.get(0),
                    bw_mhz: r.get(1),
                    gain_index: r.get(2),
                    delay_ps: r.get(3),
                    ci95_ps: r.get(4),
                    n_used: r.get(5),
                    n_rejected: r.get(6),
                    source: r.get(7),
                })
                .collect();
            let verify = self
                .client
                .query(
                    "SELECT center_mhz, bw_mhz, atten_db, rx_power_dbm, equiv_distance_m, n,
                            range_error_single_m, range_error_table_m
                     FROM verify_levels WHERE run_id = $1
                     ORDER BY center_mhz, bw_mhz, atten_db",
                    &[&run_id],
                )?
                .iter()
                .map(|r| VerifyLevel {
                    center_mhz: r.get(0),
                    bw_mhz: r.get(1),
                    atten_db: r.get(2),
                    rx_power_dbm: r.get(3),
                    equiv_distance_m: r.get(4),
                    n: r.get(5),
                    range_error_single_m: r.get(6),
                    range_error_table_m: r.get(7),
                })
                .collect();
            let acceptance = self
                .client
                .query(
                    "SELECT name, value, limit_value, passed FROM acceptance
                     WHERE run_id = $1 ORDER BY name COLLATE \"C\"",
                    &[&run_id],
                )?
                .iter()
                .map(|r| AcceptRow {
                    name: r.get(0),
                    value: r.get(1),
                    limit_value: r.get(2),
                    passed: r.get(3),
                })
                .collect();
            Ok(Some(RunRecord {
                run,
                model,
                cells,
                verify,
                acceptance,
            }))
        })();
        result.map_err(|e| self.err(e))
    }

    fn units(&mut self) -> Result<Vec<UnitSummary>, StoreError> {
        let rows = self
            .client
            .query(UNITS_QUERY, &[])
            .map_err(|e| self.err(e))?;
        Ok(rows
            .iter()
            .map(|r| UnitSummary {
                serial: r.get(0),
                model: r.get(1),
                runs: r.get(2),
                last_run_utc: r.get::<_, Option<String>>(3).unwrap_or_default(),
                last_status: r.get::<_, Option<String>>(4).unwrap_or_default(),
                accepted: r.get(5),
            })
            .collect())
    }

    fn latest_accepted(&mut self, serial: &str) -> Result<Option<RunRecord>, StoreError> {
        let id: Option<String> = self
            .client
            .query_opt(LATEST_ACCEPTED_QUERY, &[&serial])
            .map_err(|e| self.err(e))?
            .map(|r| r.get(0));
        match id {
            Some(id) => self.get_run(&id),
            None => Ok(None),
        }
    }

    fn fleet_cells(&mut self) -> Result<Vec<FleetCell>, StoreError> {
        let rows = self
            .client
            .query(FLEET_CELLS_QUERY, &[])
            .map_err(|e| self.err(e))?;
        Ok(rows
            .iter()
            .map(|r| FleetCell {
                serial: r.get(0),
                station: r.get(1),
                center_mhz: r.get(2),
                bw_mhz: r.get(3),
                gain_index: r.get(4),
                delay_ps: r.get(5),
                ci95_ps: r.get(6),
                exchanges: r.get(7),
            })
            .collect())
    }

    fn runs(&mut self, serial: Option<&str>) -> Result<Vec<RunRow>, StoreError> {
        let sql = super::schema::runs_query(serial.is_some());
        let rows = match serial {
            Some(serial) => self.client.query(sql.as_str(), &[&serial]),
            None => self.client.query(sql.as_str(), &[]),
        }
        .map_err(|e| self.err(e))?;
        Ok(rows.iter().map(run_from).collect())
    }
}
