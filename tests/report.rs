//! The run report (`report.html`, `taucal report`), the run's logs and the command line around
//! them, through the real binary. The HTML is parsed with an HTML5 parser (scraper, built on
//! html5ever), so the checks see the document a browser sees.

use crate::support::{repo, root, skip_without, Outcome, Taucal};
use scraper::{Html, Selector};

fn select<'a>(doc: &'a Html, css: &str) -> Vec<scraper::ElementRef<'a>> {
    let sel = Selector::parse(css).expect("selector");
    doc.select(&sel).collect()
}

fn text(el: &scraper::ElementRef<'_>) -> String {
    el.text().collect()
}

/// The provenance list as (term, value) pairs.
fn provenance(doc: &Html) -> Vec<(String, String)> {
    let dts = select(doc, "#provenance dt");
    let dds = select(doc, "#provenance dd");
    dts.iter().map(text).zip(dds.iter().map(text)).collect()
}

fn value<'a>(pairs: &'a [(String, String)], key: &str) -> &'a str {
    pairs
        .iter()
        .find(|(k, _)| k == key)
        .map(|(_, v)| v.as_str())
        .unwrap_or_else(|| panic!("no `{key}` in provenance: {pairs:?}"))
}

/// A self-contained page refers to nothing outside itself: no scripts, no external elements,
/// no link other than a fragment, no CSS url().
fn assert_self_contained(html: &str, doc: &Html) {
    for tag in [
        "script", "link", "img", "iframe", "object", "embed", "image", "use",
    ] {
        assert!(select(doc, tag).is_empty(), "a <{tag}> element");
    }
    for el in select(doc, "*") {
        for (name, v) in el.value().attrs() {
            if matches!(name, "src" | "href" | "xlink:href" | "action" | "srcset") {
                assert!(v.starts_with('#'), "{name}={v}");
            }
            assert!(!name.starts_with("on"), "event handler {name}");
        }
    }
    assert!(!html.contains("url("), "a CSS url()");
    assert!(!html.contains("@import"), "a CSS import");
}

fn demo_run() -> Outcome {
    let out = Taucal::new()
        .args(["run", &repo("recipes/rx-gain-sweep.toml"), "--out", "demo"])
        .run();
    out.expect_code(0);
    out
}

#[test]
fn the_demo_report_is_self_contained_with_plots_verdict_and_provenance() {
    let out = demo_run();
    let html = out.read("demo/report.html");
    let doc = Html::parse_document(&html);
    assert_self_contained(&html, &doc);
    let svgs = select(&doc, "figure svg");
    assert!(svgs.len() >= 5, "{} plots", svgs.len());
    for id in [
        "plot-k",
        "plot-range",
        "plot-spread",
        "plot-gainmap",
        "plot-drift",
    ] {
        let fig = select(&doc, &format!("figure#{id}"));
        assert_eq!(fig.len(), 1, "{id}");
        let svg = select(&doc, &format!("figure#{id} svg"));
        assert_eq!(svg.len(), 1, "{id} has a plot");
        // Something is drawn: marks (circles, rectangles, lines) and axis text.
        let marks = select(&doc, &format!("figure#{id} svg circle, figure#{id} svg rect, figure#{id} svg polyline, figure#{id} svg line"));
        assert!(marks.len() > 5, "{id}: {} marks", marks.len());
        assert!(
            !select(&doc, &format!("figure#{id} svg text")).is_empty(),
            "{id} text"
        );
    }
    // The drift plot says which colour is which gain state, and what hollow markers are.
    let drift_text: String = select(&doc, "figure#plot-drift svg text")
        .iter()
        .map(text)
        .collect();
    for g in 0..3 {
        assert!(
            drift_text.contains(&format!("gain state {g}")),
            "{drift_text}"
        );
    }
    assert!(drift_text.contains("verification"), "{drift_text}");
    // The K plot's channel is not drawn in a gain state's colour (the table's swatches are).
    let k_svg: String = select(&doc, "figure#plot-k svg")[0].html();
    for swatch in select(&doc, "#summary .swatch") {
        let style = swatch.value().attr("style").unwrap_or_default();
        let colour = style.trim_start_matches("background:").to_uppercase();
        assert!(
            !k_svg.to_uppercase().contains(&colour),
            "{colour} in the K plot"
        );
    }
    // The demo bench reports no temperature, and the page says so instead of plotting.
    assert_eq!(select(&doc, "figure#plot-temperature.empty").len(), 1);
    // The K plot has one marker per table row, with three gain states.
    let table = out.read("demo/caltable.csv");
    assert_eq!(
        select(&doc, "#summary tbody tr").len(),
        table.lines().count() - 1
    );
    let verdict = text(&select(&doc, "#verdict")[0]);
    assert!(
        verdict.contains("Accepted: all 3 acceptance limits met"),
        "{verdict}"
    );
    assert_eq!(select(&doc, "#verdict .checks li").len(), 3);
    let m: toml::Table = toml::from_str(&out.read("demo/manifest.toml")).expect("manifest");
    let p = provenance(&doc);
    assert_eq!(value(&p, "recipe"), "rx-gain-sweep");
    assert_eq!(
        value(&p, "recipe SHA-256"),
        m["recipe"]["sha256"].as_str().unwrap()
    );
    assert_eq!(
        value(&p, "bench SHA-256"),
        m["bench"]["sha256"].as_str().unwrap()
    );
    assert_eq!(value(&p, "bench"), "saltmarsh-bench-3 (simulated)");
    assert_eq!(value(&p, "seed"), "1");
    assert_eq!(value(&p, "taucal version"), env!("CARGO_PKG_VERSION"));
    assert_eq!(
        value(&p, "dut identity"),
        m["instruments"]["dut"].as_str().unwrap()
    );
    assert_eq!(
        value(&p, "attenuator identity"),
        m["instruments"]["attenuator"].as_str().unwrap()
    );
}

#[test]
fn taucal_report_rebuilds_the_same_bytes() {
    let out = demo_run();
    let first = out.read("demo/report.html");
    std::fs::remove_file(out.path("demo/report.html")).expect("remove");
    let again = Taucal::in_dir(out.dir).args(["report", "demo"]).run();
    again.expect_code(0);
    assert_eq!(again.read("demo/report.html"), first);
    // Rebuilding matches itself; the page must also match something outside it: each summary
    // row's K against the demo bench's declared truth (recipes/benches/sim-demo.toml: K =
    // tx_delay_ps 1500 + rx_delay_ps [900, 1150, 1400]), within twice its 95 % half-width.
    let doc = Html::parse_document(&first);
    let rows = select(&doc, "#summary tbody tr");
    assert_eq!(rows.len(), 3);
    for row in rows {
        let cells: Vec<String> = row
            .select(&Selector::parse("td").expect("selector"))
            .map(|c| text(&c))
            .collect();
        let number = |s: &str| -> f64 {
            s.split_whitespace()
                .next()
                .unwrap_or("")
                .parse()
                .unwrap_or(f64::NAN)
        };
        let nums: Vec<f64> = cells.iter().map(|c| number(c)).collect();
        // Columns: channel, gain state, K, ± 95 %, …
        let gain = nums[1] as usize;
        let truth_ps = 1500.0 + [900.0, 1150.0, 1400.0][gain];
        assert!(
            (nums[2] - truth_ps).abs() <= 2.0 * nums[3],
            "{cells:?} vs {truth_ps}"
        );
    }
}

#[test]
fn every_run_string_is_escaped() {
    // A bench name and a script result full of markup; a recipe file name with & and <.
    let name = "<script>alert(\"bench\")</script> & <b>co</b>";
    let bench = std::fs::read_to_string(repo("recipes/benches/sim-demo.toml"))
        .expect("bench")
        .replace(
            "name = \"saltmarsh-bench-3 (simulated)\"",
            &format!("name = '{name}'"),
        );
    let recipe = "\
[recipe]
name = \"escape\"
[[stage]]
name = \"s\"
kind = \"sweep\"
center_mhz = 5180
bw_mhz = 80
atten_db = [30.0, 60.0]
bursts = 2
frames = 8
[[stage]]
name = \"note\"
kind = \"script\"
center_mhz = 5180
bw_mhz = 80
script = '''record(\"a<b&c\", \"x & <i>y</i> \\\" '\");'''
";
    let out = Taucal::new()
        .file("b.toml", &bench)
        .file("r&d<1>.toml", recipe)
        .args(["run", "r&d<1>.toml", "--bench", "b.toml", "--out", "e"])
        .run();
    out.expect_code(0);
    let html = out.read("e/report.html");
    let doc = Html::parse_document(&html);
    assert_self_contained(&html, &doc);
    // HTML Living Standard, 13.1.2.6 / 13.3 (serialising text): in text, & and < must be
    // character references or the parser reads markup; > and quotes are escaped as well here.
    assert!(html.contains(
        "&lt;script&gt;alert(&quot;bench&quot;)&lt;/script&gt; &amp; &lt;b&gt;co&lt;/b&gt;"
    ));
    assert!(!html.contains("<b>co</b>"));
    let p = provenance(&doc);
    assert_eq!(value(&p, "bench"), name);
    assert_eq!(value(&p, "recipe file"), "r&d<1>.toml");
    assert_eq!(value(&p, "script result a<b&c"), "x & <i>y</i> \" '");
    assert_eq!(
        text(&select(&doc, "header .sub")[0]).split(" · ").next(),
        Some(name)
    );
}

#[test]
fn a_directory_without_run_files_is_named_clearly() {
    let out = Taucal::new().args(["report", "."]).run();
    out.expect_code(2);
    assert!(
        out.stderr.contains("has no manifest.toml"),
        "{}",
        out.stderr
    );

    let demo = demo_run();
    std::fs::remove_file(demo.path("demo/exchanges.csv")).expect("remove");
    let out = Taucal::in_dir(demo.dir).args(["report", "demo"]).run();
    out.expect_code(2);
    assert!(
        out.stderr.contains("has no exchanges.csv"),
        "{}",
        out.stderr
    );
}

#[test]
fn a_changed_bench_file_is_refused_unless_given() {
    let bench = std::fs::read_to_string(repo("recipes/benches/sim-demo.toml")).expect("bench");
    let out = Taucal::new()
        .file("b.toml", &bench)
        .args([
            "run",
            &repo("recipes/factory-quick.toml"),
            "--bench",
            "b.toml",
            "--out",
            "r",
        ])
        .run();
    out.expect_code(0);
    let dir = out.dir;
    std::fs::write(dir.path().join("b.toml"), bench.replace("6100.0", "6200.0")).expect("edit");
    let out = Taucal::in_dir(dir).args(["report", "r"]).run();
    out.expect_code(2);
    assert!(
        out.stderr.contains("has changed since the run"),
        "{}",
        out.stderr
    );
    let out = Taucal::in_dir(out.dir)
        .args([
            "report",
            "r",
            "--bench",
            &repo("recipes/benches/sim-demo.toml"),
        ])
        .run();
    out.expect_code(0);
}

/// The golden snapshot: the report of a small stored run, byte for byte. After a deliberate
/// change to the report, `TAUCAL_BLESS=1 cargo test --release report::golden` rewrites it; read
/// the diff before committing it.
#[test]
fn golden_small_report() {
    let data = root().join("tests/data/report-small");
    let golden_path = data.join("report.golden.html");
    let mut t = Taucal::new();
    for f in [
        "manifest.toml",
        "exchanges.csv",
        "caltable.csv",
        "gainmap.csv",
        "verify.csv",
    ] {
        t = t.file(
            &format!("run/{f}"),
            &std::fs::read_to_string(data.join(f)).expect(f),
        );
    }
    let out = t
        .args([
            "report",
            "run",
            "--bench",
            &data.join("bench.toml").display().to_string(),
        ])
        .run();
    out.expect_code(0);
    let html = out.read("run/report.html");
    if std::env::var_os("TAUCAL_BLESS").is_some() {
        std::fs::write(&golden_path, &html).expect("bless");
    }
    let golden = std::fs::read_to_string(&golden_path).expect("golden file");
    assert!(
        html == golden,
        "report.html differs from {}",
        golden_path.display()
    );
    let doc = Html::parse_document(&html);
    assert_self_contained(&html, &doc);
    assert_eq!(select(&doc, "figure svg").len(), 5);
}

/// Renders the demo report in headless Chromium when one is installed (it is not needed for
/// the suite): the browser must load the page and lay out every plot.
#[test]
fn the_demo_report_renders_in_a_headless_browser_when_one_is_installed() {
    let Some(browser) = ["chromium", "chromium-browser", "google-chrome"]
        .into_iter()
        .find(|b| {
            std::process::Command::new(b)
                .arg("--version")
                .output()
                .is_ok_and(|o| o.status.success())
        })
    else {
        skip_without(
            "chromium",
            "the_demo_report_renders_in_a_headless_browser_when_one_is_installed",
        );
        return;
    };
    let out = demo_run();
    let page = format!("file://{}", out.path("demo/report.html").display());
    let dom = std::process::Command::new(browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--dump-dom",
            &page,
        ])
        .output()
        .expect("run the browser");
    assert!(
        dom.status.success(),
        "{}",
        String::from_utf8_lossy(&dom.stderr)
    );
    let rendered = Html::parse_document(&String::from_utf8_lossy(&dom.stdout));
    assert!(select(&rendered, "figure svg").len() >= 5);
}

#[test]
fn a_piped_run_draws_no_progress_and_logs_json_lines() {
    let out = demo_run();
    assert!(!out.stderr.contains('\u{1b}'), "escape codes on a pipe");
    assert!(!out.stderr.contains('█'), "a progress bar on a pipe");
    assert!(out.stderr.contains("stage `map` begins"), "{}", out.stderr);
    let jsonl = out.read("demo/run.jsonl");
    assert!(jsonl.lines().count() > 5);
    for line in jsonl.lines() {
        assert!(line.starts_with('{') && line.ends_with('}'), "{line}");
        assert!(
            line.contains("\"level\":") && line.contains("\"fields\":"),
            "{line}"
        );
    }
    assert!(jsonl.contains("stage `verify` begins"));

    let quiet = Taucal::new()
        .args([
            "run",
            &repo("recipes/factory-quick.toml"),
            "--out",
            "q",
            "--quiet",
        ])
        .run();
    quiet.expect_code(0);
    assert!(!quiet.stderr.contains("begins"), "{}", quiet.stderr);
    assert!(quiet.read("q/run.log").contains("stage `calibrate` begins"));
}

#[test]
fn every_command_has_examples_and_completions_cover_them() {
    for cmd in [
        &[][..],
        &["run"],
        &["check"],
        &["fit"],
        &["report"],
        &["completions"],
    ] {
        let out = Taucal::new()
            .args(cmd.iter().copied())
            .args(["--help"])
            .run();
        out.expect_code(0);
        assert!(out.stdout.contains("Examples:"), "{cmd:?}:\n{}", out.stdout);
    }
    for shell in ["bash", "zsh", "fish"] {
        let out = Taucal::new().args(["completions", shell]).run();
        out.expect_code(0);
        for word in ["report", "completions", "quiet"] {
            assert!(out.stdout.contains(word), "{shell}: {word}");
        }
    }
}
