//! Reading a CSV file a command names, and pointing at one of its lines in an error.

use crate::diagnostic::{Diagnostic, SourceFile};
use std::path::Path;

/// Reads `path` whole (invalid UTF-8 replaced, a leading byte-order mark dropped) so errors can
/// quote its lines.
pub fn load(path: &Path) -> Result<SourceFile, Diagnostic> {
    let bytes = std::fs::read(path)
        .map_err(|e| Diagnostic::in_file(path, format!("cannot read {}: {e}", path.display())))?;
    let text = String::from_utf8_lossy(&bytes);
    Ok(SourceFile::new(
        path,
        text.strip_prefix('\u{feff}').unwrap_or(&text).to_string(),
    ))
}

/// A diagnostic at the line starting at byte offset `byte`, rendered as `file:line:col` with the
/// line quoted.
pub fn at_line(file: &SourceFile, byte: u64, message: impl Into<String>) -> Diagnostic {
    let start = usize::try_from(byte)
        .unwrap_or(usize::MAX)
        .min(file.text.len());
    let end = file.text[start..]
        .find(['\n', '\r'])
        .map_or(file.text.len(), |i| start + i);
    Diagnostic::at(file, Some(start..end.max(start)), message)
}
