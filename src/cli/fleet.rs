//! `taucal fleet stats` and `taucal fleet stations`: the fleet's statistics from a store, as
//! aligned text or CSV.

use super::args::{FleetCommand, FleetStationsArgs, FleetStatsArgs, ListFormat};
use super::store::{fail, open_existing, read_url};
use super::{log, Exit};
use crate::diagnostic::Diagnostic;
use crate::fleet::cells::{cell_stats, TOL_CONFIDENCE, TOL_PROPORTION};
use crate::fleet::centred::deviations;
use crate::fleet::outliers::{outliers, CUTOFF_Z};
use crate::fleet::stations::station_offsets;
use crate::store::FleetCell;

/// Runs a fleet command.
pub fn run(command: FleetCommand) -> Result<Exit, Diagnostic> {
    match command {
        FleetCommand::Stats(a) => stats(a),
        FleetCommand::Stations(a) => stations(a),
    }
}

/// Every unit's latest accepted measured cells; an empty fleet is an error that says why.
fn fleet(store: &crate::cli::args::StoreReadArg) -> Result<Vec<FleetCell>, Diagnostic> {
    let mut s = open_existing(&read_url(store)?)?;
    let cells = s.fleet_cells().map_err(fail)?;
    if cells.is_empty() {
        return Err(Diagnostic::plain(format!(
            "{} holds no accepted run with measured cells",
            s.url()
        ))
        .with_hint("`taucal store units` lists the units and whether each has an accepted run"));
    }
    Ok(cells)
}

/// A number as printed: fixed decimals, empty when not known.
fn num(v: f64, decimals: usize) -> String {
    if v.is_finite() {
        format!("{v:.decimals$}")
    } else {
        String::new()
    }
}

/// Prints `rows` under `header`: CSV, or text with numbers right-aligned.
fn print_table(
    header: &[&str],
    rows: &[Vec<String>],
    format: ListFormat,
) -> Result<(), Diagnostic> {
    match format {
        ListFormat::Csv => {
            let mut w = csv::Writer::from_writer(Vec::new());
            let bad = |e: String| Diagnostic::plain(format!("cannot write CSV: {e}"));
            w.write_record(header).map_err(|e| bad(e.to_string()))?;
            for r in rows {
                w.write_record(r).map_err(|e| bad(e.to_string()))?;
            }
            let bytes = w.into_inner().map_err(|e| bad(e.to_string()))?;
            print!("{}", String::from_utf8_lossy(&bytes));
        }
        ListFormat::Text => {
            let mut widths: Vec<usize> = header.iter().map(|h| h.chars().count()).collect();
            for r in rows {
                for (w, c) in widths.iter_mut().zip(r) {
                    *w = (*w).max(c.chars().count());
                }
            }
            let line = |cells: Vec<&str>| {
                let parts: Vec<String> = cells
                    .iter()
                    .zip(&widths)
                    .enumerate()
                    .map(|(i, (c, &w))| {
                        if i == 0 && c.parse::<f64>().is_err() {
                            format!("{c:<w$}")
                        } else {
                            format!("{c:>w$}")
                        }
                    })
                    .collect();
                parts.join("  ").trim_end().to_string()
            };
            println!("{}", line(header.to_vec()));
            for r in rows {
                println!("{}", line(r.iter().map(String::as_str).collect()));
            }
        }
    }
    Ok(())
}

fn stats(args: FleetStatsArgs) -> Result<Exit, Diagnostic> {
    let cells = fleet(&args.store)?;
    let stats = cell_stats(&cells);
    let header = [
        "center_mhz",
        "bw_mhz",
        "gain_index",
        "units",
        "mean_ps",
        "sd_ps",
        "p05_ps",
        "p50_ps",
        "p95_ps",
        "tol_lo_ps",
        "tol_hi_ps",
        "noise_sd_ps",
        "unit_sd_ps",
    ];
    let rows: Vec<Vec<String>> = stats
        .iter()
        .map(|s| {
            vec![
                s.cell.0.to_string(),
                s.cell.1.to_string(),
                s.cell.2.to_string(),
                s.units.to_string(),
                num(s.mean_ps, 1),
                num(s.sd_ps, 1),
                num(s.p05_ps, 1),
                num(s.p50_ps, 1),
                num(s.p95_ps, 1),
                num(s.tol_lo_ps, 1),
                num(s.tol_hi_ps, 1),
                num(s.noise_sd_ps, 1),
                num(s.unit_sd_ps, 1),
            ]
        })
        .collect();
    print_table(&header, &rows, args.format)?;
    if args.format == ListFormat::Text {
        println!(
            "tol_lo/hi: two-sided normal tolerance interval covering {:.0} % of units with {:.0} % \
             confidence (exact factor); sd² = noise_sd² + unit_sd², noise from each unit's ci95",
            TOL_PROPORTION * 100.0,
            TOL_CONFIDENCE * 100.0
        );
        let devs = deviations(&cells);
        let out = outliers(&devs);
        if out.is_empty() {
            println!(
                "outliers: none of {} units beyond robust z {CUTOFF_Z}",
                devs.len()
            );
        } else {
            println!(
                "outliers ({} of {} units beyond robust z {CUTOFF_Z}, worst first):",
                out.len(),
                devs.len()
            );
            let header = [
                "serial",
                "station",
                "deviation_ps",
                "score_z",
                "worst_cell",
                "worst_cell_z",
            ];
            let rows: Vec<Vec<String>> = out
                .iter()
                .map(|o| {
                    let (c, b, g) = o.unit.worst_cell;
                    vec![
                        o.unit.serial.clone(),
                        o.unit.station.clone(),
                        num(o.unit.deviation_ps, 1),
                        num(o.score, 1),
                        format!("{c}/{b}/{g}"),
                        num(o.unit.worst_z, 1),
                    ]
                })
                .collect();
            print_table(&header, &rows, ListFormat::Text)?;
        }
    }
    Ok(Exit::Ok)
}

fn stations(args: FleetStationsArgs) -> Result<Exit, Diagnostic> {
    if !(args.threshold_ps.is_finite() && args.threshold_ps >= 0.0) {
        return Err(Diagnostic::plain(format!(
            "--threshold-ps {}: not a size of offset",
            args.threshold_ps
        ))
        .with_hint("give a number of ps ≥ 0, e.g. --threshold-ps 20"));
    }
    let cells = fleet(&args.store)?;
    let offsets = station_offsets(&deviations(&cells), args.threshold_ps);
    let header = ["station", "units", "offset_ps", "ci95_ps", "flagged"];
    let rows: Vec<Vec<String>> = offsets
        .iter()
        .map(|o| {
            let flag = match (o.flagged, o.reference, args.format) {
                (true, _, _) => "yes",
                (false, true, ListFormat::Text) => "no (reference)",
                _ => "no",
            };
            vec![
                o.station.clone(),
                o.units.to_string(),
                num(o.offset_ps, 1),
                num(o.ci95_ps, 1),
                flag.to_string(),
            ]
        })
        .collect();
    print_table(&header, &rows, args.format)?;
    if args.format == ListFormat::Text {
        let flagged = offsets.iter().filter(|o| o.flagged).count();
        log::notice(&format!(
            "taucal: offsets against the median station, cell-centred; flagged when the 95 % \
             interval excludes 0 and |offset| > {} ps ({flagged} flagged). A path e ps longer \
             than declared shows as +2e ps",
            args.threshold_ps
        ));
    }
    Ok(Exit::Ok)
}
