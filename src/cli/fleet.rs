//! `taucal fleet stats`, `taucal fleet stations` and `taucal fleet plan`: the fleet's
//! statistics from a store, as aligned text or CSV, and a reduced calibration plan.

use super::args::{FleetCommand, FleetPlanArgs, FleetStationsArgs, FleetStatsArgs, ListFormat};
use super::store::{fail, open_existing, read_url};
use super::{log, Exit};
use crate::diagnostic::Diagnostic;
use crate::fit::predict::Z95;
use crate::fit::predict_file::model_toml;
use crate::fleet::cells::{cell_stats, TOL_CONFIDENCE, TOL_PROPORTION};
use crate::fleet::centred::deviations;
use crate::fleet::outliers::{outliers, CUTOFF_Z};
use crate::fleet::plan::{plan as make_plan, population};
use crate::fleet::plan_recipe::reduce;
use crate::fleet::plan_validate::leave_one_out;
use crate::fleet::shown::{num, outlier_row, station_row, stats_row};
use crate::fleet::shown::{OUTLIER_HEADER, STATIONS_HEADER, STATS_HEADER};
use crate::fleet::stations::station_offsets;
use crate::store::FleetCell;

/// Runs a fleet command.
pub fn run(command: FleetCommand) -> Result<Exit, Diagnostic> {
    match command {
        FleetCommand::Stats(a) => stats(a),
        FleetCommand::Stations(a) => stations(a),
        FleetCommand::Plan(a) => plan(a),
        FleetCommand::Serve(a) => super::fleet_serve::run(a),
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
    let header = STATS_HEADER;
    let rows: Vec<Vec<String>> = stats.iter().map(stats_row).collect();
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
            let rows: Vec<Vec<String>> = out.iter().map(outlier_row).collect();
            print_table(&OUTLIER_HEADER, &rows, ListFormat::Text)?;
        }
    }
    Ok(Exit::Ok)
}

/// Refuses a `--threshold-ps` that is no size of offset.
pub(super) fn check_threshold(threshold_ps: f64) -> Result<(), Diagnostic> {
    if !(threshold_ps.is_finite() && threshold_ps >= 0.0) {
        return Err(Diagnostic::plain(format!(
            "--threshold-ps {threshold_ps}: not a size of offset"
        ))
        .with_hint("give a number of ps ≥ 0, e.g. --threshold-ps 20"));
    }
    Ok(())
}

fn stations(args: FleetStationsArgs) -> Result<Exit, Diagnostic> {
    check_threshold(args.threshold.threshold_ps)?;
    let cells = fleet(&args.store)?;
    let offsets = station_offsets(&deviations(&cells), args.threshold.threshold_ps);
    let header = STATIONS_HEADER;
    let text = args.format == ListFormat::Text;
    let rows: Vec<Vec<String>> = offsets.iter().map(|o| station_row(o, text)).collect();
    print_table(&header, &rows, args.format)?;
    if args.format == ListFormat::Text {
        let flagged = offsets.iter().filter(|o| o.flagged).count();
        log::notice(&format!(
            "taucal: offsets against the median station, cell-centred; flagged when the 95 % \
             interval excludes 0 and |offset| > {} ps ({flagged} flagged). A path e ps longer \
             than declared shows as +2e ps",
            args.threshold.threshold_ps
        ));
    }
    Ok(Exit::Ok)
}

fn plan(args: FleetPlanArgs) -> Result<Exit, Diagnostic> {
    if let Some(l) = args.max_ci95_ps {
        if !(l.is_finite() && l > 0.0) {
            return Err(
                Diagnostic::plain(format!("--max-ci95-ps {l}: not a half-width")).with_hint(
                    "give the recipe's [accept] max_ci95_ps in ps, e.g. --max-ci95-ps 50",
                ),
            );
        }
    }
    let cells = fleet(&args.store)?;
    let bad = |e: crate::fleet::plan::PlanError| Diagnostic::plain(e.to_string());
    let pop = population(&cells).map_err(bad)?;
    let p = make_plan(&pop, args.measure).map_err(|e| {
        bad(e).with_hint(
            "each unit's latest accepted run must hold the same cells; --measure counts cells",
        )
    })?;
    let m = &p.model;
    let header = format!(
        "taucal population model: {} units, {} cells; measure {} of them, predict the rest\n\
         written by `taucal fleet plan --measure {}`; name it in a recipe's [fit] predict\n\
         covariance: Ledoit–Wolf shrinkage {:.4} (of measured K, measurement noise included)",
        pop.units.len(),
        m.cells.len(),
        m.measured.len(),
        args.measure,
        p.shrinkage
    );
    crate::data::manifest::write_atomic(&args.out, model_toml(m, &header).as_bytes()).map_err(
        |e| Diagnostic::in_file(&args.out, format!("cannot write the population model: {e}")),
    )?;
    println!(
        "plan: measure {} of {} cells, chosen greedily to keep the worst prediction SD of the \
         rest smallest; {} units ({} left out for lacking a cell), Ledoit–Wolf shrinkage {:.4}",
        m.measured.len(),
        m.cells.len(),
        pop.units.len(),
        pop.incomplete,
        p.shrinkage
    );
    let head = [
        "center_mhz",
        "bw_mhz",
        "gain_index",
        "action",
        "mean_ps",
        "sd_ps",
        "pred_sd_ps",
        "pred_ci95_ps",
    ];
    let mut over = Vec::new();
    let rows: Vec<Vec<String>> = (0..m.cells.len())
        .map(|i| {
            let (c, b, g) = m.cells[i];
            let pred = p.expected.iter().find(|e| e.index == i);
            let ci = pred.map(|e| Z95 * e.sd_ps);
            if let (Some(ci), Some(limit)) = (ci, args.max_ci95_ps) {
                if ci > limit {
                    over.push((m.cells[i], ci));
                }
            }
            vec![
                c.to_string(),
                b.to_string(),
                g.to_string(),
                if pred.is_some() { "predict" } else { "measure" }.to_string(),
                num(m.mean_ps[i], 1),
                num(m.cov_ps2[i][i].sqrt(), 1),
                pred.map_or(String::new(), |e| num(e.sd_ps, 1)),
                ci.map_or(String::new(), |c| num(c, 1)),
            ]
        })
        .collect();
    print_table(&head, &rows, ListFormat::Text)?;
    match args.max_ci95_ps {
        None => {
            println!("no acceptance limit given (--max-ci95-ps): predicted intervals not judged")
        }
        Some(limit) if over.is_empty() => {
            println!("every predicted 95 % interval is within the acceptance limit ±{limit} ps")
        }
        Some(limit) => {
            for ((c, b, g), ci) in &over {
                println!(
                    "NOT WITHIN LIMIT: {c}/{b}/{g} predicted to ±{ci:.1} ps, over the acceptance \
                     limit ±{limit} ps: the population's spread does not allow better from these \
                     {} cells; measure this cell too, or more cells",
                    m.measured.len()
                );
            }
        }
    }
    println!("model written to {}", args.out.display());
    if let (Some(full), Some(out)) = (&args.recipe, &args.recipe_out) {
        write_reduced(full, out, &args.out, m)?;
        println!("reduced recipe written to {}", out.display());
    }
    if args.validate {
        let v = leave_one_out(&pop, &m.measured).map_err(bad)?;
        println!(
            "validate: leaving each of {} units out, {} of {} prediction intervals held the \
             measured value ({:.1} %; widened by that value's own noise)",
            v.units,
            v.covered,
            v.intervals,
            100.0 * v.coverage()
        );
        println!(
            "validate: exchanges per unit {:.0} with the plan against {:.0} for the full \
             calibration ({:.1} %)",
            v.plan_exchanges,
            v.full_exchanges,
            100.0 * v.exchange_ratio()
        );
    }
    Ok(Exit::Ok)
}

/// Writes `full` cut to `model`'s measured cells as `out`, naming the model at `model_path`.
fn write_reduced(
    full: &std::path::Path,
    out: &std::path::Path,
    model_path: &std::path::Path,
    model: &crate::fit::predict::PredictModel,
) -> Result<(), Diagnostic> {
    let text = crate::text_file::read(full)
        .map_err(|e| Diagnostic::in_file(full, format!("cannot read the recipe: {e}")))?;
    // The reduced recipe names the model relative to its own folder when they share one.
    let folder = |p: &std::path::Path| {
        let parent = p.parent().filter(|d| !d.as_os_str().is_empty());
        std::fs::canonicalize(parent.unwrap_or(std::path::Path::new(".")))
    };
    let predict = match (folder(out), folder(model_path), model_path.file_name()) {
        (Ok(a), Ok(b), Some(name)) if a == b => name.to_string_lossy().into_owned(),
        _ => std::fs::canonicalize(model_path)
            .unwrap_or_else(|_| model_path.to_path_buf())
            .display()
            .to_string(),
    };
    let reduced = reduce(&text, model, &predict).map_err(|e| {
        let source = crate::diagnostic::SourceFile::new(full, text.clone());
        source.key_error(crate::diagnostic::KeyError::new(
            e.key,
            e.message,
            "give a factory recipe whose sweep stages hold one mid-plateau point per gain state",
        ))
    })?;
    let header = format!(
        "# {}, cut by `taucal fleet plan` to the cells its model measures; the model\n\
         # ({predict}) predicts the rest.\n\n",
        full.display()
    );
    crate::data::manifest::write_atomic(out, format!("{header}{reduced}").as_bytes())
        .map_err(|e| Diagnostic::in_file(out, format!("cannot write the reduced recipe: {e}")))
}
