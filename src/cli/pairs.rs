//! `taucal pairs`: unit delays from pairwise sums, when no unit is a golden reference.

use super::args::PairsArgs;
use super::{csv_file, log, Exit};
use crate::diagnostic::Diagnostic;
use crate::fit::pairs::{read_pairs, solve_pairs, PairsError, PAIRS_COLUMNS};

/// Reads the pairs file, solves, prints `unit,delay_ps,se_ps`.
pub fn run(args: PairsArgs) -> Result<Exit, Diagnostic> {
    let file = csv_file::load(&args.pairs)?;
    let pairs = read_pairs(&file.text).map_err(|e| {
        csv_file::at_line(&file, e.byte, e.message).with_hint(format!(
            "a pairs file has a header with the columns {} and one measured pair per line",
            PAIRS_COLUMNS.join(",")
        ))
    })?;
    let solution = solve_pairs(&pairs).map_err(|e| {
        let d = Diagnostic::in_file(&args.pairs, e.to_string());
        match e {
            PairsError::NoOddCycle { .. } => d.with_hint(
                "around an even cycle, adding to every other unit and subtracting from the rest \
                 changes no sum; add a pair that closes an odd cycle (a–b, b–c, c–a) in each \
                 connected group of units",
            ),
            _ => d,
        }
    })?;
    log::notice(&format!(
        "taucal: {} pairs, {} units, {} degrees of freedom, χ² {:.2}",
        pairs.len(),
        solution.units.len(),
        solution.dof,
        solution.chi2
    ));
    println!("unit,delay_ps,se_ps");
    for u in &solution.units {
        println!("{},{:.3},{:.3}", csv_field(&u.unit), u.delay_ps, u.se_ps);
    }
    Ok(Exit::Ok)
}

/// Quotes a unit name when CSV needs it.
fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}
