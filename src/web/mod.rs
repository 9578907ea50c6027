//! Served pages: what every page taucal serves over HTTP shares — the listening socket (loopback
//! unless the user allows more), the page shell with the report's look, the response headers
//! that keep a page self-contained, and a server on a thread of its own that stops gracefully.
//!
//! Pages are read-only (GET only) and load nothing from outside: styles and scripts are inline,
//! and the Content-Security-Policy sent with every page makes the browser refuse anything else.
//! Nothing here may block or slow the caller's thread: the server runs on its own runtime.

pub mod fleet;
pub mod live;

use axum::http::header;
use axum::response::{IntoResponse, Response};
use axum::Router;
use std::fmt::Write;
use std::net::{SocketAddr, TcpListener, ToSocketAddrs};
use thiserror::Error;

pub use crate::report::html::escape;

/// Why a page cannot be served.
#[derive(Debug, Error)]
pub enum WebError {
    /// The address is not a loopback one and remote viewers were not allowed.
    #[error(
        "{addr} is reachable from other machines: the page would be open to the network \
         (pass --allow-remote to serve it there, or listen on 127.0.0.1)"
    )]
    NotLoopback {
        /// The address as given.
        addr: String,
    },
    /// The address does not parse or resolve.
    #[error("cannot listen on `{addr}`: {message} (give HOST:PORT, e.g. 127.0.0.1:8080)")]
    Address {
        /// The address as given.
        addr: String,
        /// What went wrong.
        message: String,
    },
    /// The socket could not be bound (in use, not permitted).
    #[error("cannot listen on {addr}: {source}")]
    Bind {
        /// The address.
        addr: String,
        /// Cause.
        source: std::io::Error,
    },
    /// The server's thread or runtime could not be started.
    #[error("cannot start the page server: {0}")]
    Start(std::io::Error),
}

/// Binds `addr` (`HOST:PORT`); refuses an address other machines could reach unless
/// `allow_remote`. Binding here, before anything runs, makes a port in use an input error
/// rather than a failure halfway through a run.
pub fn bind(addr: &str, allow_remote: bool) -> Result<TcpListener, WebError> {
    let resolved: Vec<SocketAddr> = addr
        .to_socket_addrs()
        .map_err(|e| WebError::Address {
            addr: addr.to_string(),
            message: e.to_string(),
        })?
        .collect();
    let Some(first) = resolved.first() else {
        return Err(WebError::Address {
            addr: addr.to_string(),
            message: "it resolves to no address".into(),
        });
    };
    // Every address the name resolves to must be loopback: `localhost` may resolve to both
    // families, a host name to a public one.
    if !allow_remote && resolved.iter().any(|a| !a.ip().is_loopback()) {
        return Err(WebError::NotLoopback {
            addr: addr.to_string(),
        });
    }
    let listener = TcpListener::bind(first).map_err(|source| WebError::Bind {
        addr: addr.to_string(),
        source,
    })?;
    listener
        .set_nonblocking(true)
        .map_err(|source| WebError::Bind {
            addr: addr.to_string(),
            source,
        })?;
    Ok(listener)
}

/// Styles served pages add to the report's: a navigation row and a status strip.
const SHELL_STYLE: &str = r#"
nav.pages { display:flex; flex-wrap:wrap; gap:6px 18px; margin-top:10px; font-size:14px; }
nav.pages a { color:#fff; opacity:.85; text-decoration:none; border-bottom:1px solid transparent; }
nav.pages a:hover, nav.pages a[aria-current] { opacity:1; border-bottom-color:#fff; }
"#;

/// A whole page: the report's stylesheet plus `style`, a masthead with `kicker` over `title`
/// and `sub` (a line under it; empty for none), then `body` (already HTML) and `script` (inline
/// JavaScript; empty for none). `kicker`, `title` and `sub` are text and escaped here; `body`,
/// `style` and `script` are the caller's markup. The title and the line under it carry the ids
/// `page-title` and `page-sub`, for a script to update.
pub fn page(kicker: &str, title: &str, sub: &str, style: &str, body: &str, script: &str) -> String {
    let mut out = String::with_capacity(body.len() + 8192);
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>{} — {}</title>\n<style>{}{SHELL_STYLE}{style}</style>\n</head>\n<body>\n\
         <header class=\"masthead\"><div class=\"inner\"><div class=\"kicker\">{}</div>\
         <h1 id=\"page-title\">{}</h1><p class=\"sub\" id=\"page-sub\">{}</p></div></header>\n\
         <main>\n{body}\n</main>\n",
        escape(title),
        escape(kicker),
        crate::report::html::STYLE,
        escape(kicker),
        escape(title),
        escape(sub),
    );
    if !script.is_empty() {
        let _ = writeln!(out, "<script>{script}</script>");
    }
    out.push_str("</body>\n</html>\n");
    out
}

/// What the browser may load for a served page: nothing but the page itself, its inline styles
/// and scripts, and (for live updates and search forms) requests back to the same server.
pub const CONTENT_SECURITY_POLICY: &str = "default-src 'none'; style-src 'unsafe-inline'; \
     script-src 'unsafe-inline'; connect-src 'self'; img-src data:; base-uri 'none'; \
     form-action 'self'; frame-ancestors 'none'";

/// An HTML page as a response, with the headers every served page carries.
pub fn html(page: String) -> Response {
    (
        [
            (header::CONTENT_TYPE, "text/html; charset=utf-8"),
            (header::CONTENT_SECURITY_POLICY, CONTENT_SECURITY_POLICY),
            (header::CACHE_CONTROL, "no-store"),
            (header::X_CONTENT_TYPE_OPTIONS, "nosniff"),
            (header::REFERRER_POLICY, "no-referrer"),
        ],
        page,
    )
        .into_response()
}

/// The stop signal of a server: requested once, heard by the server and by every long-lived
/// response (an event stream must end for a graceful shutdown to finish).
#[derive(Debug, Clone)]
pub struct Shutdown {
    tx: std::sync::Arc<tokio::sync::watch::Sender<bool>>,
}

impl Default for Shutdown {
    fn default() -> Self {
        Self::new()
    }
}

impl Shutdown {
    /// A signal not yet given.
    pub fn new() -> Self {
        Shutdown {
            tx: std::sync::Arc::new(tokio::sync::watch::channel(false).0),
        }
    }

    /// Gives the signal; never blocks.
    pub fn request(&self) {
        self.tx.send_replace(true);
    }

    /// Whether the signal was given.
    pub fn requested(&self) -> bool {
        *self.tx.borrow()
    }

    /// Resolves once the signal is given.
    pub async fn wait(&self) {
        let mut rx = self.tx.subscribe();
        // An error means the sender is gone, which cannot happen while `self` holds it.
        let _ = rx.wait_for(|stop| *stop).await;
    }
}

/// A server running on a thread of its own.
pub struct Served {
    addr: SocketAddr,
    shutdown: Shutdown,
    thread: Option<std::thread::JoinHandle<std::io::Result<()>>>,
}

/// Serves `router` on `listener` (from [`bind`]) until `shutdown` is requested, on a thread
/// with its own small runtime, so the caller's thread (a run's) never waits on viewers.
pub fn serve(
    listener: TcpListener,
    router: Router,
    shutdown: Shutdown,
) -> Result<Served, WebError> {
    let addr = listener.local_addr().map_err(WebError::Start)?;
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .thread_name("taucal-web")
        .enable_all()
        .build()
        .map_err(WebError::Start)?;
    let stop = shutdown.clone();
    let thread = std::thread::Builder::new()
        .name("taucal-web".into())
        .spawn(move || {
            rt.block_on(async move {
                let listener = tokio::net::TcpListener::from_std(listener)?;
                axum::serve(listener, router)
                    .with_graceful_shutdown(async move { stop.wait().await })
                    .await
            })
        })
        .map_err(WebError::Start)?;
    Ok(Served {
        addr,
        shutdown,
        thread: Some(thread),
    })
}

impl Served {
    /// Where it listens.
    pub fn local_addr(&self) -> SocketAddr {
        self.addr
    }

    /// The page's address as a viewer types it.
    pub fn url(&self) -> String {
        format!("http://{}/", self.addr)
    }

    /// Asks the server to stop and waits for it: open responses end, then the thread.
    pub fn stop(mut self) -> std::io::Result<()> {
        self.finish()
    }

    /// Blocks until SIGINT or SIGTERM, then stops the server.
    pub fn stop_on_interrupt(mut self) -> std::io::Result<()> {
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()?;
        rt.block_on(interrupted())?;
        self.finish()
    }

    fn finish(&mut self) -> std::io::Result<()> {
        self.shutdown.request();
        match self.thread.take().map(|t| t.join()) {
            Some(Ok(result)) => result,
            Some(Err(_)) => Err(std::io::Error::other("the page server's thread panicked")),
            None => Ok(()),
        }
    }
}

impl Drop for Served {
    fn drop(&mut self) {
        let _ = self.finish();
    }
}

/// Resolves on SIGINT or SIGTERM.
async fn interrupted() -> std::io::Result<()> {
    #[cfg(unix)]
    {
        use tokio::signal::unix::{signal, SignalKind};
        let mut int = signal(SignalKind::interrupt())?;
        let mut term = signal(SignalKind::terminate())?;
        tokio::select! {
            _ = int.recv() => {}
            _ = term.recv() => {}
        }
        Ok(())
    }
    #[cfg(not(unix))]
    {
        tokio::signal::ctrl_c().await
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_address_others_can_reach_is_refused_without_allow_remote() {
        // 0.0.0.0 is the unspecified address (RFC 1122 3.2.1.3): listening there accepts
        // connections on every interface, so it is not loopback.
        let e = bind("0.0.0.0:0", false).unwrap_err();
        assert!(matches!(e, WebError::NotLoopback { .. }), "{e}");
        assert!(e.to_string().contains("--allow-remote"), "{e}");
        assert!(bind("0.0.0.0:0", true).is_ok());
        // 127.0.0.0/8 and ::1 are loopback (RFC 1122 3.2.1.3, RFC 4291 2.5.3).
        let l = bind("127.0.0.1:0", false).expect("loopback");
        assert!(l.local_addr().unwrap().ip().is_loopback());
    }

    #[test]
    fn a_bad_address_says_what_would_be_right() {
        let e = bind("no-port-here", false).unwrap_err();
        assert!(matches!(e, WebError::Address { .. }), "{e}");
        assert!(e.to_string().contains("HOST:PORT"), "{e}");
    }

    #[test]
    fn the_shell_escapes_its_titles_and_keeps_the_callers_markup() {
        let p = page(
            "kicker <k>",
            "t & <t>",
            "s\"",
            ".x{}",
            "<p id=\"b\">body</p>",
            "let a=1;",
        );
        assert!(p.contains(">t &amp; &lt;t&gt;</h1>"), "{p}");
        assert!(p.contains(">s&quot;</p>"), "{p}");
        assert!(p.contains("kicker &lt;k&gt;"));
        assert!(p.contains("<p id=\"b\">body</p>"));
        assert!(p.contains("<script>let a=1;</script>"));
        assert!(p.contains(".x{}"));
        assert!(!p.contains("src=") && !p.contains("href="), "{p}");
    }
}
