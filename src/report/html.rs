//! The page: verdict, summary table, plots and provenance, with its own styles inline.
//!
//! Every string that comes from the run (names, paths, identities, errors, script results) goes
//! through [`escape`]; the plots' SVG comes from plotters, which escapes its own text. The page
//! has no script and refers to nothing outside itself.

use super::{drift_plot, gainmap_plot, k_plot, range_plot, spread_plot};
use super::{ReportData, ReportError};
use crate::data::RunStatus;
use crate::fit::rtt::SPEED_OF_LIGHT_M_PER_S;
use std::fmt::Write;

/// Escapes text for HTML element content and quoted attribute values: the five characters with
/// meaning in markup become character references.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// An RFC 3339 UTC time as the page shows it: to the second, `2026-12-03 12:00:05 UTC`; text
/// of another form is shown as it is.
pub fn to_the_second(rfc3339: &str) -> String {
    let t = time::OffsetDateTime::parse(rfc3339, &time::format_description::well_known::Rfc3339);
    match t {
        Ok(t) => format!("{} UTC", utc_seconds(t)),
        Err(_) => rfc3339.to_string(),
    }
}

/// The time `t` in UTC to the second, `YYYY-MM-DD HH:MM:SS`.
pub fn utc_seconds(t: time::OffsetDateTime) -> String {
    let t = t.to_offset(time::UtcOffset::UTC);
    format!(
        "{:04}-{:02}-{:02} {:02}:{:02}:{:02}",
        t.year(),
        u8::from(t.month()),
        t.day(),
        t.hour(),
        t.minute(),
        t.second()
    )
}

/// The report's stylesheet; served pages (`crate::web`) share it so they look like the report.
pub const STYLE: &str = r#"
:root { --ink:#272d36; --muted:#5d6672; --paper:#f6f5f1; --card:#ffffff; --rule:#dcdfe4;
  --accent:#1f5f8b; --good:#2e7a4f; --bad:#b83b3b; --halt:#9a6400; }
* { box-sizing: border-box; }
body { margin:0; background:var(--paper); color:var(--ink);
  font:15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans", sans-serif; }
header.masthead { background:var(--ink); color:#fff; padding:22px 0 18px; }
header.masthead .inner { max-width:1040px; margin:0 auto; padding:0 24px; }
header .kicker { text-transform:uppercase; letter-spacing:.12em; font-size:12px; opacity:.75; }
header h1 { margin:4px 0 2px; font-size:26px; font-weight:600; }
header .sub { margin:0; opacity:.85; }
main { max-width:1040px; margin:0 auto; padding:20px 24px 40px; }
main p, main li, header h1, header .sub { overflow-wrap:break-word; }
section { background:var(--card); border:1px solid var(--rule); border-radius:6px;
  padding:16px 22px; margin:18px 0; }
h2 { font-size:18px; margin:0 0 10px; color:var(--accent); }
h3 { font-size:15px; margin:0 0 6px; }
.verdict { border-left:8px solid var(--muted); }
.verdict.accepted { border-left-color:var(--good); }
.verdict.rejected { border-left-color:var(--bad); }
.verdict.halted { border-left-color:var(--halt); }
.verdict .headline { font-size:20px; font-weight:600; margin:0 0 8px; }
.checks { list-style:none; padding:0; margin:0; }
.checks li { padding:3px 0; }
.mark { display:inline-block; min-width:64px; font-weight:600; }
.met { color:var(--good); } .missed { color:var(--bad); }
.scroll { overflow-x:auto; -webkit-overflow-scrolling:touch; }
table { border-collapse:collapse; width:100%; font-variant-numeric:tabular-nums; }
th, td { text-align:right; padding:5px 10px; border-bottom:1px solid var(--rule); white-space:nowrap; }
th { font-weight:600; color:var(--muted); font-size:13px; }
td.text, th.text { text-align:left; }
.swatch { display:inline-block; width:10px; height:10px; border-radius:2px; margin-right:6px; }
figure { margin:18px 0 6px; }
figure .plot { overflow-x:auto; border:1px solid var(--rule); border-radius:4px; }
figure svg { width:100%; min-width:640px; height:auto; display:block; }
figcaption { color:var(--muted); font-size:13px; margin-top:6px; }
.empty p { color:var(--muted); font-style:italic; }
dl { display:grid; grid-template-columns:minmax(120px, 210px) minmax(0, 1fr); gap:4px 16px; margin:0; }
dt { color:var(--muted); } dd { margin:0; overflow-wrap:anywhere; }
code { font-family:ui-monospace, "SFMono-Regular", Menlo, Consolas, monospace; font-size:13px; }
footer { text-align:center; color:var(--muted); font-size:12px; padding:0 24px 28px; }
@media (max-width:640px) {
  header.masthead .inner, main { padding-left:12px; padding-right:12px; }
  section { padding:14px 14px; }
  header h1 { font-size:22px; }
  dl { grid-template-columns:minmax(0, 1fr); gap:0; }
  dt { margin-top:8px; font-size:13px; }
}
"#;

/// Range (mm) per picosecond of RTT: c/2.
const MM_PER_PS_RTT: f64 = SPEED_OF_LIGHT_M_PER_S / 2.0 * 1e-9;

/// The whole page.
pub fn render(data: &ReportData) -> Result<String, ReportError> {
    let m = &data.manifest;
    let mut page = String::new();
    let title = format!("{} — taucal run report", m.recipe.name);
    let _ = write!(
        page,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>{}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n\
         <header class=\"masthead\"><div class=\"inner\"><div class=\"kicker\">taucal run \
         report</div><h1>{}</h1><p class=\"sub\">{} · started {} · {}</p></div></header>\n\
         <main>\n",
        escape(&title),
        escape(&m.recipe.name),
        escape(&m.bench.name),
        escape(&to_the_second(&m.started_utc)),
        status_word(m.status),
    );
    page.push_str(&body(data)?);
    let _ = write!(
        page,
        "</main>\n<footer>Written by taucal {} from the files of this run directory; \
         <code>taucal report DIR</code> writes it again.</footer>\n</body>\n</html>\n",
        escape(&m.taucal_version)
    );
    Ok(page)
}

/// The report's sections (what `<main>` holds): verdict, table, budget, plots, provenance.
pub fn body(data: &ReportData) -> Result<String, ReportError> {
    let mut page = String::new();
    verdict(&mut page, data);
    summary(&mut page, data, Table::Final);
    super::budget_table::section(
        &mut page,
        &data.budget,
        &data.table,
        data.manifest.reference_certificate.as_ref(),
    );
    plots(&mut page, data, Table::Final)?;
    provenance(&mut page, data);
    Ok(page)
}

/// The sections of a run still under way: the table so far, the plots and the provenance
/// (no verdict and no budget before the run has ended and written them).
pub fn live_body(data: &ReportData) -> Result<String, ReportError> {
    let mut page = String::new();
    summary(&mut page, data, Table::SoFar);
    plots(&mut page, data, Table::SoFar)?;
    provenance(&mut page, data);
    Ok(page)
}

/// Whether the table is the run's written one or fitted from the exchanges recorded so far.
#[derive(Clone, Copy, PartialEq)]
enum Table {
    Final,
    SoFar,
}

fn status_word(s: RunStatus) -> &'static str {
    match s {
        RunStatus::Running => "running (or ended without a word)",
        RunStatus::Completed => "completed",
        RunStatus::Stopped => "stopped",
        RunStatus::Failed => "failed",
    }
}

fn verdict(page: &mut String, data: &ReportData) {
    let m = &data.manifest;
    let missed = m.acceptance.iter().filter(|c| !c.passed).count();
    let (class, headline) = match m.status {
        RunStatus::Completed if missed == 0 && m.acceptance.is_empty() => (
            "accepted",
            "Completed; the recipe sets no acceptance limits".to_string(),
        ),
        RunStatus::Completed if missed == 0 => (
            "accepted",
            format!("Accepted: all {} acceptance limits met", m.acceptance.len()),
        ),
        RunStatus::Completed => (
            "rejected",
            format!(
                "Not accepted: {missed} of {} acceptance limits missed",
                m.acceptance.len()
            ),
        ),
        RunStatus::Running => (
            "halted",
            "Incomplete: the manifest still says running".to_string(),
        ),
        RunStatus::Stopped | RunStatus::Failed => (
            "halted",
            "Stopped before the end: the data recorded so far are kept".to_string(),
        ),
    };
    let _ = write!(
        page,
        "<section id=\"verdict\" class=\"verdict {class}\">\n<h2>Verdict</h2>\n\
         <p class=\"headline\">{}</p>\n",
        escape(&headline)
    );
    if let Some(e) = &m.error {
        let _ = writeln!(page, "<p>Why: <code>{}</code></p>", escape(e));
    }
    if !m.acceptance.is_empty() {
        page.push_str("<ul class=\"checks\">\n");
        for c in &m.acceptance {
            let (mark, class, op) = match (c.passed, c.name.starts_with("min")) {
                (true, false) => ("met", "met", "≤"),
                (true, true) => ("met", "met", "≥"),
                (false, false) => ("missed", "missed", "≤"),
                (false, true) => ("missed", "missed", "≥"),
            };
            let _ = writeln!(
                page,
                "<li><span class=\"mark {class}\">{mark}</span><code>{}</code>: {} {op} {}</li>",
                escape(&c.name),
                number(c.value),
                number(c.limit)
            );
        }
        page.push_str("</ul>\n");
    }
    let worst = |f: fn(&super::VerifyPoint) -> f64| {
        data.verify.iter().map(|r| f(r).abs()).fold(0.0, f64::max)
    };
    if !data.verify.is_empty() {
        let _ = writeln!(
            page,
            "<p>Verification over {} levels: worst median range error {:.3} m with the per-gain \
             table, {:.3} m with a single-state calibration.</p>",
            data.verify.len(),
            worst(|r| r.range_error_table_m),
            worst(|r| r.range_error_single_m)
        );
    }
    page.push_str("</section>\n");
}

/// A value as a limit is read: whole numbers plain, others to four significant digits.
fn number(v: f64) -> String {
    if !v.is_finite() || v.fract() == 0.0 {
        return v.to_string();
    }
    let decimals = (3 - v.abs().log10().floor() as i32).clamp(0, 9) as usize;
    format!("{v:.decimals$}")
}

fn summary(page: &mut String, data: &ReportData, kind: Table) {
    let m = &data.manifest;
    page.push_str(match kind {
        Table::Final => "<section id=\"summary\">\n<h2>Calibration table</h2>\n",
        Table::SoFar => {
            "<section id=\"summary\">\n<h2>Calibration table so far</h2>\n<p>Fitted from the \
             exchanges recorded until now, measured cells only; the run's own fit at the end \
             may add modelled rows.</p>\n"
        }
    });
    if data.table.is_empty() {
        page.push_str(match kind {
            Table::Final => {
                "<p class=\"empty\">No table: the run wrote no <code>caltable.csv</code>.</p>\n"
            }
            Table::SoFar => "<p class=\"empty\">No cell has two usable exchanges yet.</p>\n",
        });
    } else {
        page.push_str(
            "<div class=\"scroll\"><table>\n<thead><tr><th class=\"text\">channel</th><th>gain state</th>\
             <th>K (ps)</th><th>± 95 % (ps)</th><th>± 95 % range (mm)</th><th>exchanges used</th>\
             <th>rejected</th><th class=\"text\">source</th></tr></thead>\n<tbody>\n",
        );
        for r in &data.table {
            let colour = super::svg::state_colour(r.gain_index);
            let _ = writeln!(
                page,
                "<tr><td class=\"text\">{} MHz / {} MHz</td><td><span class=\"swatch\" \
                 style=\"background:#{:02x}{:02x}{:02x}\"></span>{}</td><td>{:.1}</td><td>{:.1}</td>\
                 <td>{:.1}</td><td>{}</td><td>{}</td><td class=\"text\">{}</td></tr>",
                r.center_mhz,
                r.bw_mhz,
                colour.0,
                colour.1,
                colour.2,
                r.gain_index,
                r.delay_ps,
                r.ci95_ps,
                r.ci95_ps * MM_PER_PS_RTT,
                r.n_used,
                r.n_rejected,
                r.source.as_str()
            );
        }
        page.push_str("</tbody>\n</table></div>\n");
    }
    if kind == Table::SoFar {
        // The counts and the files are the live strip's and the end's to tell.
        page.push_str("</section>\n");
        return;
    }
    let c = &m.counts;
    let _ = writeln!(
        page,
        "<p>{} exchanges ({} ok) in {} bursts at {} points; bench time {:.1} s, wall time {:.2} s.</p>",
        c.exchanges, c.exchanges_ok, c.bursts, c.points, m.bench_time_s, m.wall_time_s
    );
    if !data.absent.is_empty() {
        let names: Vec<String> = data
            .absent
            .iter()
            .map(|n| format!("<code>{}</code>", escape(n)))
            .collect();
        let _ = writeln!(page, "<p>Not in this run: {}.</p>", names.join(", "));
    }
    page.push_str("</section>\n");
}

/// The AGC hysteresis fitted per switch, as gainmap.csv states it: a number only where resolved.
fn hysteresis_sentence(rows: &[super::GainMapRow]) -> String {
    let parts: Vec<String> = rows
        .iter()
        .filter_map(|r| {
            let next = r.next_gain_index?;
            Some(match (r.hysteresis_db, r.hysteresis_ci95_db) {
                (Some(h), Some(ci)) => format!("{} → {next}: {h:.2} ± {ci:.2} dB", r.gain_index),
                _ => format!("{} → {next}: not resolved", r.gain_index),
            })
        })
        .collect();
    if rows.iter().any(|r| r.states.as_deref() == Some("inferred")) {
        return " The DUT reported no gain index: the states shown and these plateaus were \
                inferred from where K steps against receive level (exchanges near a switch have \
                none), and the table's rows are marked inferred."
            .into();
    }
    if parts.is_empty() {
        return String::new();
    }
    format!(
        " AGC hysteresis fitted from the switching (95 %; \"not resolved\" where the interval \
         reaches zero): {}.",
        parts.join("; ")
    )
}

fn figure(
    page: &mut String,
    id: &str,
    title: &str,
    svg: Option<String>,
    caption: &str,
    none: &str,
) {
    match svg {
        Some(svg) => {
            let _ = write!(
                page,
                "<figure id=\"{id}\">\n<h3>{title}</h3>\n<div class=\"plot\">{svg}</div>\n<figcaption>{caption}</figcaption>\n</figure>\n"
            );
        }
        None => {
            let _ = write!(
                page,
                "<figure id=\"{id}\" class=\"empty\">\n<h3>{title}</h3>\n<p>{none}</p>\n</figure>\n"
            );
        }
    }
}

fn plots(page: &mut String, data: &ReportData, table: Table) -> Result<(), ReportError> {
    page.push_str("<section id=\"plots\">\n<h2>Plots</h2>\n");
    // A run under way reaches its verification stages last: none measured is not none planned.
    let no_verification = match (data.manifest.fit.verify_stages.is_empty(), table) {
        (true, _) => "The recipe has no verification stage.",
        (false, Table::SoFar) => "No verification level measured yet.",
        (false, Table::Final) => "No verification level was measured in this run.",
    };
    figure(
        page,
        "plot-k",
        "K per gain state",
        k_plot::svg(data)?,
        "The DUT's K (TX + RX group delay) per gain state with its 95 % interval (burst-clustered \
         Student t), one colour per channel; hollow markers are modelled rows, half-tone ones rows \
         whose gain states the DUT did not report and were inferred from K's plateaus, hollow \
         half-tone ones rows predicted from the population ([fit] predict; their interval is a \
         95 % prediction interval).",
        "No calibration table in this run.",
    );
    figure(
        page,
        "plot-range",
        "Range error against receive level",
        range_plot::svg(data)?,
        "Median range error of fresh exchanges at each verified level, corrected with one K (the \
         gain state at the single-state level) and with the per-gain table. verify.csv gives each \
         level's equivalent free-space distance (ITU-R P.525).",
        no_verification,
    );
    figure(
        page,
        "plot-spread",
        "Spread of each cell",
        spread_plot::svg(data)?,
        "Every exchange's K per table cell: the box spans the quartiles, the bar is the median, \
         whiskers reach 1.5 interquartile ranges, crosses are exchanges beyond (late detections \
         among them) and triangles those beyond the axis, pinned to its edge. Verification exchanges are left out, as in the fit.",
        "No exchange could be de-embedded.",
    );
    let gainmap_caption = format!(
        "The gain state each exchange reported against the DUT's receive level over the whole run \
         (dot size: share of that level's exchanges); shaded bands are the plateaus in gainmap.csv.{}",
        hysteresis_sentence(&data.gainmap)
    );
    figure(
        page,
        "plot-gainmap",
        "Gain map",
        gainmap_plot::svg(data)?,
        &gainmap_caption,
        "No exchange reported a gain state.",
    );
    figure(
        page,
        "plot-drift",
        "Exchanges over bench time",
        drift_plot::drift_svg(data)?,
        &format!(
            "Each burst's median K per gain state against bench time, {}; hollow: verification \
             bursts.",
            data.bench_time.source()
        ),
        "No burst carried enough exchanges to estimate its clock rate.",
    );
    figure(
        page,
        "plot-temperature",
        "Temperature",
        drift_plot::temperature_svg(data)?,
        "Temperature reported with each burst against bench time.",
        "The bench reported no temperature in this run.",
    );
    page.push_str("</section>\n");
    Ok(())
}

fn provenance(page: &mut String, data: &ReportData) {
    let m = &data.manifest;
    let mut rows: Vec<(String, String)> = vec![
        ("recipe".into(), m.recipe.name.clone()),
        ("recipe file".into(), m.recipe.path.clone()),
        ("recipe SHA-256".into(), m.recipe.sha256.clone()),
        (
            "overrides".into(),
            if m.recipe.overrides.is_empty() {
                "none".into()
            } else {
                m.recipe.overrides.join(" ")
            },
        ),
        ("bench".into(), m.bench.name.clone()),
        ("bench file".into(), m.bench.path.clone()),
        ("bench SHA-256".into(), m.bench.sha256.clone()),
        (
            "instruments".into(),
            if m.bench.simulated {
                "simulated".into()
            } else {
                "real".into()
            },
        ),
        (
            "seed".into(),
            m.seed.map_or("— (real bench)".into(), |s| s.to_string()),
        ),
        ("taucal version".into(), m.taucal_version.clone()),
        ("started".into(), to_the_second(&m.started_utc)),
        (
            "finished".into(),
            m.finished_utc
                .as_deref()
                .map_or_else(|| "—".into(), to_the_second),
        ),
        ("bench time".into(), format!("{:.3} s", m.bench_time_s)),
        ("wall time".into(), format!("{:.3} s", m.wall_time_s)),
        (
            "outlier rejection".into(),
            format!("{} scaled MADs", m.fit.reject_mad),
        ),
        (
            "verification stages".into(),
            if m.fit.verify_stages.is_empty() {
                "none".into()
            } else {
                m.fit.verify_stages.join(", ")
            },
        ),
    ];
    for (role, id) in &m.instruments {
        rows.push((format!("{role} identity"), id.clone()));
    }
    for s in &m.fit.single_state {
        rows.push((
            format!("single-state K, {} MHz / {} MHz", s.center_mhz, s.bw_mhz),
            format!(
                "gain state {} at {} dBm: {:.1} ps",
                s.gain_index, s.rx_dbm, s.delay_ps
            ),
        ));
    }
    for (name, value) in &m.results {
        let shown = match value {
            toml::Value::String(s) => s.clone(),
            other => other.to_string(),
        };
        rows.push((format!("script result {name}"), shown));
    }
    page.push_str("<section id=\"provenance\">\n<h2>Provenance</h2>\n<dl>\n");
    for (k, v) in rows {
        let _ = writeln!(page, "<dt>{}</dt><dd>{}</dd>", escape(&k), escape(&v));
    }
    page.push_str("</dl>\n</section>\n");
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_the_characters_markup_gives_meaning() {
        // HTML Living Standard, "Serializing HTML fragments" (escaping a string): & < > and, in
        // attribute values, "; the apostrophe is escaped too so single-quoted attributes are safe.
        assert_eq!(
            escape(r#"<script>alert("x") & 'y'</script>"#),
            "&lt;script&gt;alert(&quot;x&quot;) &amp; &#39;y&#39;&lt;/script&gt;"
        );
        assert_eq!(escape("plain µs ±"), "plain µs ±");
    }
}
