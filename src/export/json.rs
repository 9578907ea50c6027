//! JSON export: the [`Document`](super::Document), pretty-printed.

use super::{Document, ExportError, ExportTable};

/// The table as a JSON document.
pub fn render(table: &ExportTable) -> Result<String, ExportError> {
    let mut text = serde_json::to_string_pretty(&Document::from(table))
        .map_err(|e| ExportError::Serialise(e.to_string()))?;
    text.push('\n');
    Ok(text)
}

#[cfg(test)]
mod tests {
    use super::super::test_table::table;
    use super::*;

    #[test]
    fn round_trips_through_serde() {
        let t = table();
        let text = render(&t).expect("renders");
        let back: Document = serde_json::from_str(&text).expect("parses");
        assert_eq!(back, Document::from(&t));
        assert_eq!(back.entries[2].source, "modelled");
    }
}
