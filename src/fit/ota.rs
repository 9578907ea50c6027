//! Over-the-air offset calibration from ranges at known distances.
//!
//! Many real devices report ranges, not timestamps, so the only handle on their delay is the
//! range error at a known distance: the constant offset `median(measured − true)` at one
//! calibration distance, subtracted everywhere. Medians throughout, because over-the-air ranges
//! carry multipath and late-detection outliers of metres that would drag a mean.
//!
//! Real logs are messy, so the reader is tolerant: the header may sit below preamble lines, the
//! separator may be `,`, `;` or a tab, fields may be quoted, other columns (a status column
//! among them) are ignored, and a row whose measured or true value is empty, `nan`, `-` or
//! otherwise not a finite number is skipped and counted, never fatal.
//!
//! Pure: no I/O.

use crate::fit::stats::median;
use std::fmt;
use thiserror::Error;

/// Default tolerance for matching true distances: rows whose true distances differ by no more
/// than this are one distance, and `--at` must lie this close to one of them.
pub const DEFAULT_TOLERANCE_M: f64 = 0.001;

/// The unit a ranges file's values are in.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RangeUnit {
    /// Millimetres.
    Mm,
    /// Centimetres.
    Cm,
    /// Metres.
    M,
}

impl RangeUnit {
    /// Metres per unit.
    pub fn metres(self) -> f64 {
        match self {
            RangeUnit::Mm => 1e-3,
            RangeUnit::Cm => 1e-2,
            RangeUnit::M => 1.0,
        }
    }
}

impl fmt::Display for RangeUnit {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            RangeUnit::Mm => "mm",
            RangeUnit::Cm => "cm",
            RangeUnit::M => "m",
        })
    }
}

/// A measured range and the true distance, as the file gives them (file units).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RawRange {
    /// Measured range.
    pub measured: f64,
    /// True distance.
    pub truth: f64,
    /// 1-based line in the file.
    pub line: u64,
}

/// What a ranges file held.
#[derive(Debug, Clone, PartialEq)]
pub struct RangeFile {
    /// Rows with both values finite.
    pub ranges: Vec<RawRange>,
    /// Rows after the header.
    pub rows: u64,
    /// Rows skipped because a value was empty, missing or not a finite number.
    pub skipped: u64,
    /// Line of the first skipped row.
    pub first_skipped_line: Option<u64>,
    /// 1-based line of the header.
    pub header_line: u64,
}

/// The ranges file has no usable header.
#[derive(Debug, Clone, PartialEq, Error)]
#[error("no header line names both `{measured}` and `{truth}`")]
pub struct RangesHeaderError {
    /// Measured column asked for.
    pub measured: String,
    /// Truth column asked for.
    pub truth: String,
    /// Columns of the first non-empty line, to suggest from.
    pub first_line_columns: Vec<String>,
}

/// Lines searched for the header: enough for any preamble a logger writes.
const HEADER_SEARCH_LINES: usize = 50;

/// Reads the `measured` and `truth` columns (names matched case-insensitively) of a ranges file.
pub fn read_ranges(
    text: &str,
    measured: &str,
    truth: &str,
) -> Result<RangeFile, RangesHeaderError> {
    let header_error = || RangesHeaderError {
        measured: measured.to_string(),
        truth: truth.to_string(),
        first_line_columns: text
            .lines()
            .find(|l| !l.trim().is_empty())
            .map(|l| {
                l.split([',', ';', '\t'])
                    .map(|c| c.trim().trim_matches('"').to_string())
                    .collect()
            })
            .unwrap_or_default(),
    };
    let found = [b',', b';', b'\t']
        .into_iter()
        .find_map(|d| find_header(text, d, measured, truth).map(|h| (d, h)));
    let Some((delimiter, (header_line, m_col, t_col))) = found else {
        return Err(header_error());
    };
    let mut reader = csv_reader(text, delimiter);
    let decimal_comma = delimiter != b',';
    let mut file = RangeFile {
        ranges: Vec::new(),
        rows: 0,
        skipped: 0,
        first_skipped_line: None,
        header_line,
    };
    for rec in reader.records() {
        // A malformed record (say, an unterminated quote) is a skipped row like any other.
        let (line, values) = match rec {
            Ok(r) => {
                let line = r.position().map_or(0, |p| p.line());
                if line <= header_line || r.iter().all(str::is_empty) {
                    continue;
                }
                let value = |c: usize| r.get(c).and_then(|s| number(s, decimal_comma));
                (line, value(m_col).zip(value(t_col)))
            }
            Err(e) => (e.position().map_or(0, |p| p.line()), None),
        };
        file.rows += 1;
        match values {
            Some((measured, truth)) => file.ranges.push(RawRange {
                measured,
                truth,
                line,
            }),
            None => {
                file.skipped += 1;
                file.first_skipped_line.get_or_insert(line);
            }
        }
    }
    Ok(file)
}

/// (line, measured column, truth column) of the first line that names both columns when split
/// at `delimiter`.
fn find_header(
    text: &str,
    delimiter: u8,
    measured: &str,
    truth: &str,
) -> Option<(u64, usize, usize)> {
    csv_reader(text, delimiter)
        .records()
        .take(HEADER_SEARCH_LINES)
        .filter_map(Result::ok)
        .find_map(|r| {
            let col = |name: &str| r.iter().position(|h| h.eq_ignore_ascii_case(name));
            let line = r.position().map_or(1, |p| p.line());
            Some((line, col(measured)?, col(truth)?))
        })
}

/// A reader that takes every line as a record of any length, fields trimmed.
fn csv_reader(text: &str, delimiter: u8) -> csv::Reader<&[u8]> {
    csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .delimiter(delimiter)
        .trim(csv::Trim::All)
        .from_reader(text.as_bytes())
}

/// A finite number from a field, or `None` for anything else (empty, `nan`, `-`, text).
fn number(field: &str, decimal_comma: bool) -> Option<f64> {
    let v = if decimal_comma && field.contains(',') && !field.contains('.') {
        field.replace(',', ".").parse::<f64>().ok()
    } else {
        field.parse::<f64>().ok()
    };
    v.filter(|v| v.is_finite())
}

/// The unit the true distances are most plausibly in, when `assumed` is off by a power of ten.
///
/// Logs often give the device's range in mm or cm beside a true distance in m. Range errors are
/// at most a few metres while distances are metres to tens of metres, so the medians of measured
/// and true values agree within a factor of about 30 in the right unit; a factor of 100 or 1000
/// that another unit removes (to within a factor of 3) is a unit mismatch. Returns `None` when
/// `assumed` is plausible or no other unit is clearly better.
pub fn plausible_truth_unit(
    ranges: &[RawRange],
    measured_unit: RangeUnit,
    assumed: RangeUnit,
) -> Option<RangeUnit> {
    let mut measured: Vec<f64> = ranges
        .iter()
        .map(|r| r.measured * measured_unit.metres())
        .collect();
    let mut truth: Vec<f64> = ranges.iter().map(|r| r.truth).collect();
    let (m, t) = (median(&mut measured)?, median(&mut truth)?);
    if !(m > 0.0 && t > 0.0) {
        return None;
    }
    let misfit = |u: RangeUnit| (m / (t * u.metres())).log10().abs();
    if misfit(assumed) <= 1.5 {
        return None;
    }
    [RangeUnit::M, RangeUnit::Cm, RangeUnit::Mm]
        .into_iter()
        .filter(|&u| misfit(u) < 0.5)
        .min_by(|a, b| misfit(*a).total_cmp(&misfit(*b)))
}

/// One true distance's errors before and after the offset is removed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DistanceRow {
    /// True distance (median of the true values grouped here).
    pub true_m: f64,
    /// Ranges at this distance.
    pub n: usize,
    /// Median of measured − true.
    pub median_error_before_m: f64,
    /// Median of measured − offset − true.
    pub median_error_after_m: f64,
    /// 90th percentile of |measured − offset − true|.
    pub p90_abs_error_after_m: f64,
}

/// The calibrated offset and the error table.
#[derive(Debug, Clone, PartialEq)]
pub struct OtaCalibration {
    /// Offset to subtract from every measured range.
    pub offset_m: f64,
    /// The true distance calibrated at (the group matched to `--at`).
    pub at_true_m: f64,
    /// Ranges the offset was taken from.
    pub n_at: usize,
    /// One row per true distance, ascending.
    pub rows: Vec<DistanceRow>,
}

/// Why no offset could be computed.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum OtaError {
    /// No usable ranges.
    #[error("no row has both a measured range and a true distance")]
    NoRanges,
    /// The calibration distance or tolerance is not a usable number.
    #[error("{name} {value} must be a finite number ≥ 0")]
    BadParameter {
        /// Which parameter.
        name: &'static str,
        /// Its value.
        value: f64,
    },
    /// No true distance lies within the tolerance of the calibration distance.
    #[error("no true distance within {tolerance_m} m of {at_m} m (nearest {nearest_m} m)")]
    NoDistanceAt {
        /// Calibration distance asked for.
        at_m: f64,
        /// Tolerance used.
        tolerance_m: f64,
        /// The nearest true distance present.
        nearest_m: f64,
        /// Every true distance present, ascending.
        available_m: Vec<f64>,
    },
}

/// Calibrates the offset at the true distance within `tolerance_m` of `at_m` and tabulates the
/// errors at every true distance. `ranges` are `(measured_m, true_m)` pairs; non-finite pairs are
/// ignored.
pub fn calibrate(
    ranges: &[(f64, f64)],
    at_m: f64,
    tolerance_m: f64,
) -> Result<OtaCalibration, OtaError> {
    for (name, value) in [("--at", at_m), ("tolerance", tolerance_m)] {
        if !(value.is_finite() && value >= 0.0) {
            return Err(OtaError::BadParameter { name, value });
        }
    }
    let mut pairs: Vec<(f64, f64)> = ranges
        .iter()
        .copied()
        .filter(|(m, t)| m.is_finite() && t.is_finite())
        .collect();
    if pairs.is_empty() {
        return Err(OtaError::NoRanges);
    }
    pairs.sort_by(|a, b| a.1.total_cmp(&b.1));
    // Consecutive true values no more than the tolerance apart are one distance.
    let mut groups: Vec<Vec<(f64, f64)>> = Vec::new();
    for p in pairs {
        match groups.last_mut() {
            Some(g) if g.last().is_some_and(|q| p.1 - q.1 <= tolerance_m) => g.push(p),
            _ => groups.push(vec![p]),
        }
    }
    let centres: Vec<f64> = groups
        .iter()
        .map(|g| median(&mut g.iter().map(|p| p.1).collect::<Vec<_>>()).unwrap_or(f64::NAN))
        .collect();
    let nearest = (0..groups.len())
        .min_by(|&a, &b| {
            (centres[a] - at_m)
                .abs()
                .total_cmp(&(centres[b] - at_m).abs())
        })
        .ok_or(OtaError::NoRanges)?;
    // A group matches when any of its members is within the tolerance, so a spread-out group
    // still matches the distance it was recorded at.
    let matches = groups[nearest]
        .iter()
        .any(|p| (p.1 - at_m).abs() <= tolerance_m)
        || (centres[nearest] - at_m).abs() <= tolerance_m;
    if !matches {
        return Err(OtaError::NoDistanceAt {
            at_m,
            tolerance_m,
            nearest_m: centres[nearest],
            available_m: centres,
        });
    }
    let errors = |g: &[(f64, f64)]| -> Vec<f64> { g.iter().map(|(m, t)| m - t).collect() };
    let offset_m = median(&mut errors(&groups[nearest])).ok_or(OtaError::NoRanges)?;
    let rows = groups
        .iter()
        .zip(&centres)
        .map(|(g, &true_m)| {
            let mut before = errors(g);
            let mut after: Vec<f64> = before.iter().map(|e| e - offset_m).collect();
            let mut abs_after: Vec<f64> = after.iter().map(|e| e.abs()).collect();
            DistanceRow {
                true_m,
                n: g.len(),
                median_error_before_m: median(&mut before).unwrap_or(f64::NAN),
                median_error_after_m: median(&mut after).unwrap_or(f64::NAN),
                p90_abs_error_after_m: percentile(&mut abs_after, 0.9).unwrap_or(f64::NAN),
            }
        })
        .collect();
    Ok(OtaCalibration {
        offset_m,
        at_true_m: centres[nearest],
        n_at: groups[nearest].len(),
        rows,
    })
}

/// The `p`-quantile (0 ≤ p ≤ 1) by linear interpolation between order statistics at
/// `h = (n − 1)·p` (Hyndman & Fan's definition 7, the default of R and NumPy; from memory).
/// Reorders `values`; `None` when empty or `p` is outside [0, 1].
pub fn percentile(values: &mut [f64], p: f64) -> Option<f64> {
    if values.is_empty() || !(0.0..=1.0).contains(&p) {
        return None;
    }
    values.sort_by(f64::total_cmp);
    let h = (values.len() - 1) as f64 * p;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(values.len() - 1);
    Some(values[lo] + (h - lo as f64) * (values[hi] - values[lo]))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn percentile_follows_definition_7() {
        // Hyndman & Fan definition 7 by hand: 1..=10 at p 0.9 is h = 8.1, 9 + 0.1·(10 − 9).
        let mut v: Vec<f64> = (1..=10).rev().map(f64::from).collect();
        assert_eq!(percentile(&mut v, 0.9), Some(9.1));
        assert_eq!(percentile(&mut v, 0.0), Some(1.0));
        assert_eq!(percentile(&mut v, 1.0), Some(10.0));
        assert_eq!(percentile(&mut [4.0], 0.9), Some(4.0));
        assert_eq!(percentile(&mut [], 0.9), None);
        assert_eq!(percentile(&mut [1.0], f64::NAN), None);
    }

    #[test]
    fn offset_is_the_median_error_at_the_calibration_distance() {
        // Invented: a 2.5 m offset, one 40 m multipath outlier at 3 m that the median ignores,
        // and a true value recorded as 4.9996 beside 5.0 (within 1 mm: one distance).
        let ranges = [
            (3.4, 1.0),
            (3.5, 1.0),
            (3.6, 1.0),
            (5.5, 3.0),
            (5.5, 3.0),
            (43.0, 3.0),
            (7.4, 5.0),
            (7.6, 4.9996),
            (7.5, 5.0),
        ];
        let c = calibrate(&ranges, 1.0, DEFAULT_TOLERANCE_M).expect("calibrates");
        assert!((c.offset_m - 2.5).abs() < 1e-12);
        assert_eq!(c.n_at, 3);
        assert_eq!(c.rows.len(), 3);
        let at3 = c.rows[1];
        assert_eq!((at3.true_m, at3.n), (3.0, 3));
        assert!((at3.median_error_before_m - 2.5).abs() < 1e-12);
        assert!(at3.median_error_after_m.abs() < 1e-12);
        // |after| = 0, 0, 37.5: definition 7 at h = 1.8 gives 0.8·37.5 = 30.
        assert!((at3.p90_abs_error_after_m - 30.0).abs() < 1e-9);
        assert_eq!(c.rows[2].n, 3);
        assert!((c.rows[2].true_m - 5.0).abs() < 1e-12);
    }

    #[test]
    fn refuses_a_distance_that_is_not_in_the_data() {
        let r = calibrate(&[(1.0, 1.0), (2.0, 2.0)], 1.5, DEFAULT_TOLERANCE_M);
        assert!(
            matches!(r, Err(OtaError::NoDistanceAt { nearest_m, .. }) if nearest_m == 1.0 || nearest_m == 2.0)
        );
        assert_eq!(calibrate(&[], 1.0, 0.001), Err(OtaError::NoRanges));
        assert_eq!(
            calibrate(&[(f64::NAN, 1.0)], 1.0, 0.001),
            Err(OtaError::NoRanges)
        );
        assert!(matches!(
            calibrate(&[(1.0, 1.0)], f64::NAN, 0.001),
            Err(OtaError::BadParameter { name: "--at", .. })
        ));
    }

    #[test]
    fn reads_messy_files_and_counts_what_it_skips() {
        let text = "# logger v2\n\
                    time;Status;\"Dist mm\";truth_m\n\
                    1;0;1500;1,0\n\
                    2;0;;1,0\n\
                    3;7;nan;1,0\n\
                    4;0;-;1,0\n\
                    5;0;\"2512\";2\n\
                    6;0;2490\n";
        let f = read_ranges(text, "dist mm", "TRUTH_M").expect("header found");
        assert_eq!(f.header_line, 2);
        assert_eq!(f.rows, 6);
        assert_eq!(f.skipped, 4);
        assert_eq!(f.first_skipped_line, Some(4));
        let got: Vec<(f64, f64, u64)> = f
            .ranges
            .iter()
            .map(|r| (r.measured, r.truth, r.line))
            .collect();
        assert_eq!(got, [(1500.0, 1.0, 3), (2512.0, 2.0, 7)]);
        let missing = read_ranges("a,b\n1,2\n", "range", "b");
        assert!(
            matches!(missing, Err(RangesHeaderError { ref first_line_columns, .. }) if first_line_columns == &["a", "b"])
        );
    }

    #[test]
    fn notices_true_distances_in_metres_beside_ranges_in_millimetres() {
        let r = |measured, truth| RawRange {
            measured,
            truth,
            line: 0,
        };
        let mixed = [r(1520.0, 1.0), r(3480.0, 3.0), r(5610.0, 5.0)];
        assert_eq!(
            plausible_truth_unit(&mixed, RangeUnit::Mm, RangeUnit::Mm),
            Some(RangeUnit::M)
        );
        let same = [r(1520.0, 1000.0), r(3480.0, 3000.0)];
        assert_eq!(
            plausible_truth_unit(&same, RangeUnit::Mm, RangeUnit::Mm),
            None
        );
        // A large offset at a short distance is not a unit mismatch.
        let offset = [r(4.0, 0.5), r(4.2, 0.5)];
        assert_eq!(
            plausible_truth_unit(&offset, RangeUnit::M, RangeUnit::M),
            None
        );
    }
}
