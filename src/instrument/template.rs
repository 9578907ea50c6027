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
        if pieces.is_empty() {
            return Err("is empty".into());
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
                    (Some(Value::Real(v)), Some(p)) => {
                        let _ = write!(out, "{v:.p$}");
                    }
                    (Some(Value::Real(v)), None) => {
                        let _ = write!(out, "{v}");
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

    /// Fills a template that takes no parameters.
    pub fn text(&self) -> String {
        self.render(&BTreeMap::new())
    }
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
