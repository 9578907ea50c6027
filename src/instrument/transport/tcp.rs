//! Raw TCP sockets: the usual way to reach LAN instruments (SCPI raw socket, port 5025) and the
//! way `taucal sim serve` serves simulated ones.

use super::Stream;
use std::io;
use std::time::Duration;
use tokio::net::TcpStream;

/// Connects to `host:port`, waiting at most `timeout`. Nagle's algorithm is turned off: commands
/// are short and every one waits for its reply.
pub async fn connect(host: &str, port: u16, timeout: Duration) -> io::Result<Box<dyn Stream>> {
    let stream = tokio::time::timeout(timeout, TcpStream::connect((host, port)))
        .await
        .map_err(|_| {
            io::Error::new(
                io::ErrorKind::TimedOut,
                format!("no connection within {} ms", timeout.as_millis()),
            )
        })??;
    stream.set_nodelay(true)?;
    Ok(Box::new(stream))
}
