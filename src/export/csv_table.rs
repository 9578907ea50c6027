//! CSV export: the `caltable.csv` contract columns, for tools that take CSV.

use super::{ExportError, ExportTable};
use crate::fit::caltable::write_table_rows;

/// The table in the `caltable.csv` columns and number format.
pub fn render(table: &ExportTable) -> Result<String, ExportError> {
    let mut out = Vec::new();
    write_table_rows(&mut out, &table.rows).map_err(|e| ExportError::Serialise(e.to_string()))?;
    Ok(String::from_utf8_lossy(&out).into_owned())
}

#[cfg(test)]
mod tests {
    use super::super::test_table::table;
    use super::*;
    use crate::fit::read_caltable;

    #[test]
    fn reads_back_as_a_caltable() {
        let t = table();
        let text = render(&t).expect("renders");
        assert_eq!(read_caltable(text.as_bytes()).ok(), Some(t.rows));
    }
}
