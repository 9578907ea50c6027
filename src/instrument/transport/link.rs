//! A line-oriented connection that (re)connects on demand: a lost connection or a missed reply
//! fails the command in flight, and the next command reconnects, so a cable pulled and
//! replugged between steps costs one error, not the instrument.

use super::{open, Address, Connection};
use crate::instrument::line::{read_line, LineError, LineFramer};
use std::time::Duration;
use thiserror::Error;
use tokio::io::AsyncWriteExt;

/// What went wrong on a link.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum LinkError {
    /// No connection could be made.
    #[error("cannot connect to {address}: {message}")]
    Connect {
        /// The address.
        address: String,
        /// The system's words.
        message: String,
    },
    /// A line could not be sent or read.
    #[error("{address}: {source}")]
    Line {
        /// The address.
        address: String,
        /// What happened.
        source: LineError,
    },
}

impl LinkError {
    /// True when the command timed out (the instrument may be busy rather than gone).
    pub fn is_timeout(&self) -> bool {
        matches!(
            self,
            LinkError::Line {
                source: LineError::Timeout(_),
                ..
            }
        )
    }
}

/// A line connection to one instrument.
pub struct Link {
    address: Address,
    ending: String,
    timeout: Duration,
    stream: Option<Connection>,
    framer: LineFramer,
}

impl Link {
    /// A link that will connect to `address` on first use, end every line it sends with
    /// `ending`, and wait `timeout` for each connection and each reply line.
    pub fn new(address: Address, ending: &str, timeout: Duration) -> Self {
        Link {
            address,
            ending: ending.to_string(),
            timeout,
            stream: None,
            framer: LineFramer::new(),
        }
    }

    /// The per-command timeout.
    pub fn timeout(&self) -> Duration {
        self.timeout
    }

    /// True while connected.
    pub fn is_connected(&self) -> bool {
        self.stream.is_some()
    }

    /// Any failure ends the connection, a timeout too: a reply that comes late would otherwise
    /// be read as the next command's. The next command reconnects (a serial port reopens with
    /// its input discarded).
    fn line_error(&mut self, source: LineError) -> LinkError {
        self.stream = None;
        self.framer.clear();
        LinkError::Line {
            address: self.address.to_string(),
            source,
        }
    }

    async fn connected(&mut self) -> Result<&mut Connection, LinkError> {
        if self.stream.is_none() {
            let stream =
                open(&self.address, self.timeout)
                    .await
                    .map_err(|e| LinkError::Connect {
                        address: self.address.to_string(),
                        message: e.to_string(),
                    })?;
            self.framer.clear();
            self.stream = Some(stream);
        }
        self.stream.as_mut().ok_or_else(|| LinkError::Connect {
            address: self.address.to_string(),
            message: "not connected".into(),
        })
    }

    /// Drops the connection (ends an `exec:` program); the next command connects afresh.
    pub fn close(&mut self) {
        self.stream = None;
        self.framer.clear();
    }

    /// Sends one line (the terminator is added).
    pub async fn send(&mut self, line: &str) -> Result<(), LinkError> {
        let bytes = format!("{line}{}", self.ending);
        let timeout = self.timeout;
        let connection = self.connected().await?;
        let write = async {
            match connection {
                Connection::Stream(stream) => {
                    stream.write_all(bytes.as_bytes()).await?;
                    stream.flush().await
                }
                Connection::Messages(session) => session.write_message(bytes.as_bytes()).await,
            }
        };
        let outcome = match tokio::time::timeout(timeout, write).await {
            Ok(Ok(())) => return Ok(()),
            Ok(Err(e)) => LineError::Io(e.to_string()),
            Err(_) => LineError::Timeout(timeout.as_millis() as u64),
        };
        Err(self.line_error(outcome))
    }

    /// Reads the next line, waiting at most `timeout`.
    pub async fn read_line_within(&mut self, timeout: Duration) -> Result<String, LinkError> {
        let outcome = match self.stream.as_mut() {
            Some(Connection::Stream(stream)) => read_line(stream, &mut self.framer, timeout).await,
            Some(Connection::Messages(session)) => {
                read_message_line(session.as_mut(), &mut self.framer, timeout).await
            }
            None => Err(LineError::Closed),
        };
        outcome.map_err(|e| self.line_error(e))
    }

    /// Reads the next line within the link's timeout.
    pub async fn read_line(&mut self) -> Result<String, LinkError> {
        self.read_line_within(self.timeout).await
    }

    /// Sends a line and reads one line back. Over a message session with nothing left over
    /// from earlier replies, the two go as one query (a round trip fewer on VXI-11).
    pub async fn query(&mut self, line: &str) -> Result<String, LinkError> {
        self.connected().await?;
        if !self.framer.is_empty() || !matches!(self.stream, Some(Connection::Messages(_))) {
            self.send(line).await?;
            return self.read_line().await;
        }
        let bytes = format!("{line}{}", self.ending);
        let timeout = self.timeout;
        let Some(Connection::Messages(session)) = self.stream.as_mut() else {
            return Err(self.line_error(LineError::Closed));
        };
        let outcome =
            match tokio::time::timeout(timeout, session.query_message(bytes.as_bytes(), timeout))
                .await
            {
                Ok(Ok(mut message)) => {
                    if message.last() != Some(&b'\n') {
                        message.push(b'\n');
                    }
                    self.framer.push(&message);
                    match self.framer.next_line() {
                        Ok(Some(line)) => return Ok(line),
                        Ok(None) => LineError::Closed,
                        Err(e) => e,
                    }
                }
                Ok(Err(e)) => message_error(e, timeout),
                Err(_) => LineError::Timeout(timeout.as_millis() as u64),
            };
        Err(self.line_error(outcome))
    }
}

/// A message session's failure as a line error.
fn message_error(e: std::io::Error, timeout: Duration) -> LineError {
    match e.kind() {
        std::io::ErrorKind::TimedOut => LineError::Timeout(timeout.as_millis() as u64),
        std::io::ErrorKind::UnexpectedEof => LineError::Closed,
        _ => LineError::Io(e.to_string()),
    }
}

/// The next line from a message session: a whole message is read when none is buffered, and a
/// message that ends without a line terminator still ends its last line (END marks it).
async fn read_message_line(
    session: &mut dyn super::MessageSession,
    framer: &mut LineFramer,
    timeout: Duration,
) -> Result<String, LineError> {
    let work = async {
        loop {
            if let Some(line) = framer.next_line()? {
                return Ok(line);
            }
            let mut message = session
                .read_message(timeout)
                .await
                .map_err(|e| message_error(e, timeout))?;
            if message.last() != Some(&b'\n') {
                message.push(b'\n');
            }
            framer.push(&message);
        }
    };
    tokio::time::timeout(timeout, work)
        .await
        .unwrap_or(Err(LineError::Timeout(timeout.as_millis() as u64)))
}

#[cfg(test)]
mod tests {
    use super::*;
    use tokio::io::{AsyncBufReadExt, BufReader};
    use tokio::net::TcpListener;

    /// An echo-like peer on loopback that answers each line with `re:<line>` and hangs up after
    /// `lines_per_connection` lines, accepting `connections` connections.
    async fn peer(lines_per_connection: usize, connections: usize) -> u16 {
        let listener = TcpListener::bind("127.0.0.1:0").await.expect("bind");
        let port = listener.local_addr().expect("addr").port();
        tokio::spawn(async move {
            for _ in 0..connections {
                let (socket, _) = listener.accept().await.expect("accept");
                let (r, mut w) = socket.into_split();
                let mut lines = BufReader::new(r).lines();
                for _ in 0..lines_per_connection {
                    let Ok(Some(line)) = lines.next_line().await else {
                        break;
                    };
                    w.write_all(format!("re:{line}\r\n").as_bytes())
                        .await
                        .expect("write");
                }
            }
        });
        port
    }

    fn tcp(port: u16) -> Address {
        Address::Tcp {
            host: "127.0.0.1".into(),
            port,
        }
    }

    #[tokio::test]
    async fn queries_over_loopback_tcp() {
        let port = peer(2, 1).await;
        let mut link = Link::new(tcp(port), "\n", Duration::from_secs(2));
        assert_eq!(link.query("one").await, Ok("re:one".into()));
        assert_eq!(link.query("two").await, Ok("re:two".into()));
    }

    #[tokio::test]
    async fn a_lost_connection_fails_one_command_and_the_next_reconnects() {
        let port = peer(1, 2).await;
        let mut link = Link::new(tcp(port), "\n", Duration::from_secs(2));
        assert_eq!(link.query("a").await, Ok("re:a".into()));
        let lost = link.query("b").await.expect_err("peer hung up");
        assert!(!lost.is_timeout(), "{lost}");
        assert!(!link.is_connected());
        assert_eq!(link.query("c").await, Ok("re:c".into()));
    }

    #[tokio::test]
    async fn a_silent_peer_times_out() {
        let listener = TcpListener::bind("127.0.0.1:0").await.expect("bind");
        let port = listener.local_addr().expect("addr").port();
        let keep = tokio::spawn(async move { listener.accept().await });
        let mut link = Link::new(tcp(port), "\n", Duration::from_millis(100));
        let e = link.query("*IDN?").await.expect_err("no answer");
        assert!(e.is_timeout(), "{e}");
        keep.abort();
    }

    #[tokio::test]
    async fn a_late_reply_is_not_read_as_the_next_commands() {
        let listener = TcpListener::bind("127.0.0.1:0").await.expect("bind");
        let port = listener.local_addr().expect("addr").port();
        tokio::spawn(async move {
            let (slow, _) = listener.accept().await.expect("accept");
            let (r, mut w) = slow.into_split();
            let mut lines = BufReader::new(r).lines();
            let _ = lines.next_line().await;
            tokio::time::sleep(Duration::from_millis(300)).await;
            let _ = w.write_all(b"late\r\n").await;
            let (quick, _) = listener.accept().await.expect("accept");
            let (r, mut w) = quick.into_split();
            if let Ok(Some(line)) = BufReader::new(r).lines().next_line().await {
                w.write_all(format!("re:{line}\r\n").as_bytes())
                    .await
                    .expect("write");
            }
        });
        let mut link = Link::new(tcp(port), "\n", Duration::from_millis(100));
        assert!(link.query("a").await.expect_err("too slow").is_timeout());
        assert!(!link.is_connected());
        tokio::time::sleep(Duration::from_millis(400)).await;
        assert_eq!(link.query("b").await, Ok("re:b".into()));
    }

    #[tokio::test]
    async fn a_refused_connection_says_where() {
        let listener = TcpListener::bind("127.0.0.1:0").await.expect("bind");
        let port = listener.local_addr().expect("addr").port();
        drop(listener);
        let mut link = Link::new(tcp(port), "\n", Duration::from_millis(500));
        let e = link.query("x").await.expect_err("nobody listens");
        assert!(matches!(e, LinkError::Connect { .. }), "{e}");
        assert!(e.to_string().contains(&format!("127.0.0.1:{port}")), "{e}");
    }
}
