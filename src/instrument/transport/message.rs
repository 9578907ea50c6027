//! Message-based transports (VXI-11, HiSLIP): the instrument takes a whole message, marked as
//! its end, and answers with one. A [`Link`](super::Link) carries lines over them as over a
//! byte stream: each line sent is one message, each message read is the lines it holds.

use super::Stream;
use async_trait::async_trait;
use std::io;
use std::time::Duration;

/// A session with a message-based instrument.
#[async_trait]
pub trait MessageSession: Send {
    /// Sends `bytes` as one message, marked as its end (VXI-11's END, HiSLIP's DataEND).
    async fn write_message(&mut self, bytes: &[u8]) -> io::Result<()>;
    /// Reads one whole response message, waiting at most `timeout` for it.
    async fn read_message(&mut self, timeout: Duration) -> io::Result<Vec<u8>>;
    /// Sends `bytes` and reads the response. A protocol that can ask for the response in the
    /// same round trip (VXI-11: device_write and device_read pipelined) does so here.
    async fn query_message(&mut self, bytes: &[u8], timeout: Duration) -> io::Result<Vec<u8>> {
        self.write_message(bytes).await?;
        self.read_message(timeout).await
    }
}

/// An open connection: a byte stream, or a message session.
pub enum Connection {
    /// Bytes in both directions (raw socket, serial, a program's stdio, a usbtmc device).
    Stream(Box<dyn Stream>),
    /// Whole messages (VXI-11, HiSLIP).
    Messages(Box<dyn MessageSession>),
}
