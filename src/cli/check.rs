//! `taucal check`: every validation a run does, then the plan; nothing is executed.

use super::args::CheckArgs;
use super::{bench_arg, Exit};
use crate::diagnostic::Diagnostic;
use crate::recipe::{Points, Stage, Sweep};

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
    let mut total = 0u64;
    for (i, stage) in plan.stages.iter().enumerate() {
        match stage {
            Stage::Sweep(s) | Stage::GainMap(s) => total += describe(i, stage, s),
            Stage::Verify(v) => {
                total += describe(i, stage, &v.sweep);
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
    }
    println!("declared exchanges: {total} (at least; adaptive and mid-plateau stages decide at run time)");
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

/// Prints one measurement stage and returns the exchanges it declares.
fn describe(i: usize, stage: &Stage, s: &Sweep) -> u64 {
    let kind = match stage {
        Stage::GainMap(_) => "gain map (swept up, then down)",
        Stage::Verify(_) => "verification",
        _ => "sweep",
    };
    let passes = if matches!(stage, Stage::GainMap(_)) {
        2
    } else {
        1
    };
    let head = format!(
        "stage {i} `{}` {kind} on {} MHz / {} MHz:",
        s.name, s.channel.center_mhz, s.channel.bw_mhz
    );
    let per_point = u64::from(s.bursts) * u64::from(s.frames);
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
            let n = passes * p.len() as u64 * per_point;
            println!(
                "{head} {} points {first}..{last} dB, {} bursts × {} exchanges each{adaptive}, settle {} ms: {n} exchanges",
                p.len(),
                s.bursts,
                s.frames,
                s.settle_ms
            );
            n
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
            0
        }
    }
}
