//! The live page: a status strip, the report's sections so far and the log's last lines, drawn
//! whole by the server (it reads without a script) and kept current by a small inline script
//! listening to the server's events (`/events`): each event replaces what it carries, without
//! reloading the page.

use super::content::Content;
use super::progress::Progress;
use super::LogTail;
use crate::web::{escape, page};
use std::fmt::Write;

/// The strip's and the log's styles, on top of the report's.
const STYLE: &str = r#"
.live { border-left:8px solid var(--accent); }
.live[data-status=completed] { border-left-color:var(--good); }
.live[data-status=stopped] { border-left-color:var(--halt); }
.live[data-status=failed] { border-left-color:var(--bad); }
.live .state { display:inline-flex; align-items:center; gap:8px; font-weight:600; font-size:13px;
  text-transform:uppercase; letter-spacing:.1em; color:var(--accent); }
.live[data-status=completed] .state { color:var(--good); }
.live[data-status=stopped] .state { color:var(--halt); }
.live[data-status=failed] .state { color:var(--bad); }
.live .state::before { content:""; width:10px; height:10px; border-radius:50%; background:currentColor; }
.live[data-status=running] .state::before { animation:beat 1.4s ease-in-out infinite; }
@keyframes beat { 50% { opacity:.25; } }
.facts { display:grid; grid-template-columns:repeat(auto-fit, minmax(150px, 1fr)); gap:10px 20px;
  margin:12px 0 10px; }
.facts div { min-width:0; }
.facts .label { display:block; color:var(--muted); font-size:12px; text-transform:uppercase;
  letter-spacing:.06em; }
.facts .value { font-size:17px; font-weight:600; font-variant-numeric:tabular-nums;
  overflow-wrap:anywhere; }
.meter { height:8px; background:var(--rule); border-radius:4px; overflow:hidden; }
.meter i { display:block; height:100%; width:0; background:var(--accent); transition:width .4s; }
.live[data-status=completed] .meter i { background:var(--good); }
.live .foot { margin:8px 0 0; color:var(--muted); font-size:13px; }
#log pre { margin:0; max-height:320px; overflow:auto; background:var(--ink); color:#ecebe6;
  padding:10px 12px; border-radius:4px; font-size:12px; white-space:pre-wrap;
  overflow-wrap:anywhere; }
"#;

/// Keeps the page current from the server's events. Plain DOM calls, no library.
const SCRIPT: &str = r#"
(function () {
  var byId = function (id) { return document.getElementById(id); };
  var put = function (id, text) {
    var e = byId(id);
    if (e && e.textContent !== text) { e.textContent = text; }
  };
  var ended = document.body.dataset.ended === 'yes';
  function progress(p) {
    byId('live').dataset.status = p.status;
    put('live-status', p.status);
    put('live-stage', p.stage || '—');
    put('live-point', p.point || '—');
    put('live-exchanges', p.exchanges + ' (' + p.exchanges_ok + ' ok)');
    put('live-bench', p.bench_text);
    byId('live-meter').style.width = (100 * p.fraction).toFixed(1) + '%';
    put('live-updated', p.updated_utc + ' UTC');
    document.body.dataset.updates = String(Number(document.body.dataset.updates || 0) + 1);
  }
  function content(c) {
    byId('content').innerHTML = c.html;
    put('page-title', c.title);
    put('page-sub', c.sub);
    ended = c.ended;
    document.body.dataset.ended = ended ? 'yes' : 'no';
  }
  function log(l) { put('log-lines', l.lines.join('\n')); }
  if (!window.EventSource) { put('live-link', 'this browser cannot follow the run: reload for news'); return; }
  var source = new EventSource('events');
  var read = function (f) { return function (e) { f(JSON.parse(e.data)); }; };
  source.addEventListener('progress', read(progress));
  source.addEventListener('content', read(content));
  source.addEventListener('log', read(log));
  source.onopen = function () { put('live-link', 'following the run as it records'); };
  source.onerror = function () {
    if (ended) {
      source.close();
      put('live-link', 'the run has ended and its server has stopped: this page holds its report');
    } else {
      put('live-link', 'connection lost: trying again');
    }
  };
})();
"#;

/// The whole page as it stands.
pub fn render(progress: &Progress, content: &Content, log: &LogTail) -> String {
    let mut body = String::new();
    let _ = write!(
        body,
        "<section id=\"live\" class=\"live\" data-status=\"{status}\">\n\
         <span class=\"state\" id=\"live-status\">{status}</span>\n<div class=\"facts\">\n\
         <div><span class=\"label\">stage</span><span class=\"value\" id=\"live-stage\">{}</span></div>\n\
         <div><span class=\"label\">point</span><span class=\"value\" id=\"live-point\">{}</span></div>\n\
         <div><span class=\"label\">exchanges</span><span class=\"value\" id=\"live-exchanges\">{} ({} ok)</span></div>\n\
         <div><span class=\"label\">bench time</span><span class=\"value\" id=\"live-bench\">{}</span></div>\n\
         </div>\n<div class=\"meter\"><i id=\"live-meter\" style=\"width:{:.1}%\"></i></div>\n\
         <p class=\"foot\">Updated <span id=\"live-updated\">{} UTC</span> · \
         <span id=\"live-link\">read-only view of the run</span></p>\n</section>\n\
         <div id=\"content\">\n{}</div>\n\
         <section id=\"log\">\n<h2>Run log, last lines</h2>\n<pre id=\"log-lines\">{}</pre>\n</section>\n",
        or_dash(&progress.stage),
        or_dash(&progress.point),
        progress.exchanges,
        progress.exchanges_ok,
        escape(&progress.bench_text),
        100.0 * progress.fraction,
        escape(&progress.updated_utc),
        content.html,
        escape(&log.lines.join("\n")),
        status = escape(&progress.status),
    );
    let mut html = page(
        "taucal live run",
        &content.title,
        &content.sub,
        STYLE,
        &body,
        SCRIPT,
    );
    if content.ended {
        html = html.replacen("<body>", "<body data-ended=\"yes\">", 1);
    }
    html
}

fn or_dash(text: &str) -> String {
    if text.is_empty() {
        "—".into()
    } else {
        escape(text)
    }
}
