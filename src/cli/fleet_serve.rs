//! `taucal fleet serve`: the fleet's pages over HTTP until SIGINT or SIGTERM.

use super::args::FleetServeArgs;
use super::fleet::check_threshold;
use super::store::{fail, read_url};
use super::Exit;
use crate::diagnostic::Diagnostic;
use crate::store::url::URL_HINT;
use crate::web::fleet::{router, FleetSite};
use crate::web::{bind, serve, Shutdown};

/// Serves the pages.
pub fn run(args: FleetServeArgs) -> Result<Exit, Diagnostic> {
    check_threshold(args.threshold.threshold_ps)?;
    let url = read_url(&args.store)?;
    // Opened once now, so a wrong URL is an input error at start rather than a broken page;
    // as every page, without creating or migrating anything.
    let shown = crate::store::open_existing(&url)
        .map_err(fail)?
        .ok_or_else(|| {
            Diagnostic::plain("--store none names no store to serve").with_hint(URL_HINT)
        })?
        .url();
    let listener = bind(&args.listen, args.allow_remote)
        .map_err(|e| Diagnostic::plain(format!("--listen: {e}")))?;
    let site = FleetSite {
        url,
        threshold_ps: args.threshold.threshold_ps,
    };
    let served = serve(listener, router(site), Shutdown::new())
        .map_err(|e| Diagnostic::plain(e.to_string()))?;
    // The line a script (or a test) reads the address from, port 0 resolved.
    println!("fleet pages of {shown} at {}", served.url());
    served
        .stop_on_interrupt()
        .map_err(|e| Diagnostic::plain(format!("the page server stopped: {e}")))?;
    Ok(Exit::Ok)
}
