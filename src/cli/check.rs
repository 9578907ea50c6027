//! `taucal check`: every validation a run does, then the plan; nothing is executed.

use super::args::CheckArgs;
use super::{bench_arg, Exit};
use crate::diagnostic::Diagnostic;
use crate::recipe::{Points, Stage, Sweep};
use crate::runner::estimate::{
    estimate, human_duration, Bound, Estimate, StageEstimate, TimingSource,
};

/// Validates the recipe and bench, compiles scripts, prints the plan.
pub fn run(args: CheckArgs) -> Result<Exit, Diagnostic> {
    let bench = bench_arg::for_recipe(&args.bench, &args.recipe)?;
    let plan = crate::recipe::load(&args.recipe, &args.set, &bench)?;
    println!("recipe `{}`: {}", plan.name, plan.description.trim());
    println!("{}", bench_arg::describe(&bench, None));
    if let Some(c) = &bench.reference.certificate {
        let today = super::run_date::today()?;
        println!("{}", super::run_date::certificate_line(c, today));
        if c.overdue_on(today) && plan.accept.refuse_overdue_reference {
            println!("a run would be refused: the recipe sets accept.refuse_overdue_reference");
        }
    }
    describe_measured_path(&bench, &plan)?;
    if let Some(p) = &plan.predict {
        describe_prediction(p, &crate::recipe::channels(&plan))?;
    }
    if let Some((lo, hi)) = bench.usable_atten_db() {
        println!(
            "usable attenuation {lo}..{hi} dB (DUT receive level {:.1} to {:.1} dBm)",
            bench.dut_rx_dbm(lo),
            bench.dut_rx_dbm(hi)
        );
    }
    let est = estimate(&plan, &bench);
    let count = plan.stages.len();
    for (index, (stage, stage_est)) in plan.stages.iter().zip(&est.stages).enumerate() {
        // Numbered from 1 of the total, as the progress display numbers them while running.
        let i = format!("{}/{count}", index + 1);
        match stage {
            Stage::Sweep(s) | Stage::GainMap(s) => describe(&i, stage, s),
            Stage::Verify(v) => {
                describe(&i, stage, &v.sweep);
                println!(
                    "  verifies range error against receive level; single-state calibration at {} dBm",
                    v.single_state_rx_dbm
                );
            }
            Stage::Soak(s) => println!(
                "stage {i} `{}` soak at {} °C: until the DUT stays within ±{} °C for {} s (reading every {} s, at most {} s)",
                s.name, s.setpoint_c, s.within_c, s.stable_s, s.poll_s, s.timeout_s
            ),
            Stage::Cells(c) => println!(
                "stage {i} `{}` cells on {} MHz / {} MHz: a map of {} {}..{} dB each way, {} × {} per step; then a point mid-plateau per gain state (≥ {} dB from switch points seen either way, moved away from one its exchanges straddle), a pilot of {} × {} each, adaptive until every cell it feeds reaches a 95 % half-width of {} ps (at most {}), settle {} ms",
                c.name,
                c.channel.center_mhz,
                c.channel.bw_mhz,
                plural(c.map_db.len() as u64, "point"),
                c.map_db[0],
                c.map_db[c.map_db.len() - 1],
                plural(u64::from(c.map_bursts), "burst"),
                plural(u64::from(c.frames), "exchange"),
                c.margin_db,
                plural(u64::from(c.bursts), "burst"),
                plural(u64::from(c.frames), "exchange"),
                c.adaptive.target_ci95_ps,
                plural(u64::from(c.adaptive.max_bursts), "burst"),
                c.settle_ms
            ),
            Stage::Script(s) => {
                crate::script::check(&s.source)?;
                println!(
                    "stage {i} `{}` script ({}), starts on {} MHz / {} MHz; its exchanges depend on its logic",
                    s.name,
                    plural(s.source.code.lines().count() as u64, "line"),
                    s.channel.center_mhz,
                    s.channel.bw_mhz
                );
            }
        }
        println!("{}", stage_line(stage_est));
    }
    print!("{}", plan_summary(&est));
    if let Some(st) = crate::runner::station_estimate::station_estimate(&est, &bench) {
        println!(
            "station: {} slots side by side, {:.3} s each; the shared reference is on the air {:.3} s for all of them (one exchange at a time); station bench time {:.3} s, {:.1} units per hour{}",
            st.slots,
            st.slot_s,
            st.air_s,
            st.station_s,
            st.units_per_hour,
            if est.bound == Bound::Estimate {
                ""
            } else {
                " (from the lower bound above: at most this many)"
            }
        );
    }
    if let Some(l) = plan.accept.max_ci95_ps {
        println!("accept: every cell's 95 % half-width ≤ {l} ps");
    }
    if let Some(l) = plan.accept.min_gain_states {
        println!(
            "accept: at least {} measured",
            plural(u64::from(l), "DUT gain state")
        );
    }
    if let Some(l) = plan.accept.max_range_error_m {
        println!("accept: verified range error within {l} m at every level");
    }
    println!("check passed: nothing was run");
    Ok(Exit::Ok)
}

/// The measured path's delays on each channel the plan starts on, from its Touchstone files.
fn describe_measured_path(
    bench: &crate::bench::Bench,
    plan: &crate::recipe::Plan,
) -> Result<(), Diagnostic> {
    let Some(m) = &bench.measured_path else {
        return Ok(());
    };
    let name = |f: &crate::bench::measured_path::MeasuredFile| {
        f.path
            .file_name()
            .map_or_else(String::new, |n| n.to_string_lossy().into_owned())
    };
    for ((center, bw), p) in bench.channel_paths(&crate::recipe::channels(plan))? {
        println!(
            "path on {center} MHz / {bw} MHz from {}: S21 {:.1} ps, S12 {:.1} ps (round trip {:.1} ps), in-band ripple u {:.2} ps",
            name(&m.cable),
            p.cable.s21_ps,
            p.cable.s12_ps,
            p.cable.round_trip_ps(),
            p.cable.ripple_u_ps
        );
        for ((db, a), (_, file)) in p.atten.iter().zip(&m.atten) {
            println!(
                "  attenuator at {db} dB from {}: S21 {:.1} ps, S12 {:.1} ps, ripple u {:.2} ps (settings nearest {db} dB use it)",
                name(file),
                a.s21_ps,
                a.s12_ps,
                a.ripple_u_ps
            );
        }
    }
    Ok(())
}

/// The recipe's `[fit] predict` model: which of its cells the run measures and which it
/// predicts, each predicted cell's expected 95 % half-width when the measured ones come out
/// with the population's own noise, and the model cells on channels the recipe never visits
/// (no run measures those). A covariance the prediction cannot use stops the check here, not
/// a run at its fit, after the bench time is spent.
fn describe_prediction(
    p: &crate::recipe::plan::Predictor,
    channels: &[(u32, u32)],
) -> Result<(), Diagnostic> {
    use crate::fit::predict::Z95;
    let m = &p.model;
    let file = p.path.display();
    let cell = |i: usize| {
        let (center, bw, gain) = m.cells[i];
        format!("{center} MHz / {bw} MHz gain {gain}")
    };
    let visited = |i: usize| {
        let (center, bw, _) = m.cells[i];
        channels.contains(&(center, bw))
    };
    let (measured, unvisited): (Vec<usize>, Vec<usize>) =
        m.measured.iter().partition(|&&i| visited(i));
    let predicted = m
        .expected_sd(&measured)
        .map_err(|e| Diagnostic::in_file(&p.path, format!("the population model: {e}")).with_hint(
            "write the model again with `taucal fleet plan --out`; the measured cells' covariance must be positive definite",
        ))?;
    println!(
        "fit: predicts from the population model {file} ({}); the cells it marks measured:",
        plural(m.cells.len() as u64, "cell")
    );
    for &i in &measured {
        println!("  measured {}", cell(i));
    }
    for &i in &unvisited {
        println!(
            "  measured {}: a channel the recipe does not visit, so nothing is predicted from it",
            cell(i)
        );
    }
    if measured.is_empty() {
        println!("  the recipe visits none of their channels: a run predicts nothing");
        return Ok(());
    }
    for q in &predicted {
        println!(
            "  predicted {}: expected 95 % half-width {:.1} ps",
            cell(q.index),
            Z95 * q.sd_ps
        );
    }
    Ok(())
}

/// `n` and the noun, plural unless `n` is 1.
fn plural(n: u64, noun: &str) -> String {
    if n == 1 {
        format!("1 {noun}")
    } else {
        format!("{n} {noun}s")
    }
}

/// One stage's estimate, indented under its description.
fn stage_line(e: &StageEstimate) -> String {
    let time = format!("{} of bench time", human_duration(e.bench_s));
    // A stage that records nothing (a soak) says so rather than counting zeros.
    let counted = if e.points == 0 && e.exchanges == 0 {
        format!("{time}, no exchanges")
    } else {
        format!(
            "{}, {}, {}, {time}",
            plural(e.points, "point"),
            plural(e.bursts, "burst"),
            plural(e.exchanges, "exchange")
        )
    };
    let note = e.note.as_ref().map_or(String::new(), |n| format!(" ({n})"));
    match e.bound {
        Bound::Estimate => format!("  plan: {counted}"),
        Bound::AtLeast => format!("  plan: at least {counted}{note}"),
        Bound::Unknown => format!("  plan: unknown{note}"),
    }
}

/// The plan's totals and the estimated bench time, saying what it leaves out.
fn plan_summary(est: &Estimate) -> String {
    let t = est.timing;
    let from = match t.source {
        TimingSource::Simulation => "timing from the simulation's [sim.ftm] and [sim.attenuator]",
        TimingSource::BenchFile => "timing from the bench's [timing]",
        TimingSource::Defaults => "timing by default (the bench file has no [timing])",
    };
    let lower = match est.bound {
        Bound::Estimate => String::new(),
        _ => {
            let which: Vec<String> = est
                .stages
                .iter()
                .filter(|s| s.bound != Bound::Estimate)
                .map(|s| format!("`{}`", s.name))
                .collect();
            format!("; a lower bound: {} decide at run time", which.join(", "))
        }
    };
    format!(
        "plan: {}, {}, {}\n\
         estimated bench time: {:.3} s{}{lower}\n\
         {from}: burst setup {} ms, {} µs per exchange, attenuator switch {} ms\n",
        plural(est.stages.len() as u64, "stage"),
        plural(est.points(), "point"),
        plural(est.exchanges(), "exchange"),
        est.bench_s,
        if est.bench_s >= 120.0 {
            format!(" ({})", human_duration(est.bench_s))
        } else {
            String::new()
        },
        t.burst_setup_ms,
        t.frame_interval_us,
        t.atten_switch_ms
    )
}

/// Prints one measurement stage.
fn describe(i: &str, stage: &Stage, s: &Sweep) {
    let kind = match stage {
        Stage::GainMap(_) => "gain map (swept up, then down)",
        Stage::Verify(_) => "verification",
        _ => "sweep",
    };
    let head = format!(
        "stage {i} `{}` {kind} on {} MHz / {} MHz:",
        s.name, s.channel.center_mhz, s.channel.bw_mhz
    );
    let adaptive = s.adaptive.map_or(String::new(), |a| {
        format!(
            ", adaptive until the 95 % half-width is {} ps (at most {})",
            a.target_ci95_ps,
            plural(u64::from(a.max_bursts), "burst")
        )
    });
    match &s.points {
        Points::Fixed(p) => {
            let first = p.first().copied().unwrap_or_default();
            let last = p.last().copied().unwrap_or_default();
            let direction = if matches!(stage, Stage::GainMap(_)) {
                " each way"
            } else {
                ""
            };
            println!(
                "{head} {} {first}..{last} dB{direction}, {} × {} each{adaptive}, settle {} ms",
                plural(p.len() as u64, "point"),
                plural(u64::from(s.bursts), "burst"),
                plural(u64::from(s.frames), "exchange"),
                s.settle_ms
            );
        }
        Points::MidPlateau {
            map_stage,
            per_state,
            margin_db,
        } => {
            println!(
                "{head} {} per gain state mid-plateau (≥ {margin_db} dB from switch points, from `{map_stage}`), {} × {} each{adaptive}, settle {} ms",
                plural(u64::from(*per_state), "point"),
                plural(u64::from(s.bursts), "burst"),
                plural(u64::from(s.frames), "exchange"),
                s.settle_ms
            );
        }
    }
}
