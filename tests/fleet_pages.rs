//! The fleet pages (`taucal fleet serve`) through the real binary: a server on an ephemeral
//! port over a store filled by `taucal sim fleet` on the Dunmere line bench, its pages fetched
//! over HTTP and parsed, and every number they show compared with what `fleet stats`,
//! `fleet stations`, `store units` and `store table` print as CSV — on SQLite, and on
//! PostgreSQL where `TAUCAL_TEST_POSTGRES` names a server.

use crate::store::PgDatabase;
use crate::support::{repo, Taucal};
use scraper::{Html, Selector};
use std::io::{BufRead, BufReader, Read, Write};
use std::net::TcpStream;
use std::path::Path;
use std::process::{Child, Command, Stdio};

const BENCH: &str = "recipes/benches/sim-fleet-line.toml";
const RECIPE: &str = "recipes/factory-quick.toml";

/// A store of `units` simulated units over the bench's five stations, in a fresh directory.
pub(crate) fn filled_store(units: u32, seed: u64) -> tempfile::TempDir {
    let (recipe, bench) = (repo(RECIPE), repo(BENCH));
    let out = Taucal::new()
        .args([
            "sim",
            "fleet",
            &recipe,
            "--bench",
            &bench,
            "--units",
            &units.to_string(),
            "--seed",
            &seed.to_string(),
            "--store",
            "sqlite:fleet.sqlite",
            "--out",
            "runs",
        ])
        .run();
    out.expect_code(0);
    out.dir
}

/// A running `taucal fleet serve`, stopped (SIGTERM, then waited for) when dropped.
pub(crate) struct Server {
    child: Child,
    /// `http://127.0.0.1:PORT`, no trailing slash.
    pub(crate) base: String,
}

impl Server {
    /// Serves `store` from `dir` on a free loopback port, with `extra` arguments.
    pub(crate) fn start(dir: &Path, store: &str, extra: &[&str]) -> Server {
        let mut child = Command::new(env!("CARGO_BIN_EXE_taucal"))
            .args([
                "fleet",
                "serve",
                "--store",
                store,
                "--listen",
                "127.0.0.1:0",
            ])
            .args(extra)
            .current_dir(dir)
            .stdout(Stdio::piped())
            .stderr(Stdio::inherit())
            .spawn()
            .expect("start taucal fleet serve");
        let mut line = String::new();
        BufReader::new(child.stdout.take().expect("stdout"))
            .read_line(&mut line)
            .expect("the address line");
        let base = line
            .split_whitespace()
            .find_map(|w| w.strip_prefix("http://"))
            .unwrap_or_else(|| panic!("no address in `{line}`"))
            .trim_end_matches('/')
            .to_string();
        Server {
            child,
            base: format!("http://{base}"),
        }
    }

    /// GET `path`: the status code and the body.
    pub(crate) fn get(&self, path: &str) -> (u16, String) {
        let host = self.base.trim_start_matches("http://");
        let mut s = TcpStream::connect(host).expect("connect");
        write!(
            s,
            "GET {path} HTTP/1.1\r\nHost: {host}\r\nConnection: close\r\n\r\n"
        )
        .expect("request");
        let mut raw = String::new();
        s.read_to_string(&mut raw).expect("response");
        let (head, body) = raw.split_once("\r\n\r\n").expect("a response");
        let status = head
            .split_whitespace()
            .nth(1)
            .and_then(|c| c.parse().ok())
            .expect("status");
        assert!(
            !head
                .to_ascii_lowercase()
                .contains("transfer-encoding: chunked"),
            "a page has a known length"
        );
        (status, body.to_string())
    }

    /// GET `path`, which must answer 200, parsed.
    pub(crate) fn page(&self, path: &str) -> Html {
        let (status, body) = self.get(path);
        assert_eq!(status, 200, "{path}:\n{body}");
        Html::parse_document(&body)
    }
}

impl Drop for Server {
    fn drop(&mut self) {
        let pid = nix::unistd::Pid::from_raw(self.child.id() as i32);
        let _ = nix::sys::signal::kill(pid, nix::sys::signal::Signal::SIGTERM);
        let _ = self.child.wait();
    }
}

/// The text of each cell of each body row of table `#id`.
pub(crate) fn table(page: &Html, id: &str) -> Vec<Vec<String>> {
    let rows = Selector::parse(&format!("table#{id} tbody tr")).expect("selector");
    let cells = Selector::parse("td").expect("selector");
    page.select(&rows)
        .map(|r| {
            r.select(&cells)
                .map(|c| c.text().collect::<String>().trim().to_string())
                .collect()
        })
        .collect()
}

/// `taucal ARGS` in `dir` (which must succeed): its CSV output's data rows.
pub(crate) fn csv_rows(dir: &Path, args: &[&str]) -> Vec<Vec<String>> {
    let out = Command::new(env!("CARGO_BIN_EXE_taucal"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("run taucal");
    assert!(
        out.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let mut r = csv::Reader::from_reader(out.stdout.as_slice());
    r.records()
        .map(|rec| rec.expect("CSV row").iter().map(String::from).collect())
        .collect()
}

fn first(rows: &[Vec<String>], n: usize) -> Vec<Vec<String>> {
    rows.iter().map(|r| r[..n.min(r.len())].to_vec()).collect()
}

/// Every page of the server on `store` shows what the commands print from it.
fn pages_equal_commands(dir: &Path, store: &str) {
    let server = Server::start(dir, store, &[]);
    // The cells' page: `fleet stats`, row for row.
    let stats = csv_rows(
        dir,
        &["fleet", "stats", "--store", store, "--format", "csv"],
    );
    assert_eq!(stats.len(), 3, "three gain states");
    let cells = server.page("/cells");
    assert_eq!(first(&table(&cells, "cells"), 13), stats);
    // The stations' page: `fleet stations`, row for row.
    let stations = csv_rows(
        dir,
        &["fleet", "stations", "--store", store, "--format", "csv"],
    );
    assert_eq!(stations.len(), 5);
    let page = server.page("/stations");
    assert_eq!(first(&table(&page, "stations"), 5), stations);
    // The units' list: `store units`, the page's station column aside, the time as stored.
    let units = csv_rows(
        dir,
        &["store", "units", "--store", store, "--format", "csv"],
    );
    let page = server.page("/");
    let times = Selector::parse("table#units tbody time").expect("selector");
    let shown_times: Vec<String> = page
        .select(&times)
        .map(|t| t.value().attr("datetime").expect("datetime").to_string())
        .collect();
    let shown: Vec<Vec<String>> = table(&page, "units")
        .into_iter()
        .zip(shown_times)
        .map(|(r, t)| {
            vec![
                r[0].clone(),
                r[1].clone(),
                r[3].clone(),
                t,
                r[5].clone(),
                r[6].clone(),
            ]
        })
        .collect();
    assert_eq!(shown, units);
    // A unit's page: its table is `store table`'s.
    let serial = &units[7][0];
    let want = csv_rows(
        dir,
        &[
            "store", "table", serial, "--store", store, "--format", "csv",
        ],
    );
    let page = server.page(&format!("/unit/{serial}"));
    let width = want[0].len();
    assert_eq!(first(&table(&page, "caltable"), width), want);
    assert_eq!(
        table(&page, "runs").len(),
        units[7][2].parse::<usize>().expect("runs")
    );
    assert!(
        page.html().contains("This run verified nothing"),
        "factory-quick verifies nothing"
    );
    // A cell's page: its line of `fleet stats`, and its stations' units add up to the cell's.
    for row in &stats {
        let page = server.page(&format!("/cell/{}/{}/{}", row[0], row[1], row[2]));
        assert_eq!(table(&page, "stats"), std::slice::from_ref(row));
        let by_station = table(&page, "by-station");
        assert_eq!(by_station.len(), 5);
        let n: usize = by_station
            .iter()
            .map(|r| r[1].parse::<usize>().expect("units"))
            .sum();
        assert_eq!(n.to_string(), row[3]);
        assert_eq!(page.select(&Selector::parse("svg").expect("s")).count(), 2);
        // The stations drawn as flagged are those `fleet stations` flags.
        let marked = Selector::parse("svg g.flagged text").expect("selector");
        let drawn: Vec<String> = page.select(&marked).map(|t| t.text().collect()).collect();
        let listed: Vec<String> = stations
            .iter()
            .filter(|s| s[4] == "yes")
            .map(|s| s[0].clone())
            .collect();
        assert_eq!(drawn, listed);
    }
}

#[test]
fn the_pages_show_what_the_fleet_and_store_commands_print() {
    let dir = filled_store(40, 31);
    pages_equal_commands(dir.path(), "sqlite:fleet.sqlite");
    let Some(db) = PgDatabase::new("fleet_pages") else {
        return;
    };
    let dir = db.synced_from(dir, "sqlite:fleet.sqlite");
    pages_equal_commands(dir.path(), &db.url);
}

#[test]
fn the_units_list_searches_and_filters_and_a_missing_unit_is_404() {
    let dir = filled_store(10, 32);
    // One unit calibrated by the demo recipe, which verifies its table, into the same store.
    let demo = Taucal::in_dir(dir)
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--unit",
            "SN-DEMO-1",
            "--store",
            "sqlite:fleet.sqlite",
            "--out",
            "runs/demo",
            "-q",
        ])
        .run();
    demo.expect_code(0);
    let dir = demo.dir;
    let server = Server::start(dir.path(), "sqlite:fleet.sqlite", &[]);
    let all = table(&server.page("/"), "units");
    assert_eq!(all.len(), 11);
    // Its page's verification is the run's verify.csv, level for level.
    let verify = std::fs::read_to_string(dir.path().join("runs/demo/verify.csv")).expect("verify");
    let mut file = csv::Reader::from_reader(verify.as_bytes());
    let names: Vec<String> = file
        .headers()
        .expect("header")
        .iter()
        .map(String::from)
        .collect();
    let page = server.page("/unit/SN-DEMO-1");
    let heads = Selector::parse("table#verify thead th").expect("selector");
    let shown_names: Vec<String> = page.select(&heads).map(|h| h.text().collect()).collect();
    let shown = table(&page, "verify");
    let rows: Vec<csv::StringRecord> = file.records().map(|r| r.expect("row")).collect();
    assert_eq!(shown.len(), rows.len());
    assert!(!rows.is_empty());
    for (row, page_row) in rows.iter().zip(&shown) {
        for (i, name) in shown_names.iter().enumerate() {
            let at = names
                .iter()
                .position(|n| n == name)
                .expect("a verify.csv column");
            let (a, b): (f64, f64) = (row[at].parse().expect("n"), page_row[i].parse().expect("n"));
            assert_eq!(a, b, "{name}");
        }
    }
    let serial = &all[3][0];
    let one = table(
        &server.page(&format!("/?q={}", serial.to_lowercase())),
        "units",
    );
    assert_eq!(one.len(), 1);
    assert_eq!(&one[0][0], serial);
    let station = &all[3][2];
    let at = table(&server.page(&format!("/?station={station}")), "units");
    assert!(!at.is_empty() && at.len() < 10, "{at:?}");
    assert!(at.iter().all(|r| &r[2] == station), "{at:?}");
    assert_eq!(
        table(&server.page("/?status=not-accepted"), "units").len(),
        0
    );
    assert_eq!(table(&server.page("/?status=accepted"), "units").len(), 11);
    assert_eq!(table(&server.page("/?status=completed"), "units").len(), 11);
    assert_eq!(table(&server.page("/?status=failed"), "units").len(), 0);
    assert_eq!(table(&server.page("/?to=2000-01-01"), "units").len(), 0);
    assert_eq!(table(&server.page("/?from=2000-01-01"), "units").len(), 11);
    let (status, body) = server.get("/?from=2000-13-01");
    assert_eq!(status, 200);
    assert!(body.contains("is not a day"), "{body}");
    let (status, body) = server.get("/unit/NO-SUCH-UNIT");
    assert_eq!(status, 404);
    assert!(body.contains("NO-SUCH-UNIT"), "{body}");
    assert_eq!(server.get("/cell/1/2/3").0, 404);
    assert_eq!(server.get("/nowhere").0, 404);
}

#[test]
fn the_server_keeps_to_loopback_unless_allowed_and_refuses_bad_input() {
    let dir = filled_store(3, 33);
    let out = Taucal::in_dir(dir)
        .args([
            "fleet",
            "serve",
            "--store",
            "sqlite:fleet.sqlite",
            "--listen",
            "0.0.0.0:0",
        ])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("--allow-remote"), "{}", out.stderr);
    let out = Taucal::in_dir(out.dir)
        .args(["fleet", "serve", "--store", "sqlite:absent.sqlite"])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("does not exist"), "{}", out.stderr);
    let out = Taucal::in_dir(out.dir)
        .args([
            "fleet",
            "serve",
            "--store",
            "sqlite:fleet.sqlite",
            "--threshold-ps",
            "-1",
        ])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("--threshold-ps -1"), "{}", out.stderr);
}

#[test]
fn a_page_view_never_creates_a_store_that_went_missing() {
    let dir = filled_store(2, 35);
    let server = Server::start(dir.path(), "sqlite:fleet.sqlite", &[]);
    assert_eq!(server.page("/").root_element().value().name(), "html");
    for file in ["fleet.sqlite", "fleet.sqlite-wal", "fleet.sqlite-shm"] {
        let path = dir.path().join(file);
        if path.exists() {
            std::fs::remove_file(&path).expect("remove");
        }
    }
    // Reading must not leave an empty store behind where the real one was (common practice:
    // a read-only view writes nothing).
    let (status, body) = server.get("/");
    assert_eq!(status, 500, "{body}");
    assert!(body.contains("does not exist"), "{body}");
    assert!(body.contains("fleet.sqlite"), "the URL is named: {body}");
    assert!(
        !dir.path().join("fleet.sqlite").exists(),
        "a page view created the store"
    );
}

/// The fleet pages in headless Chromium at a desktop and a phone width: each shows the
/// commands' numbers, loads nothing from outside, keeps its tables and plots inside their cards
/// (no sideways scroll of the page), keeps plot text legible, and its search form works;
/// screenshots of every page at both widths go to `target/test-artefacts/`.
#[test]
fn the_fleet_pages_in_a_browser_show_the_commands_numbers_at_desktop_and_phone_widths() {
    use crate::support::browser::{Browser, DESKTOP_PX, PHONE_PX};
    let test = "the_fleet_pages_in_a_browser_show_the_commands_numbers_at_desktop_and_phone_widths";
    let dir = filled_store(40, 34);
    let (d, store) = (dir.path(), "sqlite:fleet.sqlite");
    let stats = csv_rows(d, &["fleet", "stats", "--store", store, "--format", "csv"]);
    let stations = csv_rows(
        d,
        &["fleet", "stations", "--store", store, "--format", "csv"],
    );
    let units = csv_rows(d, &["store", "units", "--store", store, "--format", "csv"]);
    let serial = units[5][0].clone();
    let cal = csv_rows(
        d,
        &[
            "store", "table", &serial, "--store", store, "--format", "csv",
        ],
    );
    let server = Server::start(d, store, &[]);
    let cell = format!("/cell/{}/{}/{}", stats[1][0], stats[1][1], stats[1][2]);
    let units_shown: Vec<Vec<String>> = units.iter().map(|u| vec![u[0].clone()]).collect();
    let pages = [
        ("units", "/".to_string(), "units", units_shown),
        ("cells", "/cells".to_string(), "cells", stats.clone()),
        ("stations", "/stations".to_string(), "stations", stations),
        ("unit", format!("/unit/{serial}"), "caltable", cal),
        ("cell", cell, "stats", vec![stats[1].clone()]),
    ];
    for width in [DESKTOP_PX, PHONE_PX] {
        let Some(browser) = Browser::open(test, width) else {
            return;
        };
        for (name, path, id, want) in &pages {
            browser.goto(&format!("{}{path}", server.base));
            let n = want[0].len();
            let shown = browser.js(&format!(
                "return Array.from(document.querySelectorAll('table#{id} tbody tr')).map(r => \
                 Array.from(r.cells).slice(0, {n}).map(c => c.textContent.trim()))"
            ));
            let shown: Vec<Vec<String>> = serde_json::from_value(shown).expect("rows of text");
            assert_eq!(&shown, want, "{name} at {width} px");
            browser.assert_nothing_external();
            browser.assert_no_horizontal_overflow(name);
            // A table or plot wider than its card scrolls inside it.
            let outside = browser.js_u64(
                "return Array.from(document.querySelectorAll('.scroll, .plotbox')).filter(e => \
                 e.getBoundingClientRect().right > \
                 e.closest('section').getBoundingClientRect().right + 0.5).length",
            );
            assert_eq!(
                outside, 0,
                "{name} at {width} px: a table or plot leaves its card"
            );
            // Plot text stays legible: no label drawn at under 10 CSS px (its font size in
            // drawing units times the plot's scale on screen).
            let smallest = browser.js(
                "return Math.min(99, ...Array.from(document.querySelectorAll('svg text'))\
                 .map(t => parseFloat(getComputedStyle(t).fontSize) * \
                 t.ownerSVGElement.getScreenCTM().a))",
            );
            let smallest = smallest.as_f64().expect("a size");
            assert!(
                smallest >= 10.0,
                "{name} at {width} px: plot text {smallest} px tall"
            );
            browser.screenshot(&format!("fleet-{name}-{width}"));
        }
        // The search form, as a person uses it: a serial typed, the form sent.
        browser.goto(&format!("{}/", server.base));
        browser.js(&format!(
            "document.querySelector('input[name=q]').value = '{serial}'; \
             document.querySelector('form.filters button').click();"
        ));
        browser.wait_until(
            "location.search.includes('q=') && \
             document.querySelectorAll('table#units tbody tr').length === 1",
            std::time::Duration::from_secs(10),
            "the search to narrow the list to one unit",
        );
        browser.screenshot(&format!("fleet-units-search-{width}"));
    }
}
