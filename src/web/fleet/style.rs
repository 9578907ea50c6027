//! The fleet pages' own look, added to the shared shell's: a row of page tabs, filters,
//! tables that scroll inside their cards on a narrow screen, and the plots' colours (a teal for
//! the population, amber for a tolerance band, plum for a centre line, brick for what is
//! flagged).

/// The stylesheet.
pub const STYLE: &str = r#"
nav.fleet-tabs { display:flex; flex-wrap:wrap; gap:6px 8px; margin:4px 0 0; }
nav.fleet-tabs a { padding:4px 14px; border-radius:15px; background:#e4e9ec; color:#1f3b4d;
  text-decoration:none; font-size:14px; }
nav.fleet-tabs a[aria-current] { background:#1f3b4d; color:#fff; }
.scroll { overflow-x:auto; -webkit-overflow-scrolling:touch; max-width:100%; }
.scroll th, .scroll td { white-space:nowrap; }
.scroll table { width:100%; }
td.text, th.text { text-align:left; }
main a { color:#1d6b70; }
.plotbox { overflow-x:auto; }
.plotbox svg { width:100%; max-width:760px; height:auto; display:block;
  margin:0 auto; border:0; }
svg .band { fill:#f0cf8a; opacity:.55; }
svg .bar { fill:#2c7377; }
svg .mean { stroke:#6f2f86; stroke-width:2; }
svg .limit { stroke:#a3441b; stroke-width:1.5; stroke-dasharray:5 4; }
svg .grid { stroke:#e6e8eb; }
svg .axis { stroke:#69727d; }
svg .tick, svg .key { font-size:13px; fill:#3f4852; font-family:system-ui, sans-serif; }
svg .label { font-size:13px; fill:#3f4852; font-weight:600; font-family:system-ui, sans-serif; }
svg .whisker { stroke:#2c7377; stroke-width:2; }
svg .dot { fill:#2c7377; }
svg .flagged .whisker { stroke:#a3441b; } svg .flagged .dot { fill:#a3441b; }
svg .flagged .tick { fill:#a3441b; font-weight:600; }
form.filters { display:grid; grid-template-columns:repeat(auto-fit, minmax(150px, 1fr));
  gap:8px 14px; align-items:end; }
form.filters label { display:flex; flex-direction:column; font-size:13px; color:#5d6672; }
form.filters input, form.filters select, form.filters button { font:inherit; padding:5px 8px;
  border:1px solid #c4cad1; border-radius:4px; background:#fff; color:#272d36; }
form.filters button { background:#1f3b4d; color:#fff; border-color:#1f3b4d; cursor:pointer; }
.count { color:#5d6672; margin:8px 0 0; }
.pill { display:inline-block; padding:0 8px; border-radius:9px; font-size:13px; }
.pill.yes { background:#dcefe3; color:#22603d; } .pill.no { background:#eceef0; color:#555e69; }
.pill.flag { background:#f6ddd3; color:#8a3314; }
dl.facts { display:grid; grid-template-columns:minmax(90px, max-content) 1fr; gap:4px 16px;
  margin:0; }
dl.facts dt { color:#5d6672; } dl.facts dd { margin:0; overflow-wrap:anywhere; }
p.note { color:#5d6672; font-size:13px; }
@media (max-width:560px) {
  /* A plot drawn 560 wide shrinks to a phone's card: its text grows to stay legible. */
  svg .tick, svg .key, svg .label { font-size:19px; }
  main { padding:12px 10px 30px; }
  section { padding:12px 12px; }
  header.masthead { padding:16px 14px; }
}
"#;
