//! Errors that point into a source file, and their rendering.
//!
//! Library code produces [`Diagnostic`]s (or [`KeyError`]s that name a key path and are located
//! later); only the binary's edge renders them, once: a first line naming the file, line and
//! column, the quoted line with a marker row under the fault, and what would be right.

use std::fmt;
use std::ops::Range;
use std::path::{Path, PathBuf};

/// A meaning error found after parsing, located by its dotted key path (`sim.dut.jitter_ps`,
/// `stage.2.atten_db`).
#[derive(Debug, Clone, PartialEq)]
pub struct KeyError {
    /// Dotted key path; array elements are numbered from 0.
    pub key: String,
    /// What is wrong.
    pub message: String,
    /// What would be right.
    pub hint: String,
}

impl KeyError {
    /// A new key error.
    pub fn new(
        key: impl Into<String>,
        message: impl Into<String>,
        hint: impl Into<String>,
    ) -> Self {
        KeyError {
            key: key.into(),
            message: message.into(),
            hint: hint.into(),
        }
    }
}

/// A file's text, kept so errors can quote it.
#[derive(Debug, Clone)]
pub struct SourceFile {
    /// The path as the user gave it (or a label such as `<built-in sim-demo bench>`).
    pub path: PathBuf,
    /// The whole text.
    pub text: String,
}

impl SourceFile {
    /// Wraps text read from `path`.
    pub fn new(path: impl Into<PathBuf>, text: impl Into<String>) -> Self {
        SourceFile {
            path: path.into(),
            text: text.into(),
        }
    }

    /// Byte span of the value at a dotted key path, or of the closest enclosing key that exists.
    pub fn span_of_key(&self, key: &str) -> Option<Range<usize>> {
        use toml::de::{DeTable, DeValue};
        let doc = DeTable::parse(&self.text).ok()?;
        let mut best: Option<Range<usize>> = None;
        let mut table = doc.get_ref();
        let mut array: Option<&toml::de::DeArray> = None;
        for part in key.split('.') {
            let value = if let Some(arr) = array.take() {
                part.parse::<usize>().ok().and_then(|i| arr.get(i))
            } else {
                table.get(part)
            };
            let Some(value) = value else { break };
            best = Some(value.span());
            match value.get_ref() {
                DeValue::Table(t) => table = t,
                DeValue::Array(a) => array = Some(a),
                _ => break,
            }
        }
        best
    }

    /// Builds a diagnostic for a key error, located in this file.
    pub fn key_error(&self, e: KeyError) -> Diagnostic {
        let span = self.span_of_key(&e.key);
        Diagnostic {
            message: format!("`{}` {}", e.key, e.message),
            file: Some(self.clone()),
            span,
            hint: Some(e.hint),
        }
    }

    /// 1-based line and column of a byte offset.
    pub fn line_col(&self, offset: usize) -> (usize, usize) {
        let offset = offset.min(self.text.len());
        let before = &self.text[..offset];
        let line = before.matches('\n').count() + 1;
        let line_start = before.rfind('\n').map_or(0, |i| i + 1);
        let col = before[line_start..].chars().count() + 1;
        (line, col)
    }
}

/// An error ready to show a user: what, where, and what would be right.
#[derive(Debug, Clone)]
pub struct Diagnostic {
    /// One-line statement of the fault.
    pub message: String,
    /// The file it is in, when it is in one.
    pub file: Option<SourceFile>,
    /// Byte span within the file.
    pub span: Option<Range<usize>>,
    /// What would be right.
    pub hint: Option<String>,
}

impl Diagnostic {
    /// A diagnostic without a location.
    pub fn plain(message: impl Into<String>) -> Self {
        Diagnostic {
            message: message.into(),
            file: None,
            span: None,
            hint: None,
        }
    }

    /// Adds a hint.
    pub fn with_hint(mut self, hint: impl Into<String>) -> Self {
        self.hint = Some(hint.into());
        self
    }

    /// A diagnostic at a span of a file.
    pub fn at(file: &SourceFile, span: Option<Range<usize>>, message: impl Into<String>) -> Self {
        Diagnostic {
            message: message.into(),
            file: Some(file.clone()),
            span,
            hint: None,
        }
    }

    /// A diagnostic about a whole file (it could not be read, say).
    pub fn in_file(path: &Path, message: impl Into<String>) -> Self {
        Diagnostic {
            message: message.into(),
            file: Some(SourceFile::new(path, String::new())),
            span: None,
            hint: None,
        }
    }
}

/// Indent of the quoted line, the marker row and the advice under the first line.
const INDENT: &str = "    ";

/// Renders taucal's own error layout:
///
/// ```text
/// taucal: r.toml line 2, column 10: `x.bursts` must be positive
///     bursts = -1
///              ==
///     what would be right: use 1 or more
/// ```
impl fmt::Display for Diagnostic {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut quoted = None;
        match (&self.file, &self.span) {
            (Some(file), Some(span)) if !file.text.is_empty() => {
                let (line, col) = file.line_col(span.start);
                write!(
                    f,
                    "taucal: {} line {line}, column {col}: ",
                    file.path.display()
                )?;
                quoted = Some((file, span, line, col));
            }
            (Some(file), _) => write!(f, "taucal: {}: ", file.path.display())?,
            (None, _) => write!(f, "taucal: ")?,
        }
        writeln!(f, "{}", self.message)?;
        if let Some((file, span, line, col)) = quoted {
            let src = file.text.lines().nth(line - 1).unwrap_or("");
            let width = file.text[span.clone()]
                .lines()
                .next()
                .map_or(1, |l| l.chars().count().max(1))
                .min(src.chars().count().saturating_sub(col - 1).max(1));
            // Tabs before the column are kept so the marker lines up however tabs are shown.
            let pad: String = src
                .chars()
                .take(col - 1)
                .map(|c| if c == '\t' { '\t' } else { ' ' })
                .collect();
            writeln!(f, "{INDENT}{src}")?;
            writeln!(f, "{INDENT}{pad}{}", "=".repeat(width))?;
        }
        if let Some(hint) = &self.hint {
            writeln!(f, "{INDENT}what would be right: {hint}")?;
        }
        Ok(())
    }
}

impl std::error::Error for Diagnostic {}

/// Turns a TOML parse/deserialize error into a diagnostic at its span.
pub fn from_toml(file: &SourceFile, e: &toml::de::Error) -> Diagnostic {
    let message = e.message().trim().to_string();
    let hint = toml_hint(&message);
    Diagnostic {
        message,
        file: Some(file.clone()),
        span: e.span(),
        hint,
    }
}

fn toml_hint(message: &str) -> Option<String> {
    if let Some(rest) = message.split("expected one of ").nth(1) {
        let allowed = format!("the keys allowed here are {rest}");
        let unknown = message
            .strip_prefix("unknown field `")
            .and_then(|m| m.split('`').next());
        let candidates = rest.split(", ").map(|c| c.trim_matches('`'));
        return Some(match unknown.and_then(|u| did_you_mean(u, candidates)) {
            Some(near) => format!("did you mean `{near}`? {allowed}"),
            None => allowed,
        });
    }
    if message.starts_with("missing field") {
        return Some("add the key; see README.md for the file format".into());
    }
    if message.contains("invalid type") {
        return Some("check the value's type (number, string, array or table)".into());
    }
    None
}

/// The candidate closest to `word` by edit distance, when close enough to be a likely typo.
pub fn did_you_mean<'a>(
    word: &str,
    candidates: impl IntoIterator<Item = &'a str>,
) -> Option<&'a str> {
    candidates
        .into_iter()
        .map(|c| (edit_distance(word, c), c))
        .filter(|(d, c)| *d <= (c.chars().count() / 3).max(1))
        .min_by_key(|(d, _)| *d)
        .map(|(_, c)| c)
}

fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut diag = row[0];
        row[0] = i + 1;
        for (j, cb) in b.iter().enumerate() {
            let next = (diag + usize::from(ca != *cb))
                .min(row[j] + 1)
                .min(row[j + 1] + 1);
            diag = row[j + 1];
            row[j + 1] = next;
        }
    }
    row[b.len()]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn suggests_close_names_only() {
        assert_eq!(did_you_mean("burst", ["bursts", "frames"]), Some("bursts"));
        assert_eq!(did_you_mean("xyz", ["bursts", "frames"]), None);
    }

    #[test]
    fn locates_nested_keys() {
        let f = SourceFile::new("b.toml", "[a]\nx = 1\n\n[[s]]\nk = 2\n[[s]]\nk = 3\n");
        let span = f.span_of_key("s.1.k").expect("span");
        assert_eq!(&f.text[span.clone()], "3");
        assert_eq!(f.line_col(span.start), (7, 5));
        let span = f.span_of_key("a.missing").expect("falls back to the table");
        assert_eq!(f.line_col(span.start).0, 1);
    }

    #[test]
    fn renders_file_line_marker_and_advice() {
        let f = SourceFile::new("r.toml", "[x]\nbursts = -1\n");
        let d = f.key_error(KeyError::new(
            "x.bursts",
            "must be positive",
            "use 1 or more",
        ));
        assert_eq!(
            d.to_string(),
            "taucal: r.toml line 2, column 10: `x.bursts` must be positive\n\
             \x20   bursts = -1\n\
             \x20            ==\n\
             \x20   what would be right: use 1 or more\n"
        );
    }

    #[test]
    fn the_marker_keeps_tabs_and_errors_without_a_place_say_so_plainly() {
        let f = SourceFile::new("t.toml", "[x]\n\tk =\t7\n");
        let span = f.span_of_key("x.k").expect("span");
        let text = Diagnostic::at(&f, Some(span), "bad").to_string();
        assert!(text.ends_with("    \tk =\t7\n    \t   \t=\n"), "{text:?}");
        assert_eq!(
            Diagnostic::plain("no such run")
                .with_hint("give a run directory")
                .to_string(),
            "taucal: no such run\n    what would be right: give a run directory\n"
        );
        assert_eq!(
            Diagnostic::in_file(Path::new("m.toml"), "cannot read").to_string(),
            "taucal: m.toml: cannot read\n"
        );
    }
}
