//! The units list: every unit as `store units` lists it, with the station of its latest run,
//! searched by serial and filtered by station, status and the date of its latest run.

use super::markup::{escaped, table, tabs, unit_link, Tab};
use crate::store::{RunRow, UnitSummary};
use crate::web::escape;
use std::collections::BTreeMap;

/// What the list is narrowed to (the query string; an empty field narrows nothing).
#[derive(Debug, Clone, Default, PartialEq, serde::Deserialize)]
#[serde(default)]
pub struct UnitFilter {
    /// Part of the serial, any case.
    pub q: String,
    /// The station of the latest run.
    pub station: String,
    /// `accepted`, `not-accepted`, or the latest run's status.
    pub status: String,
    /// Latest run on or after this day (YYYY-MM-DD, UTC).
    pub from: String,
    /// Latest run on or before this day (YYYY-MM-DD, UTC).
    pub to: String,
}

/// The statuses the filter offers: (value, label).
const STATUSES: [(&str, &str); 7] = [
    ("", "any"),
    ("accepted", "has an accepted run"),
    ("not-accepted", "no accepted run"),
    ("completed", "last run completed"),
    ("stopped", "last run stopped"),
    ("failed", "last run failed"),
    ("running", "last run running"),
];

/// Whether `text` is a calendar day written YYYY-MM-DD.
fn is_day(text: &str) -> bool {
    let parts: Vec<&str> = text.split('-').collect();
    let [y, m, d] = parts.as_slice() else {
        return false;
    };
    if y.len() != 4 || m.len() != 2 || d.len() != 2 {
        return false;
    }
    match (y.parse::<i32>(), m.parse::<u8>(), d.parse::<u8>()) {
        (Ok(y), Ok(m), Ok(d)) => time::Month::try_from(m)
            .ok()
            .and_then(|m| time::Date::from_calendar_date(y, m, d).ok())
            .is_some(),
        _ => false,
    }
}

impl UnitFilter {
    /// What is wrong with the filter, in words; nothing is filtered by a field that is wrong.
    pub fn problems(&self) -> Vec<String> {
        let mut out = Vec::new();
        for (name, v) in [("from", &self.from), ("to", &self.to)] {
            if !v.is_empty() && !is_day(v) {
                out.push(format!(
                    "`{v}` ({name}) is not a day: write it as YYYY-MM-DD"
                ));
            }
        }
        if !STATUSES.iter().any(|(s, _)| *s == self.status) {
            out.push(format!("`{}` is not a status this list knows", self.status));
        }
        out
    }

    /// Whether unit `u`, whose latest run was on `station`, is kept.
    pub fn keeps(&self, u: &UnitSummary, station: &str) -> bool {
        let q = self.q.trim().to_lowercase();
        if !q.is_empty() && !u.serial.to_lowercase().contains(&q) {
            return false;
        }
        if !self.station.is_empty() && self.station != station {
            return false;
        }
        let status_ok = match self.status.as_str() {
            "accepted" => u.accepted,
            "not-accepted" => !u.accepted,
            s if STATUSES.iter().skip(3).any(|(v, _)| *v == s) => u.last_status == s,
            _ => true,
        };
        // RFC 3339 times in UTC sort as text, so a day compares with the time's first ten.
        let day = u.last_run_utc.get(..10).unwrap_or("");
        let from_ok = !is_day(&self.from) || day >= self.from.as_str();
        let to_ok = !is_day(&self.to) || day <= self.to.as_str();
        status_ok && from_ok && to_ok
    }
}

/// Each unit's latest run's station: the run latest by start, then by id (the order
/// `store units` takes a unit's last status from).
pub fn latest_stations(runs: &[RunRow]) -> BTreeMap<&str, &str> {
    let mut latest: BTreeMap<&str, &RunRow> = BTreeMap::new();
    for r in runs {
        let e = latest.entry(r.unit_serial.as_str()).or_insert(r);
        if (r.started_utc.as_str(), r.run_id.as_str()) > (e.started_utc.as_str(), e.run_id.as_str())
        {
            *e = r;
        }
    }
    latest
        .into_iter()
        .map(|(s, r)| (s, r.station.as_str()))
        .collect()
}

/// A time as stored, shown to the second with its full value kept in the markup.
pub fn time_cell(utc: &str) -> String {
    let shown: String = utc.chars().take(19).collect::<String>().replace('T', " ");
    format!(
        "<time datetime=\"{}\">{}</time>",
        escape(utc),
        escape(&shown)
    )
}

/// The page's body.
pub fn body(units: &[UnitSummary], runs: &[RunRow], filter: &UnitFilter, store: &str) -> String {
    let stations = latest_stations(runs);
    let mut names: Vec<&str> = stations.values().copied().collect();
    names.sort_unstable();
    names.dedup();
    names.retain(|n| !n.is_empty());
    let mut s = tabs(Tab::Units);
    s += "<section><h2>Find units</h2><form class=\"filters\" method=\"get\" action=\"/\">";
    s += &format!(
        "<label>Serial contains<input type=\"search\" name=\"q\" value=\"{}\"></label>",
        escape(&filter.q)
    );
    s += "<label>Station of the last run<select name=\"station\"><option value=\"\">any</option>";
    for n in &names {
        let sel = if *n == filter.station {
            " selected"
        } else {
            ""
        };
        s += &format!("<option{sel}>{}</option>", escape(n));
    }
    s += "</select></label><label>Status<select name=\"status\">";
    for (v, label) in STATUSES {
        let sel = if v == filter.status { " selected" } else { "" };
        s += &format!("<option value=\"{v}\"{sel}>{label}</option>");
    }
    s += &format!(
        "</select></label><label>Last run from<input type=\"date\" name=\"from\" value=\"{}\">\
         </label><label>Last run to<input type=\"date\" name=\"to\" value=\"{}\"></label>\
         <button type=\"submit\">Show</button></form>",
        escape(&filter.from),
        escape(&filter.to)
    );
    for p in filter.problems() {
        s += &format!("<p class=\"note\">Ignored: {}</p>", escape(&p));
    }
    s += "</section>";
    let yes_no = |b: bool| if b { "yes" } else { "no" };
    let rows: Vec<Vec<String>> = units
        .iter()
        .filter_map(|u| {
            let station = stations.get(u.serial.as_str()).copied().unwrap_or("");
            filter.keeps(u, station).then(|| {
                let mut r = vec![unit_link(&u.serial)];
                r.extend(escaped(&[
                    u.model.clone(),
                    station.to_string(),
                    u.runs.to_string(),
                ]));
                r.push(time_cell(&u.last_run_utc));
                r.push(escape(&u.last_status));
                r.push(yes_no(u.accepted).to_string());
                r
            })
        })
        .collect();
    s += &format!(
        "<section><h2>Units</h2><p class=\"count\" id=\"count\">{} of {} units in {}</p>",
        rows.len(),
        units.len(),
        escape(store)
    );
    let header = [
        "serial",
        "model",
        "last station",
        "runs",
        "last run (UTC)",
        "last status",
        "accepted",
    ];
    s += &table("units", &header, &[0, 1, 2, 4, 5, 6], &rows);
    s + "</section>"
}

#[cfg(test)]
mod tests {
    use super::*;

    fn unit(serial: &str, day: &str, status: &str, accepted: bool) -> UnitSummary {
        UnitSummary {
            serial: serial.into(),
            model: "m".into(),
            runs: 1,
            last_run_utc: format!("{day}T10:00:00Z"),
            last_status: status.into(),
            accepted,
        }
    }

    #[test]
    fn the_filter_narrows_by_serial_station_status_and_day() {
        let u = unit("DW-T3-F5-00007", "2026-03-04", "completed", true);
        let keep = |f: UnitFilter, station: &str| f.keeps(&u, station);
        assert!(keep(UnitFilter::default(), "a"));
        let f = |q: &str| UnitFilter {
            q: q.into(),
            ..UnitFilter::default()
        };
        assert!(keep(f("f5-0000"), "a"));
        assert!(!keep(f("F6"), "a"));
        let st = UnitFilter {
            station: "b".into(),
            ..UnitFilter::default()
        };
        assert!(!keep(st.clone(), "a") && keep(st, "b"));
        let status = |s: &str| UnitFilter {
            status: s.into(),
            ..UnitFilter::default()
        };
        assert!(keep(status("accepted"), "a"));
        assert!(!keep(status("not-accepted"), "a"));
        assert!(!keep(status("failed"), "a"));
        let days = |from: &str, to: &str| UnitFilter {
            from: from.into(),
            to: to.into(),
            ..UnitFilter::default()
        };
        assert!(keep(days("2026-03-04", "2026-03-04"), "a"));
        assert!(!keep(days("2026-03-05", ""), "a"));
        assert!(!keep(days("", "2026-03-03"), "a"));
        // A day that is not one filters nothing and is reported.
        let bad = days("2026-02-30", "");
        assert!(keep(bad.clone(), "a"));
        assert_eq!(bad.problems().len(), 1);
    }
}
