//! The stations' page: each station's offset against the median station with its 95 %
//! interval, as `fleet stations` prints them, drawn against zero and the flagging threshold.

use super::markup::{escaped, figure, pill, table, tabs, Tab};
use super::svg_intervals::{intervals, Estimate, Marker};
use crate::fleet::shown::{station_row, STATIONS_HEADER};
use crate::fleet::stations::StationOffset;

/// The page's body, from `station_offsets` flagged beyond `threshold_ps`.
pub fn body(offsets: &[StationOffset], threshold_ps: f64) -> String {
    let mut s = tabs(Tab::Stations);
    let estimates: Vec<Estimate> = offsets
        .iter()
        .map(|o| Estimate {
            label: o.station.clone(),
            centre: o.offset_ps,
            half_width: o.ci95_ps,
            flagged: o.flagged,
        })
        .collect();
    let limit = |v: f64| Marker {
        value: v,
        name: format!("±{threshold_ps} ps threshold"),
        dashed: true,
    };
    let mut markers = vec![Marker {
        value: 0.0,
        name: "median station".into(),
        dashed: false,
    }];
    markers.push(limit(threshold_ps));
    let mut lower = limit(-threshold_ps);
    // One legend entry serves both limits.
    lower.name.clear();
    markers.push(lower);
    let caption = "Each station's offset against the median station, cell-centred, with its \
                   95 % interval; brick: flagged (the interval excludes 0 and the offset \
                   passes the threshold)";
    let plot = intervals(&estimates, &markers, None, "offset, ps", caption);
    let mut header: Vec<&str> = STATIONS_HEADER.to_vec();
    header.push("reference");
    let rows: Vec<Vec<String>> = offsets
        .iter()
        .map(|o| {
            let mut r = escaped(&station_row(o, false));
            r.push(if o.reference {
                pill(true, "median station", "")
            } else {
                String::new()
            });
            r
        })
        .collect();
    let flagged = offsets.iter().filter(|o| o.flagged).count();
    s += &format!(
        "<section><h2>Stations</h2><p class=\"note\">{flagged} of {} stations flagged beyond \
         {threshold_ps} ps. A station whose path is e ps longer than it declares shows as \
         +2e ps (the round trip).</p>{}{}</section>",
        offsets.len(),
        figure(&plot, caption),
        table("stations", &header, &[0, 4, 5], &rows)
    );
    s
}
