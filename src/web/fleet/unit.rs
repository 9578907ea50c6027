//! A unit's page: its runs, the table `store table` gives for it (its latest accepted run's),
//! that run's verification and acceptance, and where the unit sits in the fleet.

use super::markup::{cell_link, escaped, pill, table, tabs, Tab};
use super::units::time_cell;
use crate::fit::verify::VERIFY_HEADER;
use crate::fleet::cells::CellStats;
use crate::fleet::centred::UnitDeviation;
use crate::fleet::outliers::{Outlier, CUTOFF_Z};
use crate::fleet::shown::num;
use crate::store::{RunRecord, RunRow, UnitSummary};
use crate::web::escape;

/// Everything the page shows of one unit.
#[derive(Debug, Clone, Copy)]
pub struct UnitView<'a> {
    /// The unit's line in the units list.
    pub summary: &'a UnitSummary,
    /// Its runs, oldest first.
    pub runs: &'a [RunRow],
    /// Its latest accepted run.
    pub latest: Option<&'a RunRecord>,
    /// That run's table as `store table --format csv` prints it.
    pub table_csv: Option<&'a str>,
    /// The fleet's cells.
    pub stats: &'a [CellStats],
    /// The unit's deviation from the fleet.
    pub place: Option<&'a UnitDeviation>,
    /// Its outlier listing, when it has one.
    pub outlier: Option<&'a Outlier>,
}

/// The page's body.
pub fn body(v: &UnitView) -> String {
    let u = v.summary;
    let mut s = tabs(Tab::None);
    s += "<section><h2>Unit</h2><dl class=\"facts\">";
    let mut fact = |k: &str, html: String| s += &format!("<dt>{}</dt><dd>{html}</dd>", escape(k));
    fact("serial", escape(&u.serial));
    fact("model", escape(&u.model));
    fact("runs", u.runs.to_string());
    fact(
        "last run",
        format!(
            "{} ({})",
            time_cell(&u.last_run_utc),
            escape(&u.last_status)
        ),
    );
    fact("accepted", pill(u.accepted, "yes", "no"));
    if let Some(p) = v.place {
        fact(
            "against the fleet",
            format!(
                "{} ps on average over {} cells (each cell's fleet median taken off); furthest \
                 in {} at robust z {}",
                num(p.deviation_ps, 1),
                p.cells,
                cell_link(p.worst_cell),
                num(p.worst_z, 1)
            ),
        );
    }
    if let Some(o) = v.outlier {
        fact(
            "outlier",
            format!(
                "<span class=\"pill flag\">yes</span> robust z {} (beyond {CUTOFF_Z})",
                num(o.score, 1)
            ),
        );
    }
    s += "</dl></section>";
    s += &latest_table(v);
    if let Some(rec) = v.latest {
        s += &verification(rec);
        s += &acceptance(rec);
    }
    s += &runs(v.runs);
    s
}

/// The latest accepted table, its columns as `store table` prints them, then the fleet's
/// tolerance interval for each cell.
fn latest_table(v: &UnitView) -> String {
    let (Some(rec), Some(text)) = (v.latest, v.table_csv) else {
        return "<section><h2>Table</h2><p class=\"note\">No accepted run: no table to give.\
                </p></section>"
            .into();
    };
    let mut reader = csv::Reader::from_reader(text.as_bytes());
    let mut header: Vec<String> = match reader.headers() {
        Ok(h) => h.iter().map(String::from).collect(),
        Err(e) => return format!("<section><p>{}</p></section>", escape(&e.to_string())),
    };
    let at = |name: &str| header.iter().position(|h| h == name);
    let (ci, bi, gi) = (at("center_mhz"), at("bw_mhz"), at("gain_index"));
    let delay = at("delay_ps");
    let mut rows = Vec::new();
    for rec in reader.records().flatten() {
        let fields: Vec<String> = rec.iter().map(String::from).collect();
        let key = |i: Option<usize>| i.and_then(|i| fields.get(i)?.parse::<i64>().ok());
        let cell = (key(ci), key(bi), key(gi));
        let mut row = escaped(&fields);
        let fleet = match cell {
            (Some(c), Some(b), Some(g)) => v.stats.iter().find(|s| s.cell == (c, b, g)),
            _ => None,
        };
        match fleet {
            Some(st) => {
                let k = delay.and_then(|i| fields.get(i)?.parse::<f64>().ok());
                let inside = k.map(|k| k >= st.tol_lo_ps && k <= st.tol_hi_ps);
                row.push(cell_link(st.cell));
                row.push(num(st.tol_lo_ps, 1));
                row.push(num(st.tol_hi_ps, 1));
                row.push(match inside {
                    Some(true) => pill(true, "inside", ""),
                    Some(false) => "<span class=\"pill flag\">outside</span>".into(),
                    None => String::new(),
                });
            }
            None => row.extend([String::new(), String::new(), String::new(), String::new()]),
        }
        rows.push(row);
    }
    let csv_cols = header.len();
    let source = at("source");
    header.extend(
        [
            "fleet cell",
            "fleet tol_lo_ps",
            "fleet tol_hi_ps",
            "K in interval",
        ]
        .map(String::from),
    );
    let names: Vec<&str> = header.iter().map(String::as_str).collect();
    let mut text_cols: Vec<usize> = source.into_iter().collect();
    text_cols.extend([csv_cols, csv_cols + 3]);
    format!(
        "<section><h2>Table</h2><p class=\"note\">Run <code>{}</code> on station {}, ended {}: \
         the table <code>taucal store table {}</code> gives, then the fleet's 95 %/95 % \
         tolerance interval of each cell.</p>{}</section>",
        escape(&rec.run.run_id),
        escape(&rec.run.station),
        time_cell(
            rec.run
                .finished_utc
                .as_deref()
                .unwrap_or(&rec.run.started_utc)
        ),
        escape(&rec.run.unit_serial),
        table("caltable", &names, &text_cols, &rows)
    )
}

/// The run's verification: median range error per level, with one calibration and with the
/// table.
fn verification(rec: &RunRecord) -> String {
    if rec.verify.is_empty() {
        return "<section><h2>Verification</h2><p class=\"note\">This run verified nothing.\
                </p></section>"
            .into();
    }
    // The columns of the run's verify.csv, as that file names them.
    let header: Vec<&str> = VERIFY_HEADER.split(',').collect();
    let rows: Vec<Vec<String>> = rec
        .verify
        .iter()
        .map(|l| {
            vec![
                l.center_mhz.to_string(),
                l.bw_mhz.to_string(),
                l.atten_db.to_string(),
                l.rx_power_dbm.to_string(),
                l.equiv_distance_m.to_string(),
                l.n.to_string(),
                l.range_error_single_m.to_string(),
                l.range_error_table_m.to_string(),
            ]
        })
        .collect();
    format!(
        "<section><h2>Verification</h2><p class=\"note\">Median range error of fresh exchanges \
         at each level, with a single-state calibration and with the table.</p>{}</section>",
        table("verify", &header, &[], &rows)
    )
}

/// The run's acceptance limits.
fn acceptance(rec: &RunRecord) -> String {
    if rec.acceptance.is_empty() {
        return String::new();
    }
    let rows: Vec<Vec<String>> = rec
        .acceptance
        .iter()
        .map(|a| {
            vec![
                escape(&a.name),
                a.value.map_or(String::new(), short),
                short(a.limit_value),
                pill(a.passed, "met", "missed"),
            ]
        })
        .collect();
    format!(
        "<section><h2>Acceptance</h2>{}</section>",
        table(
            "acceptance",
            &["limit", "value", "limit_value", "met"],
            &[0, 3],
            &rows
        )
    )
}

/// A limit's number: whole numbers as such, others to two decimals.
fn short(v: f64) -> String {
    if v.fract() == 0.0 {
        num(v, 0)
    } else {
        num(v, 2)
    }
}

/// Every run of the unit, newest first.
fn runs(runs: &[RunRow]) -> String {
    let rows: Vec<Vec<String>> = runs
        .iter()
        .rev()
        .map(|r| {
            vec![
                time_cell(&r.started_utc),
                r.finished_utc.as_deref().map_or(String::new(), time_cell),
                escape(&r.station),
                escape(&r.recipe_name),
                escape(&r.status),
                pill(r.accepted, "yes", "no"),
                num(r.bench_time_s, 1),
                format!("<code>{}</code>", escape(&r.run_id)),
                format!("<code>{}</code>", escape(&r.dir)),
            ]
        })
        .collect();
    let header = [
        "started (UTC)",
        "ended (UTC)",
        "station",
        "recipe",
        "status",
        "accepted",
        "bench_time_s",
        "run_id",
        "directory",
    ];
    format!(
        "<section><h2>Runs</h2>{}</section>",
        table("runs", &header, &[0, 1, 2, 3, 4, 5, 7, 8], &rows)
    )
}
