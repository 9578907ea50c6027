//! Several units without a golden reference: each ranging pair measures only the sum of the two
//! units' delays, `m_ab = K_a + K_b`, and the unit delays come from all the sums by weighted least
//! squares.
//!
//! The sums determine every delay only when each connected group of units contains an odd cycle:
//! around an even cycle (a–b–c–d–a) adding δ to a and c and subtracting it from b and d changes no
//! sum. A graph with no odd cycle is bipartite, so solvability is a two-colouring test per
//! connected component, done before any arithmetic so the refusal can say what is missing.
//! Three units measured pairwise is the smallest solvable set.
//!
//! Pure: no I/O. The CSV reader takes text and reports the line of any bad input.

use crate::fit::lsq::{self, LsqError};
use std::collections::{BTreeMap, VecDeque};
use thiserror::Error;

/// The columns a pairs file must have (in any order; other columns are ignored).
pub const PAIRS_COLUMNS: [&str; 4] = ["unit_a", "unit_b", "sum_ps", "se_ps"];

/// One pairwise measurement: the sum of two units' delays and its standard error.
#[derive(Debug, Clone, PartialEq)]
pub struct PairSum {
    /// One unit's name.
    pub unit_a: String,
    /// The other unit's name.
    pub unit_b: String,
    /// Measured `K_a + K_b`.
    pub sum_ps: f64,
    /// Standard error of `sum_ps`.
    pub se_ps: f64,
}

/// One unit's solved delay.
#[derive(Debug, Clone, PartialEq)]
pub struct UnitDelay {
    /// Unit name.
    pub unit: String,
    /// Its K.
    pub delay_ps: f64,
    /// Standard error of `delay_ps`.
    pub se_ps: f64,
}

/// All units' delays and how well the sums agreed.
#[derive(Debug, Clone, PartialEq)]
pub struct PairSolution {
    /// One entry per unit, in order of first appearance in the input.
    pub units: Vec<UnitDelay>,
    /// Residual degrees of freedom (pairs − units).
    pub dof: usize,
    /// χ² of the sums against the solution (weights 1/se²).
    pub chi2: f64,
}

/// Why the unit delays could not be solved.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum PairsError {
    /// No pairs given.
    #[error("no pairs given")]
    Empty,
    /// A pair names the same unit twice.
    #[error("pair {index}: unit `{unit}` is paired with itself")]
    SelfPair {
        /// 0-based pair index.
        index: usize,
        /// The unit.
        unit: String,
    },
    /// A sum or standard error is unusable.
    #[error("pair {index}: {reason}")]
    BadValue {
        /// 0-based pair index.
        index: usize,
        /// What is wrong.
        reason: &'static str,
    },
    /// A connected group of units has no odd cycle, so its delays are not determined.
    #[error(
        "the delays of {} cannot be separated: their pair graph has no odd cycle, and an odd \
         cycle (e.g. three units measured pairwise) is needed",
        list(.units)
    )]
    NoOddCycle {
        /// The units of the first such connected group, in order of first appearance.
        units: Vec<String>,
    },
    /// The solver refused the problem (not expected once the graph check passed).
    #[error("least squares: {0}")]
    Lsq(#[from] LsqError),
}

fn list(units: &[String]) -> String {
    units
        .iter()
        .map(|u| format!("`{u}`"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// Solves `K` per unit from pairwise sums by weighted least squares (weights 1/se²).
///
/// Standard errors come from `(AᵀWA)⁻¹`, scaled by χ²/ν when the sums disagree with each other
/// more than their errors say (ν > 0 and χ²/ν > 1), as for the gain model.
pub fn solve_pairs(pairs: &[PairSum]) -> Result<PairSolution, PairsError> {
    if pairs.is_empty() {
        return Err(PairsError::Empty);
    }
    let mut index_of: BTreeMap<&str, usize> = BTreeMap::new();
    let mut names: Vec<&str> = Vec::new();
    let mut edges: Vec<(usize, usize)> = Vec::with_capacity(pairs.len());
    for (index, p) in pairs.iter().enumerate() {
        if p.unit_a == p.unit_b {
            return Err(PairsError::SelfPair {
                index,
                unit: p.unit_a.clone(),
            });
        }
        if !p.sum_ps.is_finite() {
            return Err(PairsError::BadValue {
                index,
                reason: "sum_ps is not finite",
            });
        }
        if !(p.se_ps.is_finite() && p.se_ps > 0.0) {
            return Err(PairsError::BadValue {
                index,
                reason: "se_ps must be a positive finite number",
            });
        }
        let a = intern(&p.unit_a, &mut index_of, &mut names);
        let b = intern(&p.unit_b, &mut index_of, &mut names);
        edges.push((a, b));
    }
    if let Some(component) = bipartite_component(names.len(), &edges) {
        return Err(PairsError::NoOddCycle {
            units: component
                .into_iter()
                .map(|i| names[i].to_string())
                .collect(),
        });
    }
    let design: Vec<Vec<f64>> = edges
        .iter()
        .map(|&(a, b)| {
            let mut row = vec![0.0; names.len()];
            row[a] = 1.0;
            row[b] = 1.0;
            row
        })
        .collect();
    let y: Vec<f64> = pairs.iter().map(|p| p.sum_ps).collect();
    let w: Vec<f64> = pairs.iter().map(|p| p.se_ps.powi(-2)).collect();
    let fit = lsq::solve(&design, &y, Some(&w))?;
    let scale = if fit.dof > 0 {
        (fit.weighted_rss / fit.dof as f64).max(1.0)
    } else {
        1.0
    };
    let units = names
        .iter()
        .enumerate()
        .map(|(j, name)| UnitDelay {
            unit: (*name).to_string(),
            delay_ps: fit.coefficients[j],
            se_ps: (scale * fit.covariance_unscaled[j][j]).max(0.0).sqrt(),
        })
        .collect();
    Ok(PairSolution {
        units,
        dof: fit.dof,
        chi2: fit.weighted_rss,
    })
}

/// The index of unit `name`, numbering new names in order of first appearance.
fn intern<'a>(
    name: &'a str,
    index_of: &mut BTreeMap<&'a str, usize>,
    names: &mut Vec<&'a str>,
) -> usize {
    *index_of.entry(name).or_insert_with(|| {
        names.push(name);
        names.len() - 1
    })
}

/// The vertices of the first connected component that can be two-coloured (has no odd cycle),
/// sorted; `None` when every component has an odd cycle.
fn bipartite_component(n: usize, edges: &[(usize, usize)]) -> Option<Vec<usize>> {
    let mut adjacent = vec![Vec::new(); n];
    for &(a, b) in edges {
        adjacent[a].push(b);
        adjacent[b].push(a);
    }
    let mut colour: Vec<Option<bool>> = vec![None; n];
    for start in 0..n {
        if colour[start].is_some() {
            continue;
        }
        colour[start] = Some(false);
        let mut members = vec![start];
        let mut odd_cycle = false;
        let mut queue = VecDeque::from([start]);
        while let Some(v) = queue.pop_front() {
            let c = colour[v].unwrap_or(false);
            for &u in &adjacent[v] {
                match colour[u] {
                    None => {
                        colour[u] = Some(!c);
                        members.push(u);
                        queue.push_back(u);
                    }
                    Some(cu) if cu == c => odd_cycle = true,
                    Some(_) => {}
                }
            }
        }
        if !odd_cycle {
            members.sort_unstable();
            return Some(members);
        }
    }
    None
}

/// A pairs file's line could not be used.
#[derive(Debug, Clone, PartialEq, Error)]
#[error("line {line}: {message}")]
pub struct PairsCsvError {
    /// 1-based line number.
    pub line: u64,
    /// Byte offset of the line's start in the text.
    pub byte: u64,
    /// What is wrong.
    pub message: String,
}

/// Reads a pairs CSV (header naming at least [`PAIRS_COLUMNS`]; blank lines skipped).
pub fn read_pairs(text: &str) -> Result<Vec<PairSum>, PairsCsvError> {
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(text.as_bytes());
    let mut records = reader.records();
    let csv_error = |e: csv::Error| PairsCsvError {
        line: e.position().map_or(1, |p| p.line()),
        byte: e.position().map_or(0, |p| p.byte()),
        message: e.to_string(),
    };
    let header = match records.next() {
        Some(r) => r.map_err(csv_error)?,
        None => {
            return Err(PairsCsvError {
                line: 1,
                byte: 0,
                message: "the file is empty".into(),
            })
        }
    };
    let mut columns = [0usize; 4];
    for (slot, name) in columns.iter_mut().zip(PAIRS_COLUMNS) {
        *slot = header
            .iter()
            .position(|h| h.trim_start_matches('\u{feff}').eq_ignore_ascii_case(name))
            .ok_or_else(|| PairsCsvError {
                line: 1,
                byte: 0,
                message: format!("no `{name}` column in the header"),
            })?;
    }
    let mut pairs = Vec::new();
    for rec in records {
        let rec = rec.map_err(csv_error)?;
        let (line, byte) = rec.position().map_or((0, 0), |p| (p.line(), p.byte()));
        if rec.iter().all(str::is_empty) {
            continue;
        }
        let bad = |message: String| PairsCsvError {
            line,
            byte,
            message,
        };
        let field = |i: usize| rec.get(columns[i]).unwrap_or_default();
        if let Some(i) = (0..2).find(|&i| field(i).is_empty()) {
            return Err(bad(format!("{} is empty", PAIRS_COLUMNS[i])));
        }
        let number = |i: usize| -> Result<f64, PairsCsvError> {
            match field(i).parse::<f64>() {
                Ok(v) if v.is_finite() => Ok(v),
                _ => Err(bad(format!(
                    "{} `{}` is not a finite number",
                    PAIRS_COLUMNS[i],
                    field(i)
                ))),
            }
        };
        let pair = PairSum {
            unit_a: field(0).to_string(),
            unit_b: field(1).to_string(),
            sum_ps: number(2)?,
            se_ps: number(3)?,
        };
        if pair.se_ps <= 0.0 {
            return Err(bad(format!("se_ps `{}` must be positive", field(3))));
        }
        if pair.unit_a == pair.unit_b {
            return Err(bad(format!("unit `{}` is paired with itself", pair.unit_a)));
        }
        pairs.push(pair);
    }
    Ok(pairs)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pair(a: &str, b: &str, sum_ps: f64, se_ps: f64) -> PairSum {
        PairSum {
            unit_a: a.into(),
            unit_b: b.into(),
            sum_ps,
            se_ps,
        }
    }

    fn delay(s: &PairSolution, unit: &str) -> (f64, f64) {
        s.units
            .iter()
            .find(|u| u.unit == unit)
            .map_or((f64::NAN, f64::NAN), |u| (u.delay_ps, u.se_ps))
    }

    #[test]
    fn three_units_pairwise_give_the_closed_form() {
        // Algebra from the definition: K_a = (m_ab + m_ac − m_bc)/2 and cyclically; with equal
        // errors σ each K has variance (σ² + σ² + σ²)/4, se = σ·√3/2. Invented sums.
        let s = solve_pairs(&[
            pair("a", "b", 5000.0, 4.0),
            pair("b", "c", 5600.0, 4.0),
            pair("a", "c", 5400.0, 4.0),
        ])
        .expect("a triangle is solvable");
        let se = 4.0 * 3.0_f64.sqrt() / 2.0;
        for (unit, k) in [("a", 2400.0), ("b", 2600.0), ("c", 3000.0)] {
            let (d, e) = delay(&s, unit);
            assert!((d - k).abs() < 1e-9, "{unit}: {d}");
            assert!((e - se).abs() < 1e-9, "{unit}: se {e}");
        }
        assert_eq!(s.dof, 0);
        let order: Vec<&str> = s.units.iter().map(|u| u.unit.as_str()).collect();
        assert_eq!(order, ["a", "b", "c"]);
    }

    #[test]
    fn an_even_cycle_alone_is_refused_and_a_chord_fixes_it() {
        let square = [
            pair("a", "b", 1.0, 1.0),
            pair("b", "c", 1.0, 1.0),
            pair("c", "d", 1.0, 1.0),
            pair("d", "a", 1.0, 1.0),
        ];
        assert_eq!(
            solve_pairs(&square),
            Err(PairsError::NoOddCycle {
                units: vec!["a".into(), "b".into(), "c".into(), "d".into()]
            })
        );
        let mut with_chord = square.to_vec();
        with_chord.push(pair("a", "c", 1.0, 1.0));
        assert!(solve_pairs(&with_chord).is_ok());
    }

    #[test]
    fn a_bipartite_component_beside_a_solvable_one_is_refused() {
        let r = solve_pairs(&[
            pair("a", "b", 2.0, 1.0),
            pair("b", "c", 2.0, 1.0),
            pair("c", "a", 2.0, 1.0),
            pair("x", "y", 2.0, 1.0),
        ]);
        assert_eq!(
            r,
            Err(PairsError::NoOddCycle {
                units: vec!["x".into(), "y".into()]
            })
        );
        let msg = r.err().map(|e| e.to_string()).unwrap_or_default();
        assert!(
            msg.contains("`x`, `y`") && msg.contains("odd cycle"),
            "{msg}"
        );
    }

    #[test]
    fn repeated_pairs_average_and_scatter_inflates_the_error() {
        // Algebra from the definition, invented sums: two measurements of each side, 2 ps either
        // side of the means 12, 22, 18, so K = 4, 8, 14, χ² = 6·2² = 24 on 3 df. The stated
        // variance of K_a is 3·(1/2)/4 = 3/8; the scatter (χ²/ν = 8) scales it by 8.
        let s = solve_pairs(&[
            pair("a", "b", 10.0, 1.0),
            pair("a", "b", 14.0, 1.0),
            pair("b", "c", 20.0, 1.0),
            pair("b", "c", 24.0, 1.0),
            pair("a", "c", 16.0, 1.0),
            pair("a", "c", 20.0, 1.0),
        ])
        .expect("solvable");
        assert!((delay(&s, "a").0 - 4.0).abs() < 1e-9);
        assert!((delay(&s, "b").0 - 8.0).abs() < 1e-9);
        assert!((delay(&s, "c").0 - 14.0).abs() < 1e-9);
        assert_eq!(s.dof, 3);
        assert!((s.chi2 - 24.0).abs() < 1e-9);
        let stated = (3.0_f64 / 8.0).sqrt();
        assert!((delay(&s, "a").1 - stated * 8.0_f64.sqrt()).abs() < 1e-9);
    }

    #[test]
    fn refuses_bad_values() {
        assert_eq!(solve_pairs(&[]), Err(PairsError::Empty));
        assert!(matches!(
            solve_pairs(&[pair("a", "a", 1.0, 1.0)]),
            Err(PairsError::SelfPair { index: 0, .. })
        ));
        assert!(matches!(
            solve_pairs(&[pair("a", "b", f64::NAN, 1.0)]),
            Err(PairsError::BadValue { index: 0, .. })
        ));
        assert!(matches!(
            solve_pairs(&[pair("a", "b", 1.0, 0.0)]),
            Err(PairsError::BadValue { index: 0, .. })
        ));
    }

    #[test]
    fn reads_pairs_in_any_column_order_and_names_bad_lines() {
        let text = "note,se_ps,sum_ps,unit_b,unit_a\nx,2.5,5000,b,a\n\n\"q, r\",3,5600,c,b\n";
        let pairs = read_pairs(text).expect("reads");
        assert_eq!(
            pairs,
            vec![pair("a", "b", 5000.0, 2.5), pair("b", "c", 5600.0, 3.0)]
        );
        let line = |t: &str| read_pairs(t).err().map(|e| e.line);
        assert_eq!(
            line("unit_a,unit_b,sum_ps,se_ps\na,b,1,1\na,c,x,1\n"),
            Some(3)
        );
        assert_eq!(line("unit_a,unit_b,sum_ps,se_ps\na,b,1,-1\n"), Some(2));
        assert_eq!(line("unit_a,unit_b,sum_ps,se_ps\na,b,nan,1\n"), Some(2));
        assert_eq!(line("unit_a,unit_b,sum_ps,se_ps\na,a,1,1\n"), Some(2));
        assert_eq!(line("unit_a,unit_b,sum_ps\na,b,1\n"), Some(1));
        assert_eq!(line(""), Some(1));
        assert_eq!(line("unit_a,unit_b,sum_ps,se_ps\na,b,1\n"), Some(2));
    }
}
