//! TOML export: the [`Document`](super::Document), entries as an array of tables.

use super::{Document, ExportError, ExportTable};

/// The table as a TOML document.
pub fn render(table: &ExportTable) -> Result<String, ExportError> {
    toml::to_string_pretty(&Document::from(table))
        .map_err(|e| ExportError::Serialise(e.to_string()))
}

#[cfg(test)]
mod tests {
    use super::super::test_table::table;
    use super::*;

    #[test]
    fn round_trips_through_serde() {
        let t = table();
        let text = render(&t).expect("renders");
        let back: Document = toml::from_str(&text).expect("parses");
        assert_eq!(back, Document::from(&t));
        assert!(text.contains("[[entries]]"), "{text}");
    }
}
