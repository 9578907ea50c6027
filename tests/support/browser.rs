//! A headless Chromium driven over WebDriver (chromedriver, through the fantoccini crate), for
//! tests that check served pages in a real browser: what the page shows, that nothing on it
//! leaves loopback, that it fits a phone-width screen, and screenshots kept as artefacts in
//! `target/test-artefacts/`.
//!
//! Debian's `chromium` and `chromium-driver` packages provide the two binaries (`.ci/run`
//! installs them). Without them a test is skipped with a message, and fails under CI.

use std::net::TcpListener;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

/// The widths the pages are checked at: a desktop window and a phone held upright.
pub const DESKTOP_PX: u32 = 1300;
/// A phone held upright (CSS pixels).
pub const PHONE_PX: u32 = 390;

const WINDOW_HEIGHT_PX: u32 = 900;

/// A browser session in its own chromedriver process; both end when it is dropped.
pub struct Browser {
    rt: tokio::runtime::Runtime,
    client: Option<fantoccini::Client>,
    driver: Child,
    width_px: u32,
}

fn find(candidates: &[&str]) -> Option<PathBuf> {
    candidates
        .iter()
        .map(PathBuf::from)
        .find(|p| p.is_file())
        .or_else(|| {
            // Elsewhere on PATH (another distribution's layout).
            let name = Path::new(candidates[0]).file_name()?.to_owned();
            std::env::var_os("PATH").and_then(|paths| {
                std::env::split_paths(&paths)
                    .map(|d| d.join(&name))
                    .find(|p| p.is_file())
            })
        })
}

/// A free loopback port (the OS picks; it is released for chromedriver to take).
pub fn free_port() -> u16 {
    TcpListener::bind("127.0.0.1:0")
        .and_then(|l| l.local_addr())
        .expect("a free port")
        .port()
}

/// Where screenshots go: `target/test-artefacts/` of this checkout.
pub fn artefacts_dir() -> PathBuf {
    let dir = std::env::var_os("CARGO_TARGET_DIR")
        .map(PathBuf::from)
        .unwrap_or_else(|| super::root().join("target"))
        .join("test-artefacts");
    std::fs::create_dir_all(&dir).expect("artefacts folder");
    dir
}

impl Browser {
    /// A headless window `width_px` wide, or `None` (after saying the test was skipped) when
    /// Chromium or chromedriver is missing; under CI a missing browser fails the test.
    pub fn open(test: &str, width_px: u32) -> Option<Browser> {
        let Some(chromium) = find(&["/usr/bin/chromium", "/usr/bin/chromium-browser"]) else {
            super::skip_without("chromium", test);
            return None;
        };
        let Some(driver_bin) = find(&["/usr/bin/chromedriver"]) else {
            super::skip_without("chromium-driver", test);
            return None;
        };
        let port = free_port();
        let driver = Command::new(driver_bin)
            .arg(format!("--port={port}"))
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .expect("start chromedriver");
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .expect("runtime");
        let mut browser = Browser {
            rt,
            client: None,
            driver,
            width_px,
        };
        let caps: serde_json::Map<String, serde_json::Value> =
            serde_json::from_value(serde_json::json!({
                "goog:chromeOptions": {
                    "binary": chromium,
                    "args": [
                        "--headless=new",
                        "--no-sandbox",
                        "--disable-gpu",
                        "--disable-dev-shm-usage",
                        "--hide-scrollbars",
                        "--no-first-run",
                        "--no-default-browser-check",
                        format!("--window-size={DESKTOP_PX},{WINDOW_HEIGHT_PX}"),
                    ]
                }
            }))
            .expect("capabilities");
        let url = format!("http://127.0.0.1:{port}/");
        let deadline = Instant::now() + Duration::from_secs(30);
        let client = loop {
            let attempt = browser.rt.block_on(
                fantoccini::ClientBuilder::new(
                    hyper_util::client::legacy::connect::HttpConnector::new(),
                )
                .capabilities(caps.clone())
                .connect(&url),
            );
            match attempt {
                Ok(c) => break c,
                // chromedriver takes a moment to listen.
                Err(e) if Instant::now() < deadline => {
                    let _ = e;
                    std::thread::sleep(Duration::from_millis(100));
                }
                Err(e) => panic!("{test}: no WebDriver session from chromedriver: {e}"),
            }
        };
        browser.client = Some(client);
        browser.set_viewport(WINDOW_HEIGHT_PX);
        Some(browser)
    }

    fn client(&self) -> &fantoccini::Client {
        self.client.as_ref().expect("session")
    }

    /// The window's width, CSS px.
    pub fn width_px(&self) -> u32 {
        self.width_px
    }

    /// Loads `url` and waits for the page's load event; the page must lay out at the
    /// window's width (a page without a viewport meta element gets 980 px on a phone).
    pub fn goto(&self, url: &str) {
        self.rt
            .block_on(self.client().goto(url))
            .unwrap_or_else(|e| panic!("load {url}: {e}"));
        let inner = self.js_u64("return window.innerWidth");
        assert_eq!(
            inner, self.width_px as u64,
            "{url} lays out {inner} px wide in a {} px window",
            self.width_px
        );
    }

    /// Runs `script` (a function body; `return` gives the value) in the page.
    pub fn js(&self, script: &str) -> serde_json::Value {
        self.rt
            .block_on(self.client().execute(script, Vec::new()))
            .unwrap_or_else(|e| panic!("script `{script}`: {e}"))
    }

    /// A script's value as a whole number.
    pub fn js_u64(&self, script: &str) -> u64 {
        let v = self.js(script);
        v.as_u64()
            .or_else(|| v.as_f64().map(|f| f as u64))
            .unwrap_or_else(|| panic!("`{script}` gave {v}"))
    }

    /// A script's value as text.
    pub fn js_string(&self, script: &str) -> String {
        match self.js(script) {
            serde_json::Value::String(s) => s,
            other => panic!("`{script}` gave {other}"),
        }
    }

    /// Waits until `condition` (a JS expression) is true, polling; panics after `timeout` with
    /// `what`.
    pub fn wait_until(&self, condition: &str, timeout: Duration, what: &str) {
        let deadline = Instant::now() + timeout;
        let script = format!("return !!({condition})");
        while self.js(&script) != serde_json::Value::Bool(true) {
            assert!(Instant::now() < deadline, "waited {timeout:?} for {what}");
            std::thread::sleep(Duration::from_millis(100));
        }
    }

    /// Sets the viewport to the window's width and `height_px`, through the DevTools protocol:
    /// a browser window has a minimum width (500 px in headless Chromium), a viewport has none.
    /// Not in mobile mode: a mobile layout viewport widens to fit a page that overflows, which
    /// would hide the overflow the tests look for.
    fn set_viewport(&self, height_px: u32) {
        let cmd = Cdp {
            cmd: "Emulation.setDeviceMetricsOverride",
            params: serde_json::json!({
                "width": self.width_px,
                "height": height_px,
                "deviceScaleFactor": 1,
                "mobile": false,
            }),
        };
        self.rt
            .block_on(self.client().issue_cmd(cmd))
            .expect("set the viewport");
    }

    /// Saves what the window shows, grown to the page's full height (up to a limit), as
    /// `target/test-artefacts/NAME.png`; returns the file.
    pub fn screenshot(&self, name: &str) -> PathBuf {
        let height = self
            .js_u64("return document.documentElement.scrollHeight")
            .clamp(200, 12_000) as u32;
        self.set_viewport(height);
        let png = self
            .rt
            .block_on(self.client().screenshot())
            .expect("screenshot");
        self.set_viewport(WINDOW_HEIGHT_PX);
        assert!(png.starts_with(b"\x89PNG"), "not a PNG");
        let path = artefacts_dir().join(format!("{name}.png"));
        std::fs::write(&path, png).expect("write the screenshot");
        path
    }

    /// Panics if anything the page loaded, or refers to for loading, is outside loopback: every
    /// resource the browser fetched (Resource Timing) and every element's src/href/action.
    pub fn assert_nothing_external(&self) {
        let fetched = self.js(
            "return performance.getEntriesByType('resource').map(e => e.name)\
             .concat([location.href])",
        );
        for url in fetched.as_array().expect("a list") {
            let url = url.as_str().unwrap_or_default();
            assert!(loopback_url(url), "the page loaded {url}");
        }
        let refs = self.js(
            "return Array.from(document.querySelectorAll('[src],[href],[action],[srcset],\
             [poster],[data]')).map(e => e.getAttribute('src') || e.getAttribute('href') || \
             e.getAttribute('action') || e.getAttribute('srcset') || e.getAttribute('poster') \
             || e.getAttribute('data'))",
        );
        for r in refs.as_array().expect("a list") {
            let r = r.as_str().unwrap_or_default();
            let local = r.starts_with('#')
                || (r.starts_with('/') && !r.starts_with("//"))
                || r.starts_with('?')
                || loopback_url(r);
            assert!(local, "the page refers to {r}");
        }
        let css_urls = self.js(
            "return Array.from(document.styleSheets).flatMap(s => Array.from(s.cssRules))\
             .map(r => r.cssText).filter(t => t.includes('url(') || t.includes('@import'))",
        );
        assert_eq!(
            css_urls,
            serde_json::json!([]),
            "CSS loading from elsewhere"
        );
    }

    /// Panics if the page is wider than the window (a sideways scroll of the whole page).
    pub fn assert_no_horizontal_overflow(&self, what: &str) {
        let (scroll, inner) = (
            self.js_u64("return document.documentElement.scrollWidth"),
            self.js_u64("return window.innerWidth"),
        );
        assert!(
            scroll <= inner,
            "{what} at {} px: the page is {scroll} px wide",
            self.width_px
        );
    }
}

/// A Chrome DevTools Protocol command, through chromedriver's endpoint for them.
#[derive(Debug)]
struct Cdp {
    cmd: &'static str,
    params: serde_json::Value,
}

impl fantoccini::wd::WebDriverCompatibleCommand for Cdp {
    fn endpoint(
        &self,
        base: &url::Url,
        session: Option<&str>,
    ) -> Result<url::Url, url::ParseError> {
        base.join(&format!(
            "session/{}/goog/cdp/execute",
            session.unwrap_or_default()
        ))
    }

    fn method_and_body(&self, _: &url::Url) -> (http::Method, Option<String>) {
        let body = serde_json::json!({ "cmd": self.cmd, "params": self.params });
        (http::Method::POST, Some(body.to_string()))
    }
}

/// Whether `url` is an address on this machine (or not a network address at all).
fn loopback_url(url: &str) -> bool {
    let Some(rest) = url
        .strip_prefix("http://")
        .or_else(|| url.strip_prefix("https://"))
    else {
        // data: and about: load nothing from the network; anything else is suspect.
        return url.starts_with("data:") || url == "about:blank";
    };
    let authority = rest.split(['/', '?', '#']).next().unwrap_or_default();
    let host = match authority.strip_prefix('[') {
        Some(v6) => v6.split(']').next().unwrap_or_default(),
        None => authority.split(':').next().unwrap_or_default(),
    };
    host == "localhost" || host == "::1" || host.starts_with("127.")
}

impl Drop for Browser {
    fn drop(&mut self) {
        if let Some(c) = self.client.take() {
            let _ = self.rt.block_on(c.close());
        }
        let _ = self.driver.kill();
        let _ = self.driver.wait();
    }
}

#[test]
fn loopback_urls_are_told_from_others() {
    // Loopback is 127.0.0.0/8 and ::1 (RFC 1122 3.2.1.3, RFC 4291 2.5.3); common practice
    // names it localhost.
    for url in [
        "http://127.0.0.1:8080/",
        "http://localhost/x",
        "http://[::1]:9/e",
        "http://[::1]/e",
        "data:image/png;base64,AA",
    ] {
        assert!(loopback_url(url), "{url}");
    }
    for url in [
        "https://example.org/a.js",
        "http://10.0.0.1/",
        "//cdn.example/x",
        "ftp://127.0.0.1/",
    ] {
        assert!(!loopback_url(url), "{url}");
    }
}
