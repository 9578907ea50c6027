//! `taucal run`.

use super::args::RunArgs;
use super::log::{self, Verbosity};
use super::progress::Progress;
use super::{bench_arg, table, Exit};
use crate::data::run_dir::files;
use crate::diagnostic::Diagnostic;
use crate::runner::finalise::RunReport;
use crate::runner::request::RunRequest;
use crate::runner::run::execute;
use crate::runner::RunError;
use crate::web::live::{Both, PlanFacts, ProgressFrom};
use std::sync::Arc;

/// Validates, runs, fits, and reports.
pub fn run(args: RunArgs, verbosity: Verbosity) -> Result<Exit, Diagnostic> {
    let bench = bench_arg::for_recipe(&args.bench, &args.recipe)?.reconnect(&args.connect)?;
    super::watch::refuse_on_station(&args.watch, &bench)?;
    if bench.is_slotted() {
        return super::run_station::run(args, bench);
    }
    let plan = crate::recipe::load(&args.recipe, &args.set, &bench)?;
    for stage in &plan.stages {
        if let crate::recipe::Stage::Script(s) = stage {
            crate::script::check(&s.source)?;
        }
    }
    log::notice(&format!(
        "taucal: {}",
        bench_arg::describe(&bench, args.seed)
    ));
    let overdue = overdue_reference(&bench, &plan)?;
    let mut ledger = super::store_ledger::StoreLedger::for_run(&args.store, &bench)?;
    let station = super::store_ledger::station(args.station.as_deref(), &bench);
    let estimate = crate::runner::estimate::estimate(&plan, &bench);
    let bench = Arc::new(bench);
    let live = match &args.watch {
        Some(addr) => Some(super::watch::start(
            addr,
            args.allow_remote,
            bench.clone(),
            PlanFacts::of(&plan, &bench),
            ProgressFrom::Events,
            None,
        )?),
        None => None,
    };
    let observer = observers(Progress::start(verbosity, &estimate), live.as_ref());
    let request = RunRequest {
        plan,
        bench,
        overrides: args.set,
        out: args.out,
        seed: args.seed,
        realtime: args.realtime,
        resume: None,
        unit: args.unit.filter(|u| !u.trim().is_empty()),
        station,
        seat: None,
        attenuator: None,
    };
    let report = execute(
        request,
        |dir| {
            log::open_run_logs(dir, files::LOG, files::JSON_LOG, false);
            log::notice(&format!("taucal: run directory {}", dir.display()));
            if let Some(live) = &live {
                log::notice(&format!("taucal: watch the run at {}", live.url()));
                live.follow(dir);
            }
            if let Some(line) = &overdue {
                tracing::warn!("{line}");
            }
        },
        observer,
        ledger.as_mut(),
    );
    super::watch::finish(live);
    Ok(outcome(&report?))
}

/// The run's observers: the terminal's progress display where one is drawn, and the live page
/// where one is served (shared with `taucal resume`).
pub fn observers(
    progress: Option<Progress>,
    live: Option<&crate::web::live::LiveServer>,
) -> Box<dyn crate::runner::RunObserver> {
    let terminal: Box<dyn crate::runner::RunObserver> = match progress {
        Some(p) => Box::new(p),
        None => Box::new(crate::runner::Unobserved),
    };
    match live {
        Some(l) => Box::new(Both(terminal, Box::new(l.observer()))),
        None => terminal,
    }
}

/// A warning when the reference's certificate is past due on the run's start date; an error
/// instead (nothing runs) when the recipe sets `accept.refuse_overdue_reference`.
fn overdue_reference(
    bench: &crate::bench::Bench,
    plan: &crate::recipe::Plan,
) -> Result<Option<String>, Diagnostic> {
    let Some(c) = &bench.reference.certificate else {
        return Ok(None);
    };
    let today = super::run_date::today()?;
    if !c.overdue_on(today) {
        return Ok(None);
    }
    let line = super::run_date::certificate_line(c, today);
    if plan.accept.refuse_overdue_reference {
        return Err(Diagnostic::in_file(
            &plan.source.path,
            format!("refused: {line}, and the recipe sets accept.refuse_overdue_reference"),
        )
        .with_hint(
            "have the reference unit calibrated again and name the new certificate in the \
             bench's [reference] certificate",
        ));
    }
    Ok(Some(line))
}

/// Prints how a run ended and returns its exit status (shared with `taucal resume`).
pub fn outcome(report: &RunReport) -> Exit {
    let m = &report.manifest;
    println!("run directory: {}", report.dir.display());
    println!(
        "recorded {} exchanges ({} ok) in {} bursts at {} points; bench time {:.1} s, wall time {:.2} s",
        m.counts.exchanges, m.counts.exchanges_ok, m.counts.bursts, m.counts.points, m.bench_time_s, m.wall_time_s
    );
    if let Some(fit) = &report.fit {
        println!("calibration table (DUT K = TX + RX group delay per gain state):");
        print!("{}", table::render(&fit.rows));
    }
    if !report.verify.is_empty() {
        let worst = |f: fn(&crate::fit::verify::VerifyRow) -> f64| {
            report.verify.iter().map(|r| f(r).abs()).fold(0.0, f64::max)
        };
        println!(
            "verification over {} levels: worst median range error {:.3} m with the per-gain table, {:.3} m with a single-state calibration (verify.csv)",
            report.verify.len(),
            worst(|r| r.range_error_table_m),
            worst(|r| r.range_error_single_m)
        );
    }
    for c in &m.acceptance {
        println!("acceptance {}", c.summary(report.failure.is_none()));
    }
    if let Some(why) = &report.manifest_unwritten {
        let reason = m
            .error
            .as_deref()
            .map_or(String::new(), |e| format!(": {e}"));
        eprint!(
            "{}",
            Diagnostic::plain(format!(
                "the run's manifest could not be written ({why}); it may still say `running`, but the run ended {}{reason}",
                status_word(m.status)
            ))
            .with_hint("free some disk space; `taucal resume` continues the run from its journal")
        );
    }
    if let Some(f) = &report.failure {
        eprintln!("{}", failure_text(f));
        let how = if matches!(f, RunError::Interrupted) {
            "stopped"
        } else {
            "failed"
        };
        println!(
            "status: {how} — data so far are kept; continue with: taucal resume {}",
            report.dir.display()
        );
        return Exit::Stopped;
    }
    if report.accepted() {
        println!("status: completed, every acceptance limit met");
        Exit::Ok
    } else {
        println!("status: completed, but an acceptance limit was not met");
        Exit::LimitFailed
    }
}

/// The manifest's word for a status.
fn status_word(status: crate::data::RunStatus) -> &'static str {
    match status {
        crate::data::RunStatus::Running => "running",
        crate::data::RunStatus::Completed => "completed",
        crate::data::RunStatus::Stopped => "stopped",
        crate::data::RunStatus::Failed => "failed",
    }
}

fn failure_text(f: &crate::runner::RunError) -> String {
    match f {
        crate::runner::RunError::Script(d) => d.to_string(),
        crate::runner::RunError::Refused { message, hint }
        | crate::runner::RunError::Exposed { message, hint } => {
            Diagnostic::plain(format!("run stopped: {message}"))
                .with_hint(hint.clone())
                .to_string()
        }
        other => Diagnostic::plain(format!("run stopped: {other}")).to_string(),
    }
}
