//! Served pages in a real browser (headless Chromium over WebDriver, `support::browser`): they
//! load nothing from outside, fit a phone-width screen, and screenshots at both widths are kept
//! in `target/test-artefacts/`.

use crate::support::browser::{Browser, DESKTOP_PX, PHONE_PX};
use axum::routing::get;
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
            std::time::Duration::from_secs(5),
            "the page's inline script",
        );
        browser.assert_nothing_external();
        browser.assert_no_horizontal_overflow("the page shell");
        let shot = browser.screenshot(&format!("shell-{}", browser.width_px()));
        assert!(std::fs::metadata(&shot).expect("screenshot").len() > 1000);
    }
    served.stop().expect("the server stops");
}
