//! `taucal fleet serve`: the fleet's pages over HTTP until SIGINT or SIGTERM.

use super::args::FleetServeArgs;
use super::fleet::check_threshold;
use super::store::{open_existing, read_url};
use super::Exit;
use crate::diagnostic::Diagnostic;
use crate::web::fleet::{local, router, FleetSite};

/// Serves the pages.
pub fn run(args: FleetServeArgs) -> Result<Exit, Diagnostic> {
    check_threshold(args.threshold_ps)?;
    let url = read_url(&args.store)?;
    // Opened once now, so a wrong URL is an input error at start rather than a broken page.
    let shown = open_existing(&url)?.url();
    let listener = local::bind(&args.listen, args.allow_remote).map_err(|e| {
        Diagnostic::plain(format!("--listen {}: {e}", args.listen))
            .with_hint("give HOST:PORT on this machine, e.g. --listen 127.0.0.1:8090")
    })?;
    let addr = listener
        .local_addr()
        .map_err(|e| Diagnostic::plain(format!("--listen {}: {e}", args.listen)))?;
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .map_err(|e| Diagnostic::plain(format!("cannot start the page server: {e}")))?;
    let site = FleetSite {
        url,
        threshold_ps: args.threshold_ps,
    };
    runtime.block_on(async move {
        let listener = tokio::net::TcpListener::from_std(listener)
            .map_err(|e| Diagnostic::plain(format!("cannot serve on {addr}: {e}")))?;
        // The line a script (or a test) reads the address from, port 0 resolved.
        println!("fleet pages of {shown} at http://{addr}/");
        axum::serve(listener, router(site))
            .with_graceful_shutdown(stop_signal())
            .await
            .map_err(|e| Diagnostic::plain(format!("the page server stopped: {e}")))
    })?;
    Ok(Exit::Ok)
}

/// Resolves at SIGINT or SIGTERM.
async fn stop_signal() {
    use tokio::signal::unix::{signal, SignalKind};
    match signal(SignalKind::terminate()) {
        Ok(mut term) => {
            tokio::select! {
                _ = tokio::signal::ctrl_c() => {}
                _ = term.recv() => {}
            }
        }
        Err(_) => {
            let _ = tokio::signal::ctrl_c().await;
        }
    }
}
