//! Line framing for text instruments: bytes arrive in arbitrary pieces (a line split across
//! reads, several lines in one read, CRLF or LF endings); this turns them into whole lines.
//!
//! [`LineFramer`] is pure and knows nothing of sockets or time, so its cases are tested apart;
//! [`read_line`] adds the per-line timeout over any async reader.

use std::time::Duration;
use tokio::io::{AsyncRead, AsyncReadExt};

/// Longest line accepted; anything longer means the peer is not speaking a line protocol.
pub const MAX_LINE_BYTES: usize = 64 * 1024;

/// Accumulates bytes and yields complete lines without their terminator.
#[derive(Debug, Default, Clone)]
pub struct LineFramer {
    pending: Vec<u8>,
}

/// Why no line could be produced.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum LineError {
    /// No complete line arrived in time.
    #[error("no reply within {0} ms")]
    Timeout(u64),
    /// The peer closed the connection.
    #[error("the connection was closed by the other end")]
    Closed,
    /// The connection failed.
    #[error("connection error: {0}")]
    Io(String),
    /// A line exceeded [`MAX_LINE_BYTES`].
    #[error("a line longer than {MAX_LINE_BYTES} bytes arrived")]
    TooLong,
}

impl LineFramer {
    /// An empty framer.
    pub fn new() -> Self {
        Self::default()
    }

    /// Adds bytes as they were read.
    pub fn push(&mut self, bytes: &[u8]) {
        self.pending.extend_from_slice(bytes);
    }

    /// The next complete line, if one is buffered. LF ends a line; a CR before it is dropped, so
    /// CRLF and LF peers read the same. Invalid UTF-8 is replaced rather than refused: the
    /// response patterns decide what a line means.
    pub fn next_line(&mut self) -> Result<Option<String>, LineError> {
        match self.pending.iter().position(|b| *b == b'\n') {
            Some(end) => {
                let mut line: Vec<u8> = self.pending.drain(..=end).collect();
                line.pop();
                if line.last() == Some(&b'\r') {
                    line.pop();
                }
                Ok(Some(String::from_utf8_lossy(&line).into_owned()))
            }
            None if self.pending.len() > MAX_LINE_BYTES => Err(LineError::TooLong),
            None => Ok(None),
        }
    }

    /// True when nothing is buffered.
    pub fn is_empty(&self) -> bool {
        self.pending.is_empty()
    }

    /// Forgets everything buffered (after a reconnect, old bytes belong to nobody).
    pub fn clear(&mut self) {
        self.pending.clear();
    }
}

/// Reads from `reader` until `framer` holds a complete line, waiting at most `timeout`.
pub async fn read_line<R: AsyncRead + Unpin + ?Sized>(
    reader: &mut R,
    framer: &mut LineFramer,
    timeout: Duration,
) -> Result<String, LineError> {
    let work = async {
        let mut buf = [0u8; 4096];
        loop {
            if let Some(line) = framer.next_line()? {
                return Ok(line);
            }
            match reader.read(&mut buf).await {
                Ok(0) => return Err(LineError::Closed),
                Ok(n) => framer.push(&buf[..n]),
                Err(e) => return Err(LineError::Io(e.to_string())),
            }
        }
    };
    tokio::time::timeout(timeout, work)
        .await
        .unwrap_or(Err(LineError::Timeout(timeout.as_millis() as u64)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn joins_a_line_split_across_reads() {
        let mut f = LineFramer::new();
        f.push(b"xr 1 t1=12");
        assert_eq!(f.next_line(), Ok(None));
        f.push(b"34 st=ok\r");
        assert_eq!(f.next_line(), Ok(None));
        f.push(b"\nnext");
        assert_eq!(f.next_line(), Ok(Some("xr 1 t1=1234 st=ok".into())));
        assert_eq!(f.next_line(), Ok(None));
    }

    #[test]
    fn splits_several_lines_in_one_read_and_accepts_lf_and_crlf() {
        let mut f = LineFramer::new();
        f.push(b"a\r\nb\n\nc\r\n");
        for want in ["a", "b", "", "c"] {
            assert_eq!(f.next_line(), Ok(Some(want.into())));
        }
        assert_eq!(f.next_line(), Ok(None));
    }

    #[test]
    fn refuses_an_endless_line() {
        let mut f = LineFramer::new();
        f.push(&vec![b'x'; MAX_LINE_BYTES + 1]);
        assert_eq!(f.next_line(), Err(LineError::TooLong));
    }

    #[tokio::test]
    async fn times_out_on_a_partial_line_and_keeps_it() {
        let (mut client, mut server) = tokio::io::duplex(64);
        tokio::io::AsyncWriteExt::write_all(&mut server, b"half")
            .await
            .expect("write");
        let mut f = LineFramer::new();
        let got = read_line(&mut client, &mut f, Duration::from_millis(50)).await;
        assert_eq!(got, Err(LineError::Timeout(50)));
        tokio::io::AsyncWriteExt::write_all(&mut server, b" done\n")
            .await
            .expect("write");
        let got = read_line(&mut client, &mut f, Duration::from_millis(500)).await;
        assert_eq!(got, Ok("half done".into()));
        drop(server);
        let got = read_line(&mut client, &mut f, Duration::from_millis(500)).await;
        assert_eq!(got, Err(LineError::Closed));
    }
}
