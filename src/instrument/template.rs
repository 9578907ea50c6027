//! Command templates from driver files: literal text with typed, formatted parameters, e.g.
//! `DAMP:SETT {db:.2}` or `range start n={frames} f={center_mhz} bw={bw_mhz}`.
//!
//! Parsing checks every placeholder against the parameters its command offers, so a typo in a
//! driver file is an error at load time, never a malformed command on the wire.

use std::collections::BTreeMap;
use std::fmt::Write;

/// The type of a template parameter.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ParamKind {
    /// A real number; may take a precision (`{db:.2}`).
    Real,
    /// A non-negative integer.
    Integer,
}

/// A value to fill in.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Value {
    /// A real number.
    Real(f64),
    /// A non-negative integer.
    Integer(u64),
}

#[derive(Debug, Clone, PartialEq)]
enum Piece {
    Text(String),
    Param {
        name: String,
        precision: Option<usize>,
    },
}

/// A parsed command template.
#[derive(Debug, Clone, PartialEq)]
pub struct Template {
    pieces: Vec<Piece>,
}

impl Template {
    /// Parses `text`, allowing only the parameters in `params`. `{{` and `}}` stand for braces.
    pub fn parse(text: &str, params: &[(&str, ParamKind)]) -> Result<Template, String> {
        let t = Template::parse_word(text, params)?;
        if t.pieces.is_empty() {
            return Err("is empty".into());
        }
        Ok(t)
    }

    /// Parses one argument of a program's command line: as [`Template::parse`], but an empty
    /// argument is an argument.
    pub fn parse_word(text: &str, params: &[(&str, ParamKind)]) -> Result<Template, String> {
        let mut pieces = Vec::new();
        let mut literal = String::new();
        let mut chars = text.chars().peekable();
        while let Some(c) = chars.next() {
            match c {
                '{' if chars.peek() == Some(&'{') => {
                    chars.next();
                    literal.push('{');
                }
                '}' if chars.peek() == Some(&'}') => {
                    chars.next();
                    literal.push('}');
                }
                '}' => return Err("a lone `}` (write `}}` for a brace)".into()),
                '{' => {
                    let inner: String = chars.by_ref().take_while(|c| *c != '}').collect();
                    let (name, format) = inner.split_once(':').unwrap_or((&inner, ""));
                    let Some((_, kind)) = params.iter().find(|(n, _)| *n == name) else {
                        let known: Vec<&str> = params.iter().map(|(n, _)| *n).collect();
                        return Err(if known.is_empty() {
                            format!("`{{{inner}}}`: this command takes no parameters")
                        } else {
                            format!(
                                "`{{{inner}}}`: unknown parameter `{name}` (this command offers {})",
                                known.join(", ")
                            )
                        });
                    };
                    let precision = match (format, kind) {
                        ("", _) => None,
                        (f, ParamKind::Real) => Some(
                            f.strip_prefix('.')
                                .and_then(|p| p.parse::<usize>().ok())
                                .filter(|p| *p <= 12)
                                .ok_or_else(|| {
                                    format!("`{{{inner}}}`: a format is `.N`, N digits after the point (0 to 12)")
                                })?,
                        ),
                        (_, ParamKind::Integer) => {
                            return Err(format!("`{{{inner}}}`: `{name}` is an integer and takes no format"))
                        }
                    };
                    if !literal.is_empty() {
                        pieces.push(Piece::Text(std::mem::take(&mut literal)));
                    }
                    pieces.push(Piece::Param {
                        name: name.to_string(),
                        precision,
                    });
                }
                c => literal.push(c),
            }
        }
        if !literal.is_empty() {
            pieces.push(Piece::Text(literal));
        }
        Ok(Template { pieces })
    }

    /// Fills the template. Every parameter was checked at parse time; a value missing from
    /// `values` renders as nothing, which the callers never allow (they pass all of them).
    pub fn render(&self, values: &BTreeMap<&str, Value>) -> String {
        let mut out = String::new();
        for piece in &self.pieces {
            match piece {
                Piece::Text(t) => out.push_str(t),
                Piece::Param { name, precision } => match (values.get(name.as_str()), precision) {
                    (Some(Value::Real(v)), precision) => {
                        out.push_str(&real_text(*v, *precision));
                    }
                    (Some(Value::Integer(v)), _) => {
                        let _ = write!(out, "{v}");
                    }
                    (None, _) => {}
                },
            }
        }
        out
    }

    /// The value an instrument reads when real parameter `name` is sent as `v`: what the
    /// template's format leaves of it. `None` when the template has no such parameter or the
    /// text does not read back as a number.
    pub fn as_sent(&self, name: &str, v: f64) -> Option<f64> {
        real_text(v, self.precision_of(name)?).parse().ok()
    }

    /// The first setting of the grid `lo, lo + step, …, hi` that real parameter `name` would not
    /// send as itself (a format with too few decimals), with the text it would send instead.
    pub fn misrendered(&self, name: &str, lo: f64, hi: f64, step: f64) -> Option<(f64, String)> {
        let precision = self.precision_of(name)?;
        let settings = ((hi - lo) / step).round() as u64;
        (0..=settings).map(|k| lo + k as f64 * step).find_map(|v| {
            let text = real_text(v, precision);
            let back = text.parse::<f64>().unwrap_or(f64::NAN);
            (!same_setting(back, v)).then_some((v, text))
        })
    }

    /// The format of parameter `name` (`Some(None)`: no precision given), if it has one.
    fn precision_of(&self, name: &str) -> Option<Option<usize>> {
        self.pieces.iter().find_map(|piece| match piece {
            Piece::Param { name: n, precision } if n == name => Some(*precision),
            _ => None,
        })
    }

    /// True when the template uses parameter `name`.
    pub fn has_param(&self, name: &str) -> bool {
        self.pieces
            .iter()
            .any(|p| matches!(p, Piece::Param { name: n, .. } if n == name))
    }

    /// Fills a template that takes no parameters.
    pub fn text(&self) -> String {
        self.render(&BTreeMap::new())
    }
}

/// A real number as a template writes it: with `precision` decimals, or else the shortest text
/// that reads back as the same number.
fn real_text(v: f64, precision: Option<usize>) -> String {
    match precision {
        Some(p) => format!("{v:.p$}"),
        None => format!("{v}"),
    }
}

/// True when `db` is a whole number of `step_db` steps from `origin_db` (to far less than a
/// step; binary grid arithmetic leaves a few ulps). A NaN is on no grid.
pub fn on_grid(db: f64, origin_db: f64, step_db: f64) -> bool {
    let steps = (db - origin_db) / step_db;
    (steps - steps.round()).abs() <= 1e-6
}

/// Two attenuator settings are the same when they differ by far less than any step (grid
/// arithmetic in binary floating point leaves a few ulps).
pub fn same_setting(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-9
}

#[cfg(test)]
mod tests {
    use super::*;

    const DB: &[(&str, ParamKind)] = &[("db", ParamKind::Real)];

    #[test]
    fn renders_typed_formatted_parameters() {
        let t = Template::parse("DAMP:SETT {db:.2}", DB).expect("parse");
        assert_eq!(
            t.render(&BTreeMap::from([("db", Value::Real(17.5))])),
            "DAMP:SETT 17.50"
        );
        let t = Template::parse(
            "range start n={frames} bw={bw_mhz} {{raw}}",
            &[
                ("frames", ParamKind::Integer),
                ("bw_mhz", ParamKind::Integer),
            ],
        )
        .expect("parse");
        assert_eq!(
            t.render(&BTreeMap::from([
                ("frames", Value::Integer(16)),
                ("bw_mhz", Value::Integer(80))
            ])),
            "range start n=16 bw=80 {raw}"
        );
    }

    #[test]
    fn a_format_coarser_than_the_grid_is_found_and_an_exact_one_passes() {
        // 17.25 dB with no decimals is sent as "17", below a 17.1 dB protection limit.
        let coarse = Template::parse("ATT {db:.0}", DB).expect("parse");
        assert_eq!(coarse.as_sent("db", 17.25), Some(17.0));
        assert_eq!(
            coarse.misrendered("db", 0.0, 95.0, 0.25),
            Some((0.25, "0".to_string()))
        );
        // One decimal is still too coarse for quarter-dB steps (0.25 has two).
        let one = Template::parse("ATT {db:.1}", DB).expect("parse");
        assert_eq!(
            one.misrendered("db", 0.0, 95.0, 0.25).map(|m| m.0),
            Some(0.25)
        );
        for exact in ["ATT {db:.2}", "ATT {db}"] {
            let t = Template::parse(exact, DB).expect("parse");
            assert_eq!(t.misrendered("db", 0.0, 95.0, 0.25), None, "{exact}");
            // A tenth-dB grid from a non-zero start, with its binary rounding, also passes.
            assert_eq!(t.misrendered("db", 1.5, 31.5, 0.1), None, "{exact}");
            assert_eq!(t.as_sent("db", 17.25), Some(17.25));
        }
        // Whole-dB steps need no decimals.
        assert_eq!(coarse.misrendered("db", 0.0, 95.0, 1.0), None);
    }

    #[test]
    fn refuses_unknown_parameters_and_bad_formats() {
        for (text, want) in [
            ("DAMP:SETT {dB}", "unknown parameter `dB`"),
            ("DAMP:SETT {db:2}", "a format is `.N`"),
            ("DAMP:SETT {db:.x}", "a format is `.N`"),
            ("DAMP:SETT }", "lone"),
            ("", "empty"),
        ] {
            let e = Template::parse(text, DB).expect_err(text);
            assert!(e.contains(want), "{text}: {e}");
        }
        let e = Template::parse("n={frames:.1}", &[("frames", ParamKind::Integer)])
            .expect_err("integer format");
        assert!(e.contains("integer"), "{e}");
        let e = Template::parse("DAMP:SETT? {db}", &[]).expect_err("no parameters");
        assert!(e.contains("takes no parameters"), "{e}");
    }
}
