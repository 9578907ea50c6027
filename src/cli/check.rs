//! `taucal check`: every validation a run does, then the plan; nothing is executed.

use super::args::CheckArgs;
use super::{bench_arg, Exit};
use crate::diagnostic::Diagnostic;
use crate::recipe::{Points, Stage, Sweep};
use crate::runner::estimate::{estimate, human_duration, Bound, Estimate, StageEstimate};

/// Validates the recipe and bench, compiles scripts, prints the plan.
pub fn run(args: CheckArgs) -> Result<Exit, Diagnostic> {
    let bench = bench_arg::load(&args.bench)?;
    let plan = crate::recipe::load(&args.recipe, &args.set, &bench)?;
    println!("recipe `{}`: {}", plan.name, plan.description.trim());
    println!("{}", bench_arg::describe(&bench, None));
    if let Some((lo, hi)) = bench.usable_atten_db() {
        println!(
            "usable attenuation {lo}..{hi} dB (DUT receive level {:.1} to {:.1} dBm)",
            bench.dut_rx_dbm(lo),
            bench.dut_rx_dbm(hi)
        );
    }
    let est = estimate(&plan, &bench);
    for (i, (stage, stage_est)) in plan.stages.iter().zip(&est.stages).enumerate() {
        match stage {
            Stage::Sweep(s) | Stage::GainMap(s) => describe(i, stage, s),
            Stage::Verify(v) => {
                describe(i, stage, &v.sweep);
                println!(
                    "  verifies range error against receive level; single-state calibration at {} dBm",
                    v.single_state_rx_dbm
                );
            }
            Stage::Soak(s) => println!(
                "stage {i} `{}` soak at {} °C: until the DUT stays within ±{} °C for {} s (reading every {} s, at most {} s)",
                s.name, s.setpoint_c, s.within_c, s.stable_s, s.poll_s, s.timeout_s
            ),
            Stage::Script(s) => {
                crate::script::check(&s.source)?;
                println!(
                    "stage {i} `{}` script ({} lines), starts on {} MHz / {} MHz; its exchanges depend on its logic",
                    s.name,
                    s.source.code.lines().count(),
                    s.channel.center_mhz,
                    s.channel.bw_mhz
                );
            }
        }
        println!("{}", stage_line(stage_est));
    }
    print!("{}", plan_summary(&est));
    if let Some(l) = plan.accept.max_ci95_ps {
        println!("accept: every cell's 95 % half-width ≤ {l} ps");
    }
    if let Some(l) = plan.accept.min_gain_states {
        println!("accept: at least {l} DUT gain states measured");
    }
    if let Some(l) = plan.accept.max_range_error_m {
        println!("accept: verified range error within {l} m at every level");
    }
    println!("check passed: nothing was run");
    Ok(Exit::Ok)
}

/// One stage's estimate, indented under its description.
fn stage_line(e: &StageEstimate) -> String {
    let counted = format!(
        "{} points, {} bursts, {} exchanges, {} of bench time",
        e.points,
        e.bursts,
        e.exchanges,
        human_duration(e.bench_s)
    );
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
    let from = if t.simulated {
        "the simulation's [sim.ftm] and [sim.attenuator]"
    } else {
        "the bench's [timing]"
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
        "plan: {} stages, {} points, {} exchanges\n\
         estimated bench time: {:.3} s{}{lower}\n\
         timing from {from}: burst setup {} ms, {} µs per exchange, attenuator switch {} ms\n",
        est.stages.len(),
        est.points(),
        est.exchanges(),
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
fn describe(i: usize, stage: &Stage, s: &Sweep) {
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
            ", adaptive until the 95 % half-width is {} ps (at most {} bursts)",
            a.target_ci95_ps, a.max_bursts
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
                "{head} {} points {first}..{last} dB{direction}, {} bursts × {} exchanges each{adaptive}, settle {} ms",
                p.len(),
                s.bursts,
                s.frames,
                s.settle_ms
            );
        }
        Points::MidPlateau {
            map_stage,
            per_state,
            margin_db,
        } => {
            println!(
                "{head} {per_state} points per gain state mid-plateau (≥ {margin_db} dB from switch points, from `{map_stage}`), {} bursts × {} exchanges each{adaptive}, settle {} ms",
                s.bursts, s.frames, s.settle_ms
            );
        }
    }
}
