//! A cell's population: the units' K in a histogram with the fleet's tolerance interval, each
//! station's units compared with 95 % intervals on their mean, and the units outside the
//! interval.

use super::markup::{escaped, figure, table, tabs, unit_link, Tab};
use super::svg_histogram::histogram;
use super::svg_intervals::{intervals, Estimate, Marker};
use crate::fleet::cells::{CellStats, TOL_CONFIDENCE, TOL_PROPORTION};
use crate::fleet::shown::{num, stats_row, STATS_HEADER};
use crate::fleet::station_cells::StationCell;
use crate::store::FleetCell;

/// The page's body: `stats` is the cell's line of `fleet stats`, `members` the units' cells in
/// it, `stations` its share per station, `flagged` the stations `fleet stations` flags.
pub fn body(
    stats: &CellStats,
    members: &[&FleetCell],
    stations: &[StationCell],
    flagged: &[&str],
) -> String {
    let (c, b, g) = stats.cell;
    let mut s = tabs(Tab::None);
    s += &format!(
        "<section><h2>{c} MHz, {b} MHz wide, gain state {g}</h2>{}</section>",
        table("stats", &STATS_HEADER, &[], &[escaped(&stats_row(stats))])
    );
    let values: Vec<f64> = members.iter().map(|m| m.delay_ps).collect();
    let caption = format!(
        "K of {} units in {c}/{b}/{g}, with the tolerance interval {} to {} ps covering {:.0} % \
         of units at {:.0} % confidence, and the mean {} ps",
        stats.units,
        num(stats.tol_lo_ps, 1),
        num(stats.tol_hi_ps, 1),
        TOL_PROPORTION * 100.0,
        TOL_CONFIDENCE * 100.0,
        num(stats.mean_ps, 1)
    );
    s += &format!(
        "<section><h2>Population</h2>{}</section>",
        figure(
            &histogram(
                &values,
                (stats.tol_lo_ps, stats.tol_hi_ps),
                stats.mean_ps,
                &caption
            ),
            &caption
        )
    );
    let estimates: Vec<Estimate> = stations
        .iter()
        .map(|st| Estimate {
            label: st.station.clone(),
            centre: st.stats.mean_ps,
            half_width: st.mean_ci95_ps,
            flagged: flagged.contains(&st.station.as_str()),
        })
        .collect();
    let caption = "Each station's mean K in this cell with its 95 % interval (Student's t), \
                   against the fleet's mean and tolerance interval; brick: a station `fleet \
                   stations` flags (over all cells)";
    let plot = intervals(
        &estimates,
        &[Marker {
            value: stats.mean_ps,
            name: "fleet mean".into(),
            dashed: false,
        }],
        Some((stats.tol_lo_ps, stats.tol_hi_ps, "fleet tolerance interval")),
        "mean K, ps",
        caption,
    );
    let rows: Vec<Vec<String>> = stations
        .iter()
        .map(|st| {
            let sm = &st.stats;
            vec![
                st.station.clone(),
                sm.units.to_string(),
                num(sm.mean_ps, 1),
                num(st.mean_ci95_ps, 1),
                num(sm.sd_ps, 1),
                num(sm.tol_lo_ps, 1),
                num(sm.tol_hi_ps, 1),
            ]
        })
        .map(|r| escaped(&r))
        .collect();
    let header = [
        "station",
        "units",
        "mean_ps",
        "mean_ci95_ps",
        "sd_ps",
        "tol_lo_ps",
        "tol_hi_ps",
    ];
    s += &format!(
        "<section><h2>Stations</h2>{}{}</section>",
        figure(&plot, caption),
        table("by-station", &header, &[0], &rows)
    );
    let outside: Vec<Vec<String>> = members
        .iter()
        .filter(|m| m.delay_ps < stats.tol_lo_ps || m.delay_ps > stats.tol_hi_ps)
        .map(|m| {
            vec![
                unit_link(&m.serial),
                crate::web::escape(&m.station),
                num(m.delay_ps, 1),
                num(m.ci95_ps, 1),
            ]
        })
        .collect();
    s += "<section><h2>Units outside the interval</h2>";
    if outside.is_empty() {
        s += "<p class=\"note\">None.</p>";
    } else {
        s += &table(
            "outside",
            &["serial", "station", "delay_ps", "ci95_ps"],
            &[0, 1],
            &outside,
        );
    }
    s + "</section>"
}
