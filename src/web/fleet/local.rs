//! Stand-ins for the shared web foundation (page shell, response headers, binding) until it
//! lands; the same signatures, so switching is an import.

use axum::http::header;
use axum::response::{IntoResponse, Response};
use std::net::{SocketAddr, TcpListener, ToSocketAddrs};

pub use crate::report::html::escape;

/// The shell's own look: the masthead and the cards.
const BASE: &str = "body{margin:0;background:#f6f5f1;color:#272d36;font:15px/1.5 system-ui,sans-serif}\
header.masthead{background:#272d36;color:#fff;padding:18px 24px}\
header .kicker{text-transform:uppercase;font-size:12px;opacity:.75}header h1{margin:4px 0;font-size:24px}\
main{max-width:1040px;margin:0 auto;padding:16px 24px 40px}\
section{background:#fff;border:1px solid #dcdfe4;border-radius:6px;padding:14px 20px;margin:16px 0}\
table{border-collapse:collapse;width:100%}th,td{text-align:right;padding:5px 10px;border-bottom:1px solid #dcdfe4}";

/// A whole page around `body`.
pub fn page(kicker: &str, title: &str, style: &str, body: &str, _script: &str) -> String {
    format!(
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
         <title>{t} — {k}</title><style>{BASE}{style}</style></head><body>\
         <header class=\"masthead\"><div class=\"kicker\">{k}</div><h1>{t}</h1></header>\
         <main>{body}</main></body></html>",
        t = escape(title),
        k = escape(kicker),
    )
}

/// An HTML page as a response that may load nothing from elsewhere.
pub fn html(page: String) -> Response {
    (
        [
            (header::CONTENT_TYPE, "text/html; charset=utf-8"),
            (
                header::CONTENT_SECURITY_POLICY,
                "default-src 'none'; style-src 'unsafe-inline'; img-src data:; form-action 'self'",
            ),
        ],
        page,
    )
        .into_response()
}

/// Binds `addr`, refusing one other machines could reach unless `allow_remote`.
pub fn bind(addr: &str, allow_remote: bool) -> Result<TcpListener, String> {
    let resolved: Vec<SocketAddr> = addr
        .to_socket_addrs()
        .map_err(|e| format!("cannot listen on `{addr}`: {e}"))?
        .collect();
    let first = resolved
        .first()
        .ok_or_else(|| format!("`{addr}` resolves to no address"))?;
    if !allow_remote && resolved.iter().any(|a| !a.ip().is_loopback()) {
        return Err(format!(
            "{addr} is reachable from other machines (--allow-remote)"
        ));
    }
    let l = TcpListener::bind(first).map_err(|e| format!("cannot listen on {addr}: {e}"))?;
    l.set_nonblocking(true).map_err(|e| e.to_string())?;
    Ok(l)
}
