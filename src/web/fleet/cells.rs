//! The cells' page: every cell's statistics over the fleet as `fleet stats` prints them, each
//! leading to its population, and the outlier units it lists.

use super::markup::{cell_link, escaped, table, tabs, unit_link, Tab};
use crate::fleet::cells::{CellStats, TOL_CONFIDENCE, TOL_PROPORTION};
use crate::fleet::outliers::{Outlier, CUTOFF_Z};
use crate::fleet::shown::{outlier_row, stats_row, OUTLIER_HEADER, STATS_HEADER};

/// The page's body, from `cell_stats` and `outliers` of the fleet's cells, `units` in all.
pub fn body(stats: &[CellStats], outliers: &[Outlier], units: usize) -> String {
    let mut s = tabs(Tab::Cells);
    let mut header: Vec<&str> = STATS_HEADER.to_vec();
    header.push("population");
    let rows: Vec<Vec<String>> = stats
        .iter()
        .map(|st| {
            let mut r = escaped(&stats_row(st));
            r.push(cell_link(st.cell));
            r
        })
        .collect();
    s += &format!(
        "<section><h2>Cells</h2><p class=\"note\">Each unit's latest accepted run, measured \
         cells. tol_lo/hi: two-sided normal tolerance interval covering {:.0} % of units with \
         {:.0} % confidence; sd² = noise_sd² + unit_sd².</p>{}</section>",
        TOL_PROPORTION * 100.0,
        TOL_CONFIDENCE * 100.0,
        table("cells", &header, &[13], &rows)
    );
    s += "<section><h2>Outlier units</h2>";
    if outliers.is_empty() {
        s += &format!(
            "<p class=\"note\" id=\"outliers-none\">None of {units} units beyond robust z \
             {CUTOFF_Z}.</p>"
        );
    } else {
        let rows: Vec<Vec<String>> = outliers
            .iter()
            .map(|o| {
                let mut r = escaped(&outlier_row(o));
                r[0] = unit_link(&o.unit.serial);
                r[4] = cell_link(o.unit.worst_cell);
                r
            })
            .collect();
        s += &format!(
            "<p class=\"note\">{} of {units} units beyond robust z {CUTOFF_Z}, worst first.</p>{}",
            outliers.len(),
            table("outliers", &OUTLIER_HEADER, &[0, 1, 4], &rows)
        );
    }
    s + "</section>"
}
