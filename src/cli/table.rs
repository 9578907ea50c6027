//! The calibration table as a terminal shows it.

use crate::fit::CalRow;

/// A fixed-width rendering of table rows.
pub fn render(rows: &[CalRow]) -> String {
    let mut out = String::from(
        "  center_mhz  bw_mhz  gain   delay_ps  ±ci95_ps   n_used  n_rejected  source\n",
    );
    for r in rows {
        out.push_str(&format!(
            "  {:>10}  {:>6}  {:>4}  {:>9.1}  {:>8.1}  {:>7}  {:>10}  {}\n",
            r.center_mhz,
            r.bw_mhz,
            r.gain_index,
            r.delay_ps,
            r.ci95_ps,
            r.n_used,
            r.n_rejected,
            r.source.as_str()
        ));
    }
    out
}
