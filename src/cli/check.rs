//! `taucal check`: every validation a run does, then the plan; nothing is executed.

use super::args::CheckArgs;
use super::{bench_arg, Exit};
use crate::diagnostic::Diagnostic;
use crate::recipe::Stage;

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
            Stage::Sweep(s) => {
                let n = s.points_db.len() as u64 * u64::from(s.bursts) * u64::from(s.frames);
                total += n;
                let first = s.points_db.first().copied().unwrap_or_default();
                let last = s.points_db.last().copied().unwrap_or_default();
                println!(
                    "stage {i} `{}` sweep on {} MHz / {} MHz: {} points {first}..{last} dB, {} bursts × {} exchanges each, settle {} ms: {n} exchanges",
                    s.name, s.channel.center_mhz, s.channel.bw_mhz, s.points_db.len(), s.bursts, s.frames, s.settle_ms
                );
            }
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
    println!("declared exchanges: {total}");
    if let Some(l) = plan.accept.max_ci95_ps {
        println!("accept: every cell's 95 % half-width ≤ {l} ps");
    }
    if let Some(l) = plan.accept.min_gain_states {
        println!("accept: at least {l} DUT gain states measured");
    }
    println!("check passed: nothing was run");
    Ok(Exit::Ok)
}
