//! `taucal store`: import run directories, sync stores, list units, give a unit's table.

use super::args::{ListFormat, StoreCommand, StoreImportArgs, StoreReadArg, StoreSyncArgs};
use super::args::{StoreTableArgs, StoreUnitsArgs};
use super::{log, Exit};
use crate::diagnostic::Diagnostic;
use crate::export::render;
use crate::store::resolve::{self, DEFAULT_FILE};
use crate::store::table::export_table;
use crate::store::url::URL_HINT;
use crate::store::{self as results, RunRecord, Store, StoreError, StoreUrl};
use std::collections::BTreeMap;
use std::path::PathBuf;

/// Runs a store command.
pub fn run(command: StoreCommand) -> Result<Exit, Diagnostic> {
    match command {
        StoreCommand::Import(a) => import(a),
        StoreCommand::Sync(a) => sync(a),
        StoreCommand::Units(a) => units(a),
        StoreCommand::Table(a) => table(a),
    }
}

pub(super) fn fail(e: StoreError) -> Diagnostic {
    let hint = match &e {
        StoreError::Url { .. } => URL_HINT,
        StoreError::Connect { .. } => {
            "check the server is up, the user and database exist and the password is right \
             (PostgreSQL), or that the file is a taucal store (SQLite)"
        }
        StoreError::NewerSchema { .. } => "use the taucal that made the store, or a newer one",
        StoreError::RunDir { .. } => "give directories `taucal run` wrote",
        StoreError::Query { .. } => "nothing was half-written: the transaction was rolled back",
    };
    Diagnostic::plain(e.to_string()).with_hint(hint)
}

/// Opens a store that must exist already (a reading command never creates an empty SQLite
/// file where a typo put it).
pub(super) fn open_existing(url: &StoreUrl) -> Result<Box<dyn Store>, Diagnostic> {
    if let StoreUrl::Sqlite(path) = url {
        if !path.is_file() {
            return Err(Diagnostic::plain(format!(
                "no store at {}: the file does not exist",
                url.redacted()
            ))
            .with_hint("give the store runs were written to with --store URL or TAUCAL_STORE"));
        }
    }
    results::open(url)
        .map_err(fail)?
        .ok_or_else(|| Diagnostic::plain("--store none names no store to read").with_hint(URL_HINT))
}

/// The store a reading command uses: `--store`, else `TAUCAL_STORE`, else
/// `sqlite:runs/taucal.sqlite`.
pub(super) fn read_url(arg: &StoreReadArg) -> Result<StoreUrl, Diagnostic> {
    let env = std::env::var(resolve::ENV).ok();
    let text = arg
        .url
        .clone()
        .or(env.filter(|e| !e.trim().is_empty()))
        .unwrap_or_else(|| format!("sqlite:runs/{DEFAULT_FILE}"));
    StoreUrl::parse(&text).map_err(fail)
}

fn import(args: StoreImportArgs) -> Result<Exit, Diagnostic> {
    // Every directory is read before anything is written: one that is not a run stops the
    // import with nothing half-done.
    let mut records = Vec::new();
    for dir in args
        .run_dirs
        .iter()
        .map(PathBuf::as_path)
        .flat_map(run_dirs_within)
    {
        let rec = RunRecord::from_dir(&dir).map_err(fail)?;
        records.push((dir, rec));
    }
    let env = std::env::var(resolve::ENV).ok();
    let mut by_store: BTreeMap<String, (StoreUrl, Vec<RunRecord>)> = BTreeMap::new();
    for (dir, rec) in records {
        let (url, _) =
            resolve::choose(args.store.url.as_deref(), env.as_deref(), None, &dir).map_err(fail)?;
        if url == StoreUrl::Off {
            return Err(
                Diagnostic::plain("--store none: nothing to import into").with_hint(URL_HINT)
            );
        }
        by_store
            .entry(url.redacted())
            .or_insert_with(|| (url, Vec::new()))
            .1
            .push(rec);
    }
    for (shown, (url, recs)) in by_store {
        let mut store = results::open(&url).map_err(fail)?.expect("not none");
        for batch in recs.chunks(results::sync::BATCH) {
            store.put_runs(batch).map_err(fail)?;
        }
        // Runs whose store write was pending are caught up now.
        for rec in &recs {
            clear_pending(&PathBuf::from(&rec.run.dir));
        }
        println!("imported {} runs into {shown}", recs.len());
    }
    Ok(Exit::Ok)
}

/// The run directories `dir` stands for: a station's run directory stands for its slots' (the
/// station's own manifest holds no table), any other directory for itself.
fn run_dirs_within(dir: &std::path::Path) -> Vec<PathBuf> {
    use crate::data::run_dir::files;
    use crate::data::station_manifest::StationManifest;
    match StationManifest::read_if_station(&dir.join(files::MANIFEST)) {
        Ok(Some(station)) => station.slot.iter().map(|s| dir.join(&s.dir)).collect(),
        _ => vec![dir.to_path_buf()],
    }
}

/// Clears a run directory's `store_pending` mark once the store has the run.
fn clear_pending(dir: &std::path::Path) {
    use crate::data::run_dir::files;
    let path = dir.join(files::MANIFEST);
    if let Ok(mut m) = crate::data::Manifest::read(&path) {
        if m.store_pending {
            m.store_pending = false;
            if let Err(e) = m.write(&path) {
                log::notice(&format!(
                    "taucal: cannot clear store_pending in {}: {e}",
                    path.display()
                ));
            }
        }
    }
}

fn sync(args: StoreSyncArgs) -> Result<Exit, Diagnostic> {
    let from = read_url(&args.store)?;
    let to = StoreUrl::parse(&args.to)
        .map_err(|e| Diagnostic::plain(format!("--to: {e}")).with_hint(URL_HINT))?;
    if to == StoreUrl::Off {
        return Err(Diagnostic::plain("--to none names no store to sync to").with_hint(URL_HINT));
    }
    if to == from {
        return Err(Diagnostic::plain(format!(
            "--to {} is the store being synced from",
            to.redacted()
        ))
        .with_hint("give another store to copy to"));
    }
    let mut source = open_existing(&from)?;
    let mut dest = results::open(&to).map_err(fail)?.expect("not none");
    let done = results::sync::sync(source.as_mut(), dest.as_mut(), |n, of| {
        log::notice(&format!("taucal: {n} of {of} runs copied"));
    })
    .map_err(fail)?;
    println!(
        "synced {} to {}: {} runs copied, {} already there",
        source.url(),
        dest.url(),
        done.copied,
        done.current
    );
    Ok(Exit::Ok)
}

fn units(args: StoreUnitsArgs) -> Result<Exit, Diagnostic> {
    let mut store = open_existing(&read_url(&args.store)?)?;
    let units = store.units().map_err(fail)?;
    let yes_no = |b: bool| if b { "yes" } else { "no" };
    match args.format {
        ListFormat::Csv => {
            let mut w = csv::Writer::from_writer(Vec::new());
            let header = [
                "serial",
                "model",
                "runs",
                "last_run_utc",
                "last_status",
                "accepted",
            ];
            let mut rows = vec![header.map(String::from).to_vec()];
            for u in &units {
                rows.push(vec![
                    u.serial.clone(),
                    u.model.clone(),
                    u.runs.to_string(),
                    u.last_run_utc.clone(),
                    u.last_status.clone(),
                    yes_no(u.accepted).to_string(),
                ]);
            }
            for r in rows {
                w.write_record(&r)
                    .map_err(|e| Diagnostic::plain(format!("cannot write CSV: {e}")))?;
            }
            let bytes = w
                .into_inner()
                .map_err(|e| Diagnostic::plain(format!("cannot write CSV: {e}")))?;
            print!("{}", String::from_utf8_lossy(&bytes));
        }
        ListFormat::Text => {
            let header = [
                "serial",
                "model",
                "runs",
                "last run (UTC)",
                "last status",
                "accepted",
            ];
            let rows: Vec<[String; 6]> = units
                .iter()
                .map(|u| {
                    [
                        u.serial.clone(),
                        u.model.clone(),
                        u.runs.to_string(),
                        u.last_run_utc.chars().take(19).collect(),
                        u.last_status.clone(),
                        yes_no(u.accepted).to_string(),
                    ]
                })
                .collect();
            let mut widths = header.map(|h| h.chars().count());
            for r in &rows {
                for (w, c) in widths.iter_mut().zip(r) {
                    *w = (*w).max(c.chars().count());
                }
            }
            let line = |cells: Vec<&str>| {
                let parts: Vec<String> = cells
                    .iter()
                    .zip(widths)
                    .enumerate()
                    .map(|(i, (c, w))| {
                        if i == 2 {
                            format!("{c:>w$}")
                        } else {
                            format!("{c:<w$}")
                        }
                    })
                    .collect();
                parts.join("  ").trim_end().to_string()
            };
            println!("{}", line(header.to_vec()));
            for r in &rows {
                println!("{}", line(r.iter().map(String::as_str).collect()));
            }
            log::notice(&format!("taucal: {} units in {}", units.len(), store.url()));
        }
    }
    Ok(Exit::Ok)
}

fn table(args: StoreTableArgs) -> Result<Exit, Diagnostic> {
    let mut store = open_existing(&read_url(&args.store)?)?;
    let Some(rec) = store.latest_accepted(&args.serial).map_err(fail)? else {
        return Err(Diagnostic::plain(format!(
            "{} has no accepted run of unit `{}`",
            store.url(),
            args.serial
        ))
        .with_hint("`taucal store units` lists the units and whether each has an accepted run"));
    };
    let table = export_table(&rec).map_err(|e| {
        Diagnostic::plain(e.to_string())
            .with_hint("use the taucal that wrote the run, or a newer one")
    })?;
    let text = render(&table, args.format.into())
        .map_err(|e| Diagnostic::plain(format!("run {}: {e}", rec.run.run_id)))?;
    log::notice(&format!(
        "taucal: unit {}: run {} of {} on station {}",
        args.serial,
        rec.run.run_id,
        rec.run
            .finished_utc
            .as_deref()
            .unwrap_or(&rec.run.started_utc),
        rec.run.station
    ));
    print!("{text}");
    Ok(Exit::Ok)
}
