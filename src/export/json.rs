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

    #[test]
    fn a_budget_is_appended_and_an_infinite_dof_left_out() {
        use crate::fit::budget_cell::RowBudget;
        let mut t = table();
        let budget = |dof| RowBudget {
            u_stat_ps: 0.6,
            u_bench_ps: 5.0,
            u_comb_ps: 5.036,
            dof,
            k: 1.96,
            expanded_ps: 9.87,
        };
        t.rows[0].budget = Some(budget(f64::INFINITY));
        t.rows[1].budget = Some(budget(41.5));
        let text = render(&t).expect("renders");
        let back: Document = serde_json::from_str(&text).expect("parses");
        assert_eq!(back, Document::from(&t));
        let b0 = back.entries[0].budget.as_ref().expect("budget");
        assert_eq!((b0.dof, b0.expanded_ps), (None, 9.87));
        assert_eq!(
            back.entries[1].budget.as_ref().and_then(|b| b.dof),
            Some(41.5)
        );
        assert_eq!(back.entries[2].budget, None);
        assert!(!text.contains("null"), "{text}");
    }
}
