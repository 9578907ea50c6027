//! `taucal ota`: the range offset of a device that reports ranges, from ranges at known
//! distances.

use super::args::{OtaArgs, UnitArg};
use super::{csv_file, log, Exit};
use crate::diagnostic::{did_you_mean, Diagnostic};
use crate::fit::ota::{calibrate, plausible_truth_unit, read_ranges, OtaError, RangeUnit};

impl From<UnitArg> for RangeUnit {
    fn from(u: UnitArg) -> Self {
        match u {
            UnitArg::Mm => RangeUnit::Mm,
            UnitArg::Cm => RangeUnit::Cm,
            UnitArg::M => RangeUnit::M,
        }
    }
}

/// Reads the ranges, calibrates at `--at`, prints the offset and the error table.
pub fn run(args: OtaArgs) -> Result<Exit, Diagnostic> {
    let file = csv_file::load(&args.ranges)?;
    let ranges = read_ranges(&file.text, &args.measured, &args.truth).map_err(|e| {
        let columns = e.first_line_columns.iter().map(String::as_str);
        let suggestion = [&e.measured, &e.truth]
            .into_iter()
            .filter(|want| {
                !e.first_line_columns
                    .iter()
                    .any(|c| c.eq_ignore_ascii_case(want))
            })
            .filter_map(|want| {
                did_you_mean(want, columns.clone()).map(|s| format!("`{s}` for `{want}`"))
            })
            .collect::<Vec<_>>();
        let hint = if suggestion.is_empty() {
            format!(
                "the first line's columns are: {}",
                e.first_line_columns.join(", ")
            )
        } else {
            format!("did you mean {}?", suggestion.join(" and "))
        };
        Diagnostic::in_file(&args.ranges, e.to_string()).with_hint(hint)
    })?;
    let measured_unit = RangeUnit::from(args.unit);
    let truth_unit = match args.truth_unit {
        Some(u) => RangeUnit::from(u),
        None => match plausible_truth_unit(&ranges.ranges, measured_unit, measured_unit) {
            Some(u) => {
                eprintln!(
                    "taucal: true distances look like {u}, not {measured_unit}: reading them as {u} (pass --truth-unit to say otherwise)"
                );
                u
            }
            None => measured_unit,
        },
    };
    let pairs: Vec<(f64, f64)> = ranges
        .ranges
        .iter()
        .map(|r| {
            (
                r.measured * measured_unit.metres(),
                r.truth * truth_unit.metres(),
            )
        })
        .collect();
    let skipped = match ranges.first_skipped_line {
        Some(line) => format!(
            "{} skipped (a value empty or not a number; first at line {line})",
            ranges.skipped
        ),
        None => "none skipped".to_string(),
    };
    log::notice(&format!(
        "taucal: {} rows after the header (line {}), {} used, {skipped}",
        ranges.rows,
        ranges.header_line,
        pairs.len()
    ));
    let cal = calibrate(&pairs, args.at, args.tolerance_m).map_err(|e| {
        let d = Diagnostic::in_file(&args.ranges, e.to_string());
        match &e {
            OtaError::NoDistanceAt { available_m, .. } => d.with_hint(format!(
                "--at must be one of the true distances in the file: {}",
                available_m
                    .iter()
                    .map(|m| format!("{m}"))
                    .collect::<Vec<_>>()
                    .join(", ")
            )),
            OtaError::NoRanges => d.with_hint(format!(
                "check --measured `{}` and --truth `{}` name columns that hold numbers",
                args.measured, args.truth
            )),
            OtaError::BadParameter { .. } => d,
        }
    })?;
    log::notice(&format!(
        "taucal: offset from {} ranges at {} m; subtract it from every measured range",
        cal.n_at, cal.at_true_m
    ));
    println!("offset {:.4} m", cal.offset_m);
    println!("true_m,n,median_error_before_m,median_error_after_m,p90_abs_error_after_m");
    for r in &cal.rows {
        println!(
            "{:.3},{},{:.4},{:.4},{:.4}",
            r.true_m, r.n, r.median_error_before_m, r.median_error_after_m, r.p90_abs_error_after_m
        );
    }
    Ok(Exit::Ok)
}
