//! The report's uncertainty budget: one compact table, a row per cell, a column per component's
//! contribution |c·u| from `budget.csv`, then the combination `caltable.csv` carries.

use super::html::escape;
use super::BudgetLine;
use crate::data::manifest::CertificateRecord;
use crate::fit::budget_cell::dof_text;
use crate::fit::TableRow;
use std::fmt::Write;

/// The budget section. Without `budget.csv` (an older run) it says so and shows nothing else.
/// The reference's certificate, when the run had one, is named first: its K is an input.
pub fn section(
    page: &mut String,
    lines: &[BudgetLine],
    table: &[TableRow],
    certificate: Option<&CertificateRecord>,
) {
    page.push_str("<section id=\"budget\">\n<h2>Uncertainty budget</h2>\n");
    if let Some(c) = certificate {
        let _ = writeln!(
            page,
            "<p class=\"certificate\">Reference K from certificate <strong>{}</strong> ({}), \
             issued {}, due {}{}.</p>",
            escape(&c.id),
            escape(&c.lab),
            escape(&c.issued),
            escape(&c.due),
            if c.overdue {
                " — <strong>past due</strong> when this run started"
            } else {
                ""
            }
        );
    }
    if lines.is_empty() {
        page.push_str(
            "<p class=\"empty\">No budget: the run wrote no <code>budget.csv</code>.</p>\n",
        );
        page.push_str("</section>\n");
        return;
    }
    // Components in the order the file first lists them, with their type and sensitivity.
    let mut components: Vec<(&str, &str, f64)> = Vec::new();
    for l in lines {
        if !components.iter().any(|c| c.0 == l.component) {
            components.push((&l.component, &l.evaluation, l.sensitivity));
        }
    }
    page.push_str(
        "<p>Each component's contribution |c·u| in ps (GUM type and sensitivity c under its \
         name), combined by root-sum-square; ν<sub>eff</sub> by Welch–Satterthwaite and k from \
         Student's t at 95 %. U = k·u<sub>c</sub>.</p>\n<div class=\"scroll\"><table>\n<thead><tr>\
         <th class=\"text\">channel</th><th>gain state</th>",
    );
    for (name, evaluation, sensitivity) in &components {
        let _ = write!(
            page,
            "<th>{}<br><small>{} · c = {}</small></th>",
            escape(name),
            escape(evaluation),
            sensitivity
        );
    }
    page.push_str(
        "<th>u<sub>c</sub> (ps)</th><th>ν<sub>eff</sub></th><th>k</th><th>U (ps)</th>\
         </tr></thead>\n<tbody>\n",
    );
    let mut cells: Vec<(u32, u32, u32)> = lines
        .iter()
        .map(|l| (l.center_mhz, l.bw_mhz, l.gain_index))
        .collect();
    cells.dedup();
    for (center_mhz, bw_mhz, gain_index) in cells {
        let _ = write!(
            page,
            "<tr><td class=\"text\">{center_mhz} MHz / {bw_mhz} MHz</td><td>{gain_index}</td>"
        );
        for (name, _, _) in &components {
            let line = lines.iter().find(|l| {
                (l.center_mhz, l.bw_mhz, l.gain_index) == (center_mhz, bw_mhz, gain_index)
                    && l.component == *name
            });
            match line {
                Some(l) => {
                    let _ = write!(page, "<td>{:.1}</td>", l.contribution_ps);
                }
                None => page.push_str("<td>–</td>"),
            }
        }
        let combined = table
            .iter()
            .find(|r| (r.center_mhz, r.bw_mhz, r.gain_index) == (center_mhz, bw_mhz, gain_index))
            .and_then(|r| r.budget);
        match combined {
            Some(b) => {
                let _ = write!(
                    page,
                    "<td>{:.1}</td><td>{}</td><td>{:.2}</td><td>{:.1}</td>",
                    b.u_comb_ps,
                    dof_text(b.dof),
                    b.k,
                    b.expanded_ps
                );
            }
            None => page.push_str("<td>–</td><td>–</td><td>–</td><td>–</td>"),
        }
        page.push_str("</tr>\n");
    }
    page.push_str("</tbody>\n</table></div>\n</section>\n");
}

#[cfg(test)]
mod tests {
    use super::*;

    fn line(gain_index: u32, component: &str, contribution_ps: f64) -> BudgetLine {
        BudgetLine {
            center_mhz: 5180,
            bw_mhz: 80,
            gain_index,
            component: component.to_string(),
            evaluation: "B".to_string(),
            distribution: "normal".to_string(),
            sensitivity: -2.0,
            u_ps: contribution_ps / 2.0,
            contribution_ps,
            dof: f64::INFINITY,
        }
    }

    #[test]
    fn one_row_per_cell_and_one_column_per_component() {
        let lines = [
            line(0, "statistical", 1.26),
            line(0, "cable_delay", 8.0),
            line(1, "statistical", 2.5),
            line(1, "cable_delay", 8.0),
        ];
        let mut page = String::new();
        section(&mut page, &lines, &[], None);
        assert_eq!(page.matches("<tr><td class=\"text\">").count(), 2);
        assert_eq!(page.matches("<br><small>").count(), 2);
        assert!(
            page.contains("<td>0</td><td>1.3</td><td>8.0</td><td>–</td>"),
            "{page}"
        );
        let mut empty = String::new();
        section(&mut empty, &[], &[], None);
        assert!(empty.contains("No budget"));
        let c = CertificateRecord {
            id: "C-1<".into(),
            lab: "Lab".into(),
            issued: "2026-01-01".into(),
            due: "2027-01-01".into(),
            overdue: true,
        };
        let mut cert = String::new();
        section(&mut cert, &lines, &[], Some(&c));
        assert!(
            cert.contains("certificate <strong>C-1&lt;</strong>"),
            "{cert}"
        );
        assert!(
            cert.contains("due 2027-01-01 — <strong>past due</strong>"),
            "{cert}"
        );
    }
}
