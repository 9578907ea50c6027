//! `caltable.csv`: the table the DUT's firmware loads, in the column contract of design §4,
//! with the budget's columns appended after `source` (design §6). Tables in the older
//! 8-column form are still read; their rows have no budget.
//!
//! Writing and reading live together so the format has one definition; the reader is for tests
//! and for tools that apply or compare tables, and names the line of any bad input.

use crate::bench::BenchUncertainty;
use crate::fit::budget_cell::{cell_budget, dof_text, RowBudget};
use crate::fit::cal_row::{CalRow, RowSource};
use std::io::{Read, Write};
use thiserror::Error;

/// The contract header, in order: the design §4 columns, then the budget's.
pub const CALTABLE_HEADER: [&str; 14] = [
    "center_mhz",
    "bw_mhz",
    "gain_index",
    "delay_ps",
    "ci95_ps",
    "n_used",
    "n_rejected",
    "source",
    "u_stat_ps",
    "u_bench_ps",
    "u_comb_ps",
    "dof",
    "k",
    "expanded_ps",
];

/// The layout [`write_caltable`] writes, as the manifest records it: version 1 ended at
/// `source`, version 2 appends the budget columns.
pub const CALTABLE_VERSION: u32 = 2;

/// Columns of the older form, which ends at `source`.
const OLD_COLUMNS: usize = 8;

/// One row as the file holds it: the contract columns only.
#[derive(Debug, Clone, PartialEq)]
pub struct TableRow {
    /// Channel center frequency.
    pub center_mhz: u32,
    /// Channel bandwidth.
    pub bw_mhz: u32,
    /// DUT receive gain state.
    pub gain_index: u32,
    /// The DUT's K, to 3 decimals.
    pub delay_ps: f64,
    /// Half-width of the 95 % interval, to 3 decimals.
    pub ci95_ps: f64,
    /// Samples kept.
    pub n_used: u64,
    /// Samples rejected.
    pub n_rejected: u64,
    /// Measured, modelled or inferred.
    pub source: RowSource,
    /// The cell's uncertainty budget; `None` in an older table or where it did not combine.
    pub budget: Option<RowBudget>,
}

impl TableRow {
    /// The row of `r` with its budget from the bench's stated uncertainties.
    pub fn with_budget(r: &CalRow, bench: &BenchUncertainty) -> Self {
        Self {
            budget: cell_budget(r, bench).row_budget(),
            ..Self::from(r)
        }
    }
}

impl From<&CalRow> for TableRow {
    /// The row without a budget.
    fn from(r: &CalRow) -> Self {
        Self {
            center_mhz: r.center_mhz,
            bw_mhz: r.bw_mhz,
            gain_index: r.gain_index,
            delay_ps: r.delay_ps,
            ci95_ps: r.ci95_ps,
            n_used: r.n_used,
            n_rejected: r.n_rejected,
            source: r.source,
            budget: None,
        }
    }
}

/// Why a calibration table could not be written or read.
#[derive(Debug, Error)]
pub enum CalTableError {
    /// The output refused the bytes.
    #[error("cannot write caltable: {0}")]
    Write(#[source] csv::Error),
    /// A row to write has a delay or interval that is not a finite number.
    #[error(
        "caltable row {index} (center {center_mhz} MHz, gain {gain_index}): {column} is not finite"
    )]
    NotFinite {
        /// Position of the row in the slice given to the writer.
        index: usize,
        /// Its center frequency, to find it.
        center_mhz: u32,
        /// Its gain state, to find it.
        gain_index: u32,
        /// `delay_ps` or `ci95_ps`.
        column: &'static str,
    },
    /// The header is not the contract header.
    #[error(
        "caltable line 1: header is `{found}`, expected `{}` (or its first {OLD_COLUMNS} columns)",
        CALTABLE_HEADER.join(",")
    )]
    Header {
        /// The header as read.
        found: String,
    },
    /// A line could not be read or parsed.
    #[error("caltable line {line}: {message}")]
    Line {
        /// 1-based line number in the file.
        line: u64,
        /// What was wrong with it.
        message: String,
    },
}

/// Write `rows` as `caltable.csv` (header first, delay and interval to 3 decimals), each with
/// its budget from the bench's stated uncertainties.
pub fn write_caltable<W: Write>(
    out: W,
    rows: &[CalRow],
    bench: &BenchUncertainty,
) -> Result<(), CalTableError> {
    let rows: Vec<TableRow> = rows
        .iter()
        .map(|r| TableRow::with_budget(r, bench))
        .collect();
    write_rows(out, &rows, CALTABLE_HEADER.len())
}

/// Write table rows in the `caltable.csv` format, for rows that were read back or came without
/// their statistics: with the budget columns when a row has a budget, else in the older
/// 8-column form, so a table without budgets is written as it was read.
pub fn write_table_rows<W: Write>(out: W, rows: &[TableRow]) -> Result<(), CalTableError> {
    let columns = if rows.iter().any(|r| r.budget.is_some()) {
        CALTABLE_HEADER.len()
    } else {
        OLD_COLUMNS
    };
    write_rows(out, rows, columns)
}

/// Writes the first `columns` columns: all of them, or the older form's.
fn write_rows<W: Write>(out: W, rows: &[TableRow], columns: usize) -> Result<(), CalTableError> {
    let mut w = csv::Writer::from_writer(out);
    w.write_record(&CALTABLE_HEADER[..columns])
        .map_err(CalTableError::Write)?;
    for (index, row) in rows.iter().enumerate() {
        for (column, value) in [("delay_ps", row.delay_ps), ("ci95_ps", row.ci95_ps)] {
            if !value.is_finite() {
                return Err(CalTableError::NotFinite {
                    index,
                    center_mhz: row.center_mhz,
                    gain_index: row.gain_index,
                    column,
                });
            }
        }
        let budget = row.budget.map_or_else(
            || vec![String::new(); columns - OLD_COLUMNS],
            |b| {
                [
                    format!("{:.3}", b.u_stat_ps),
                    format!("{:.3}", b.u_bench_ps),
                    format!("{:.3}", b.u_comb_ps),
                    dof_text(b.dof),
                    format!("{:.3}", b.k),
                    format!("{:.3}", b.expanded_ps),
                ]
                .into_iter()
                .take(columns - OLD_COLUMNS)
                .collect()
            },
        );
        w.write_record(
            [
                row.center_mhz.to_string(),
                row.bw_mhz.to_string(),
                row.gain_index.to_string(),
                format!("{:.3}", row.delay_ps),
                format!("{:.3}", row.ci95_ps),
                row.n_used.to_string(),
                row.n_rejected.to_string(),
                row.source.as_str().to_string(),
            ]
            .into_iter()
            .chain(budget),
        )
        .map_err(CalTableError::Write)?;
    }
    w.flush()
        .map_err(|e| CalTableError::Write(csv::Error::from(e)))
}

/// Read a `caltable.csv` back into rows, checking the header and every field.
pub fn read_caltable<R: Read>(input: R) -> Result<Vec<TableRow>, CalTableError> {
    let mut r = csv::ReaderBuilder::new()
        .has_headers(false)
        .from_reader(input);
    let mut records = r.records();
    let header = match records.next() {
        Some(rec) => rec.map_err(|e| line_error(&e, 1))?,
        None => {
            return Err(CalTableError::Header {
                found: String::new(),
            })
        }
    };
    let columns = header.len();
    let known = columns == OLD_COLUMNS || columns == CALTABLE_HEADER.len();
    if !known || header.iter().ne(CALTABLE_HEADER[..columns].iter().copied()) {
        return Err(CalTableError::Header {
            found: header.iter().collect::<Vec<_>>().join(","),
        });
    }
    let mut rows = Vec::new();
    for rec in records {
        let rec = rec.map_err(|e| line_error(&e, 0))?;
        let line = rec.position().map_or(0, |p| p.line());
        rows.push(parse_row(&rec, line, columns)?);
    }
    Ok(rows)
}

fn line_error(e: &csv::Error, fallback_line: u64) -> CalTableError {
    CalTableError::Line {
        line: e.position().map_or(fallback_line, |p| p.line()),
        message: e.to_string(),
    }
}

fn parse_row(
    rec: &csv::StringRecord,
    line: u64,
    columns: usize,
) -> Result<TableRow, CalTableError> {
    let bad = |message: String| CalTableError::Line { line, message };
    if rec.len() != columns {
        return Err(bad(format!(
            "{} fields, expected {columns} as the header has",
            rec.len()
        )));
    }
    let field = |i: usize| rec.get(i).unwrap_or_default().trim();
    fn num<T: std::str::FromStr>(s: &str, col: &str) -> Result<T, String> {
        s.parse()
            .map_err(|_| format!("{col} `{s}` is not a number"))
    }
    let finite = |i: usize| -> Result<f64, CalTableError> {
        let v: f64 = num(field(i), CALTABLE_HEADER[i]).map_err(bad)?;
        if v.is_finite() {
            Ok(v)
        } else {
            Err(bad(format!(
                "{} `{}` is not finite",
                CALTABLE_HEADER[i],
                field(i)
            )))
        }
    };
    let Some(source) = RowSource::parse(field(7)) else {
        return Err(bad(format!(
            "source `{}` is not `measured`, `modelled` or `inferred`",
            field(7)
        )));
    };
    Ok(TableRow {
        center_mhz: num(field(0), CALTABLE_HEADER[0]).map_err(bad)?,
        bw_mhz: num(field(1), CALTABLE_HEADER[1]).map_err(bad)?,
        gain_index: num(field(2), CALTABLE_HEADER[2]).map_err(bad)?,
        delay_ps: finite(3)?,
        ci95_ps: finite(4)?,
        n_used: num(field(5), CALTABLE_HEADER[5]).map_err(bad)?,
        n_rejected: num(field(6), CALTABLE_HEADER[6]).map_err(bad)?,
        source,
        budget: if columns == OLD_COLUMNS {
            None
        } else {
            parse_budget(rec, line)?
        },
    })
}

/// The budget columns of a row: all empty (no budget) or all numbers.
fn parse_budget(rec: &csv::StringRecord, line: u64) -> Result<Option<RowBudget>, CalTableError> {
    let fields: Vec<&str> = (OLD_COLUMNS..CALTABLE_HEADER.len())
        .map(|i| rec.get(i).unwrap_or_default().trim())
        .collect();
    if fields.iter().all(|f| f.is_empty()) {
        return Ok(None);
    }
    let mut values = [0.0; 6];
    for (i, (v, text)) in values.iter_mut().zip(&fields).enumerate() {
        let column = CALTABLE_HEADER[OLD_COLUMNS + i];
        // Only the degrees of freedom may be infinite.
        let allowed = |x: f64| x >= 0.0 && (x.is_finite() || column == "dof");
        *v = match text.parse::<f64>() {
            Ok(x) if allowed(x) => x,
            _ => {
                return Err(CalTableError::Line {
                    line,
                    message: format!(
                        "{column} `{text}` is not a non-negative number (the budget columns are \
                         all numbers or all empty)"
                    ),
                })
            }
        };
    }
    let [u_stat_ps, u_bench_ps, u_comb_ps, dof, k, expanded_ps] = values;
    Ok(Some(RowBudget {
        u_stat_ps,
        u_bench_ps,
        u_comb_ps,
        dof,
        k,
        expanded_ps,
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(gain_index: u32, delay_ps: f64, ci95_ps: f64, source: RowSource) -> CalRow {
        CalRow {
            center_mhz: 5180,
            bw_mhz: 80,
            gain_index,
            delay_ps,
            ci95_ps,
            stat_dof: 11.0,
            n_used: 120,
            n_rejected: 3,
            n_bursts: 12,
            sd_ps: 300.0,
            source,
        }
    }

    fn golden_rows() -> Vec<CalRow> {
        vec![
            row(0, 2_400.123_4, 1.5, RowSource::Measured),
            row(1, 2_650.0, 0.999_6, RowSource::Measured),
            row(2, -3.25, 12.0, RowSource::Modelled),
        ]
    }

    /// A bench stating u = 2 ps for the cable (contribution 4 ps) and 3 ps for the reference.
    fn golden_bench() -> BenchUncertainty {
        use crate::bench::uncertainty::{InputUncertainty, UncertaintyFrom};
        let u = |u_ps| {
            Some(InputUncertainty {
                u_ps,
                dof: f64::INFINITY,
                from: UncertaintyFrom::Standard,
            })
        };
        BenchUncertainty {
            cable: u(2.0),
            atten: None,
            reference: u(3.0),
            measured: None,
        }
    }

    /// Design §4 contract columns with delay and interval to 3 decimals, then the §6 budget.
    /// Row 0 by hand: u_stat = 1.5 / t₉₅(11) = 1.5 / 2.201 = 0.682 (t from any table);
    /// u_bench = √(4² + 3²) = 5; u_comb = √(5² + 0.682²) = 5.046. Row 2: u_stat = 12 / 2.201
    /// = 5.452, u_comb = 7.398, ν_eff = 7.398⁴ / (5.452⁴ / 11) = 37.3, t₉₅(37.3) = 2.026.
    const GOLDEN: &str = "center_mhz,bw_mhz,gain_index,delay_ps,ci95_ps,n_used,n_rejected,source,\
                          u_stat_ps,u_bench_ps,u_comb_ps,dof,k,expanded_ps\n\
                          5180,80,0,2400.123,1.500,120,3,measured,0.682,5.000,5.046,33064.7,1.960,9.891\n\
                          5180,80,1,2650.000,1.000,120,3,measured,0.454,5.000,5.021,164275.6,1.960,9.840\n\
                          5180,80,2,-3.250,12.000,120,3,modelled,5.452,5.000,7.398,37.3,2.026,14.985\n";

    /// The older form, which ends at `source`.
    const OLD_FORM: &str =
        "center_mhz,bw_mhz,gain_index,delay_ps,ci95_ps,n_used,n_rejected,source\n\
                            5180,80,0,2400.123,1.500,120,3,measured\n";

    #[test]
    fn writes_the_golden_table_byte_for_byte() {
        let mut out = Vec::new();
        assert!(write_caltable(&mut out, &golden_rows(), &golden_bench()).is_ok());
        assert_eq!(String::from_utf8_lossy(&out), GOLDEN);
    }

    #[test]
    fn reads_the_older_form_without_a_budget_and_writes_it_back_as_it_was() {
        let rows = read_caltable(OLD_FORM.as_bytes()).expect("reads");
        assert_eq!(rows.len(), 1);
        assert_eq!(rows[0].ci95_ps, 1.5);
        assert_eq!(rows[0].budget, None);
        let mut out = Vec::new();
        assert!(write_table_rows(&mut out, &rows).is_ok());
        assert_eq!(String::from_utf8_lossy(&out), OLD_FORM);
    }

    #[test]
    fn reads_an_empty_budget_and_refuses_a_partial_one() {
        let head = CALTABLE_HEADER.join(",");
        let rows = read_caltable(format!("{head}\n5180,80,0,1,1,2,0,measured,,,,,,\n").as_bytes());
        assert_eq!(rows.ok().map(|r| r[0].budget), Some(None));
        assert_eq!(
            error_line(&format!("{head}\n5180,80,0,1,1,2,0,measured,1,,,,,\n")),
            Some(2)
        );
        assert_eq!(
            error_line(&format!(
                "{head}\n5180,80,0,1,1,2,0,measured,1,1,1,inf,-2,1\n"
            )),
            Some(2)
        );
    }

    #[test]
    fn reads_back_what_it_wrote() {
        let rows = read_caltable(GOLDEN.as_bytes());
        let round = |v: f64| (v * 1000.0).round() / 1000.0;
        let expect: Vec<TableRow> = golden_rows()
            .iter()
            .map(|r| {
                let mut t = TableRow::with_budget(r, &golden_bench());
                t.delay_ps = round(t.delay_ps);
                t.ci95_ps = round(t.ci95_ps);
                t.budget = t.budget.map(|b| RowBudget {
                    u_stat_ps: round(b.u_stat_ps),
                    u_bench_ps: round(b.u_bench_ps),
                    u_comb_ps: round(b.u_comb_ps),
                    dof: (b.dof * 10.0).round() / 10.0,
                    k: round(b.k),
                    expanded_ps: round(b.expanded_ps),
                });
                t
            })
            .collect();
        assert_eq!(rows.ok(), Some(expect));
    }

    #[test]
    fn refuses_non_finite_values_when_writing() {
        let rows = [row(4, f64::NAN, 1.0, RowSource::Measured)];
        let err = write_caltable(Vec::new(), &rows, &BenchUncertainty::default());
        assert!(matches!(
            err,
            Err(CalTableError::NotFinite {
                index: 0,
                gain_index: 4,
                column: "delay_ps",
                ..
            })
        ));
    }

    fn error_line(text: &str) -> Option<u64> {
        match read_caltable(text.as_bytes()) {
            Err(CalTableError::Line { line, .. }) => Some(line),
            _ => None,
        }
    }

    #[test]
    fn names_the_line_of_bad_input() {
        let head = CALTABLE_HEADER[..OLD_COLUMNS].join(",");
        let good = "5180,80,0,1.000,1.000,2,0,measured";
        assert_eq!(
            error_line(&format!("{head}\n{good}\n5180,80,x,1,1,2,0,measured\n")),
            Some(3)
        );
        assert_eq!(
            error_line(&format!(
                "{head}\n{good}\n{good}\n5180,80,0,1,1,2,0,guessed\n"
            )),
            Some(4)
        );
        assert_eq!(
            error_line(&format!("{head}\n5180,80,0,NaN,1,2,0,measured\n")),
            Some(2)
        );
        assert_eq!(error_line(&format!("{head}\n5180,80,0\n")), Some(2));
    }

    #[test]
    fn rejects_a_foreign_header() {
        let r = read_caltable("center,bw,gain\n1,2,3\n".as_bytes());
        assert!(matches!(r, Err(CalTableError::Header { .. })));
        assert!(matches!(
            read_caltable("".as_bytes()),
            Err(CalTableError::Header { .. })
        ));
    }
}
