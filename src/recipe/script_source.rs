//! Where a script's text lives, so a Rhai error can be shown at the right line of the TOML
//! recipe (inline scripts) or of the `.rhai` file.

use crate::diagnostic::{Diagnostic, KeyError, SourceFile};
use std::ops::Range;
use std::path::Path;

/// A script's code and the file position of its first character.
#[derive(Debug, Clone)]
pub struct ScriptSource {
    /// The Rhai code.
    pub code: String,
    /// The file errors are shown in.
    pub file: SourceFile,
    /// Byte offset in `file` where the code starts.
    pub start: usize,
}

impl ScriptSource {
    /// An inline script: the string value at `key` of the recipe.
    pub fn inline(recipe: &SourceFile, key: &str) -> Result<ScriptSource, Diagnostic> {
        let span = recipe
            .span_of_key(key)
            .ok_or_else(|| Diagnostic::at(recipe, None, format!("cannot locate `{key}`")))?;
        let raw = &recipe.text[span.clone()];
        let mut start = span.start;
        if raw.starts_with("\"\"\"") || raw.starts_with("'''") {
            start += 3;
            let rest = &recipe.text[start..];
            if rest.starts_with("\r\n") {
                start += 2;
            } else if rest.starts_with('\n') {
                start += 1;
            }
        } else {
            start += 1;
        }
        let code = toml::from_str::<toml::Table>(&format!("v = {raw}"))
            .ok()
            .and_then(|t| t.get("v").and_then(|v| v.as_str().map(str::to_string)))
            .ok_or_else(|| {
                recipe.key_error(KeyError::new(
                    key,
                    "is not a string",
                    "write script = '''…'''",
                ))
            })?;
        Ok(ScriptSource {
            code,
            file: recipe.clone(),
            start,
        })
    }

    /// A script in a file beside the recipe.
    pub fn from_file(
        base_dir: &Path,
        rel: &str,
        recipe: &SourceFile,
        key: &str,
    ) -> Result<ScriptSource, Diagnostic> {
        let path = base_dir.join(rel);
        let code = crate::text_file::read(&path).map_err(|e| {
            recipe.key_error(KeyError::new(
                key,
                format!("cannot read {}: {e}", path.display()),
                "give a path relative to the recipe's folder",
            ))
        })?;
        Ok(ScriptSource {
            file: SourceFile::new(path, code.clone()),
            code,
            start: 0,
        })
    }

    /// The byte span in `file` of Rhai's 1-based (line, column) position.
    pub fn span_at(&self, line: usize, col: usize) -> Option<Range<usize>> {
        let code_line_start = self
            .code
            .split_inclusive('\n')
            .take(line.saturating_sub(1))
            .map(str::len)
            .sum::<usize>();
        let line_text = self.code[code_line_start..].lines().next().unwrap_or("");
        let within: usize = line_text
            .chars()
            .take(col.saturating_sub(1))
            .map(char::len_utf8)
            .sum();
        let at = self.start + code_line_start + within;
        let end = (at + 1).min(self.file.text.len());
        (at <= self.file.text.len()).then_some(at..end.max(at))
    }

    /// A diagnostic at a Rhai position.
    pub fn error_at(&self, line: usize, col: usize, message: impl Into<String>) -> Diagnostic {
        Diagnostic::at(&self.file, self.span_at(line, col), message)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn inline_script_lines_map_to_recipe_lines() {
        let text = "[recipe]\nname = \"x\"\n\n[[stage]]\nname = \"s\"\nscript = '''\nlet a = 1;\nlet b = ;\n'''\n";
        let f = SourceFile::new("r.toml", text);
        let s = ScriptSource::inline(&f, "stage.0.script").expect("inline");
        assert_eq!(s.code, "let a = 1;\nlet b = ;\n");
        let span = s.span_at(2, 9).expect("span");
        assert_eq!(f.line_col(span.start), (8, 9));
        assert_eq!(&f.text[span], ";");
    }
}
