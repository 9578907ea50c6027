//! Served pages in a real browser (headless Chromium over WebDriver, `support::browser`): they
//! load nothing from outside, fit a phone-width screen, and screenshots at both widths are kept
//! in `target/test-artefacts/`.

use crate::support::browser::{free_port, Browser, DESKTOP_PX, PHONE_PX};
use crate::support::{repo, Taucal};
use axum::routing::get;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};
use taucal::web;

/// The page shell alone, served by the shared server pieces: the harness and the shell are
/// checked before any page is built on them.
#[test]
fn the_page_shell_is_self_contained_and_fits_a_phone() {
    let test = "the_page_shell_is_self_contained_and_fits_a_phone";
    let body = "<section id=\"probe\"><h2>Shell</h2><p>A card with a long unbroken value: \
                <code>0123456789abcdef0123456789abcdef0123456789abcdef0123456789abcdef</code></p>\
                </section>";
    let page = web::page(
        "taucal",
        "Shell & probe",
        "a line under the title",
        "",
        body,
        "document.body.dataset.ran='yes';",
    );
    let router = axum::Router::new().route("/", get(move || async move { web::html(page) }));
    let listener = web::bind("127.0.0.1:0", false).expect("bind");
    let served = web::serve(listener, router, web::Shutdown::new()).expect("serve");
    for width in [DESKTOP_PX, PHONE_PX] {
        let Some(browser) = Browser::open(test, width) else {
            return;
        };
        browser.goto(&served.url());
        assert_eq!(
            browser.js_string("return document.querySelector('h1').textContent"),
            "Shell & probe"
        );
        // The inline script ran: the Content-Security-Policy lets inline scripts through.
        browser.wait_until(
            "document.body.dataset.ran === 'yes'",
            Duration::from_secs(5),
            "the page's inline script",
        );
        browser.assert_nothing_external();
        browser.assert_no_horizontal_overflow("the page shell");
        let shot = browser.screenshot(&format!("shell-{}", browser.width_px()));
        assert!(std::fs::metadata(&shot).expect("screenshot").len() > 1000);
    }
    served.stop().expect("the server stops");
}

/// The address of a server a child process starts, once it accepts connections.
fn wait_for_listener(port: u16, child: &mut std::process::Child) {
    let deadline = Instant::now() + Duration::from_secs(60);
    while std::net::TcpStream::connect(("127.0.0.1", port)).is_err() {
        if let Ok(Some(status)) = child.try_wait() {
            panic!("taucal ended ({status}) before serving its page");
        }
        assert!(Instant::now() < deadline, "nothing listens on port {port}");
        std::thread::sleep(Duration::from_millis(50));
    }
}

/// The exchanges the strip shows.
const EXCHANGES_SHOWN: &str =
    "parseInt(document.getElementById('live-exchanges').textContent) || 0";

/// A `--realtime` simulated run served with `--watch`: the page's figures change as bursts
/// land, the table so far fills in and, at the end, the page becomes the report — all in the
/// one document the browser loaded (no reload: its time origin stays the same).
#[test]
fn the_live_page_follows_a_realtime_run_without_reloading() {
    let test = "the_live_page_follows_a_realtime_run_without_reloading";
    let Some(wide) = Browser::open(test, DESKTOP_PX) else {
        return;
    };
    let Some(narrow) = Browser::open(test, PHONE_PX) else {
        return;
    };
    let work = tempfile::tempdir().expect("temporary directory");
    let port = free_port();
    let mut child = Command::new(env!("CARGO_BIN_EXE_taucal"))
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--out",
            "demo",
            "--realtime",
            "--quiet",
            "--watch",
            &format!("127.0.0.1:{port}"),
        ])
        .current_dir(work.path())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("start taucal");
    wait_for_listener(port, &mut child);
    let url = format!("http://127.0.0.1:{port}/");
    wide.goto(&url);
    let origin = wide.js("return performance.timeOrigin");
    wide.wait_until(
        &format!("{EXCHANGES_SHOWN} > 0"),
        Duration::from_secs(30),
        "a first burst",
    );
    let first = wide.js_u64(&format!("return {EXCHANGES_SHOWN}"));
    wide.wait_until(
        &format!(
            "{EXCHANGES_SHOWN} >= {} && document.querySelectorAll('#summary tbody tr').length > 0",
            first + 100
        ),
        Duration::from_secs(30),
        "more exchanges and a table row so far",
    );
    assert_eq!(
        wide.js_string("return document.getElementById('live').dataset.status"),
        "running"
    );
    assert!(wide.js_u64("return Number(document.body.dataset.updates)") > 2);
    // The demo recipe verifies last: until then its range plot waits for verification rather
    // than saying the recipe has none.
    let range = wide.js_string("return document.getElementById('plot-range').textContent");
    assert!(range.contains("measured yet"), "{range}");
    assert_eq!(
        wide.js("return performance.timeOrigin"),
        origin,
        "the page was reloaded"
    );
    wide.assert_nothing_external();
    wide.assert_no_horizontal_overflow("the live page");
    wide.screenshot("live-running-1300");

    narrow.goto(&url);
    narrow.wait_until(
        &format!("{EXCHANGES_SHOWN} > 0"),
        Duration::from_secs(30),
        "the strip",
    );
    narrow.assert_nothing_external();
    narrow.assert_no_horizontal_overflow("the live page");
    narrow.screenshot("live-running-390");

    // At the end the page is the report: its verdict, the run's own table.
    wide.wait_until(
        "document.body.dataset.ended === 'yes'",
        Duration::from_secs(120),
        "the run's end",
    );
    let status = child.wait_with_output().expect("taucal ends");
    assert_eq!(
        status.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&status.stderr)
    );
    assert_eq!(
        wide.js("return performance.timeOrigin"),
        origin,
        "the page was reloaded"
    );
    assert_eq!(
        wide.js_string("return document.getElementById('live').dataset.status"),
        "completed"
    );
    let verdict = wide.js_string("return document.getElementById('verdict').textContent");
    assert!(verdict.contains("Accepted"), "{verdict}");
    let table = std::fs::read_to_string(work.path().join("demo/caltable.csv")).expect("caltable");
    assert_eq!(
        wide.js_u64("return document.querySelectorAll('#summary tbody tr').length"),
        table.lines().count() as u64 - 1
    );
    wide.assert_no_horizontal_overflow("the ended live page");
    wide.screenshot("live-ended-1300");
}

/// The demo report served as a page (with the served pages' policy: nothing from outside) at
/// both widths. At 390 px the table scrolls inside its card, the plots' text stays legible,
/// and the provenance's values get the card's width rather than what its keys leave them.
#[test]
fn the_report_reads_on_a_phone_and_on_a_desktop() {
    let test = "the_report_reads_on_a_phone_and_on_a_desktop";
    let out = Taucal::new()
        .args(["run", &repo("recipes/rx-gain-sweep.toml"), "--out", "demo"])
        .run();
    out.expect_code(0);
    let report = out.read("demo/report.html");
    let router = axum::Router::new().route("/", get(move || async move { web::html(report) }));
    let served = web::serve(
        web::bind("127.0.0.1:0", false).expect("bind"),
        router,
        web::Shutdown::new(),
    )
    .expect("serve");
    for width in [DESKTOP_PX, PHONE_PX] {
        let Some(browser) = Browser::open(test, width) else {
            return;
        };
        browser.goto(&served.url());
        browser.assert_nothing_external();
        browser.assert_no_horizontal_overflow("the report");
        // Plot text at its size on screen: the SVG's font size times the plot's scale. 11 px
        // is about the smallest text read without zooming (common practice).
        let smallest_text_px = browser.js(
            "return Math.min(...Array.from(document.querySelectorAll('figure svg')).flatMap(svg => { \
               const scale = svg.getBoundingClientRect().width / svg.viewBox.baseVal.width; \
               return Array.from(svg.querySelectorAll('text')).map(t => \
                 parseFloat(getComputedStyle(t).fontSize) * scale); }))",
        );
        let smallest_text_px = smallest_text_px.as_f64().expect("a size");
        assert!(
            smallest_text_px >= 11.0,
            "{width} px: plot text {smallest_text_px:.1} px"
        );
        // The table scrolls inside its card; the card stays within the window.
        assert_eq!(
            browser.js_string(
                "return getComputedStyle(document.querySelector('#summary table').parentElement).overflowX"
            ),
            "auto"
        );
        let card_right = browser.js_u64(
            "return Math.ceil(document.getElementById('summary').getBoundingClientRect().right)",
        );
        assert!(
            card_right <= width as u64,
            "{width} px: the table's card ends at {card_right}"
        );
        // Each provenance value gets most of the card's width (not what a 210 px key column
        // leaves it).
        let narrowest = browser.js_u64(
            "return Math.min(...Array.from(document.querySelectorAll('#provenance dd')).map(d => d.getBoundingClientRect().width))",
        );
        let dl = browser.js_u64(
            "return document.querySelector('#provenance dl').getBoundingClientRect().width",
        );
        let share = narrowest as f64 / dl as f64;
        assert!(
            share >= 0.5,
            "{width} px: a value gets {narrowest} of {dl} px"
        );
        browser.screenshot(&format!("report-{width}"));
    }
    served.stop().expect("the server stops");
}
