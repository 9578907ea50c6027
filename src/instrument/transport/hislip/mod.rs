//! HiSLIP 2.0 (IVI Foundation, IVI-6.1 High-Speed LAN Instrument Protocol rev 2.0): the client.
//! Two TCP connections to the same port: the synchronous channel carries Data/DataEND messages,
//! the asynchronous one device clear, locks and status queries. Initialize names the
//! sub-address (`hislip0`) and the server answers with a session id the asynchronous channel
//! presents in AsyncInitialize (§6.1). Synchronized mode: one message out, its response back.
//!
//! Message ids start at 0xFFFF_FF00 and grow by two per message sent (§3.1.2); a response
//! carries the id of the DataEND it answers, so one to an earlier message (left over from a
//! timed-out query) is recognised and dropped.

pub mod message;

use super::message::MessageSession;
use async_trait::async_trait;
use message::{Kind, Message, FIRST_MESSAGE_ID, MAX_PAYLOAD_BYTES, PROTOCOL_VERSION, VENDOR_ID};
use std::io;
use std::time::Duration;
use tokio::io::{AsyncWriteExt, BufReader};
use tokio::net::TcpStream;

/// A channel read through a buffer (a message's header and payload in one read); writes go
/// straight through.
type Channel = BufReader<TcpStream>;

/// A session with one HiSLIP server.
pub struct HislipClient {
    sync: Channel,
    asynchronous: Channel,
    session_id: u16,
    server_version: u16,
    /// The id the next message sent carries.
    next_id: u32,
    /// The id of the last DataEND sent: responses carry it.
    last_end_id: u32,
    /// True once the response to the last message was read whole (the RMT-delivered bit).
    delivered: bool,
    max_message: u64,
    timeout: Duration,
}

fn invalid(what: impl std::fmt::Display) -> io::Error {
    io::Error::new(io::ErrorKind::InvalidData, what.to_string())
}

fn read_error(e: message::ReadError) -> io::Error {
    match e {
        message::ReadError::Io(e) => e,
        message::ReadError::Header(h) => invalid(format!("HiSLIP: {h}")),
    }
}

async fn within<T>(
    timeout: Duration,
    what: &str,
    work: impl std::future::Future<Output = io::Result<T>>,
) -> io::Result<T> {
    tokio::time::timeout(timeout, work).await.map_err(|_| {
        io::Error::new(
            io::ErrorKind::TimedOut,
            format!("no {what} within {} ms", timeout.as_millis()),
        )
    })?
}

async fn connect_tcp(host: &str, port: u16, timeout: Duration) -> io::Result<Channel> {
    let stream = within(timeout, "connection", async {
        TcpStream::connect((host, port)).await
    })
    .await?;
    stream.set_nodelay(true)?;
    Ok(BufReader::new(stream))
}

/// The next message on `stream`, a closed connection an error.
async fn next(stream: &mut Channel) -> io::Result<Message> {
    message::read(stream)
        .await
        .map_err(read_error)?
        .ok_or_else(|| {
            io::Error::new(
                io::ErrorKind::UnexpectedEof,
                "the HiSLIP server closed the connection",
            )
        })
}

/// An Error or FatalError from the server as an I/O error.
fn server_error(m: &Message) -> io::Error {
    let fatal = m.kind == Kind::FatalError as u8;
    io::Error::other(format!(
        "HiSLIP server {}error {}: {}",
        if fatal { "fatal " } else { "" },
        m.control,
        String::from_utf8_lossy(&m.payload)
    ))
}

/// Reads `stream` until a message of `kind`; Error and FatalError end the wait.
async fn expect(stream: &mut Channel, kind: Kind) -> io::Result<Message> {
    loop {
        let m = next(stream).await?;
        match m.kind() {
            Some(k) if k == kind => return Ok(m),
            Some(Kind::Error) | Some(Kind::FatalError) => return Err(server_error(&m)),
            _ => continue,
        }
    }
}

impl HislipClient {
    /// Opens both channels to `host:port` for `sub_address`, each step within `timeout`.
    pub async fn connect(
        host: &str,
        port: u16,
        sub_address: &str,
        timeout: Duration,
    ) -> io::Result<Self> {
        let mut sync = connect_tcp(host, port, timeout).await?;
        let init = Message::new(
            Kind::Initialize,
            0,
            (u32::from(PROTOCOL_VERSION) << 16) | u32::from(VENDOR_ID),
            sub_address.as_bytes().to_vec(),
        );
        sync.write_all(&init.encode()).await?;
        let response = within(
            timeout,
            "InitializeResponse",
            expect(&mut sync, Kind::InitializeResponse),
        )
        .await?;
        let server_version = (response.parameter >> 16) as u16;
        let session_id = response.parameter as u16;
        let mut asynchronous = connect_tcp(host, port, timeout).await?;
        let init = Message::new(Kind::AsyncInitialize, 0, u32::from(session_id), Vec::new());
        asynchronous.write_all(&init.encode()).await?;
        within(
            timeout,
            "AsyncInitializeResponse",
            expect(&mut asynchronous, Kind::AsyncInitializeResponse),
        )
        .await?;
        let ask = Message::new(
            Kind::AsyncMaximumMessageSize,
            0,
            0,
            MAX_PAYLOAD_BYTES.to_be_bytes().to_vec(),
        );
        asynchronous.write_all(&ask.encode()).await?;
        let answer = within(
            timeout,
            "AsyncMaximumMessageSizeResponse",
            expect(&mut asynchronous, Kind::AsyncMaximumMessageSizeResponse),
        )
        .await?;
        let max_message = answer
            .payload
            .get(..8)
            .map(|b| u64::from_be_bytes(b.try_into().unwrap_or([0; 8])))
            .filter(|m| *m > 0)
            .unwrap_or(MAX_PAYLOAD_BYTES)
            .min(MAX_PAYLOAD_BYTES);
        Ok(HislipClient {
            sync,
            asynchronous,
            session_id,
            server_version,
            next_id: FIRST_MESSAGE_ID,
            last_end_id: FIRST_MESSAGE_ID.wrapping_sub(2),
            delivered: false,
            max_message,
            timeout,
        })
    }

    /// The session id the server gave.
    pub fn session_id(&self) -> u16 {
        self.session_id
    }

    /// The server's protocol version (major in the high byte).
    pub fn server_version(&self) -> u16 {
        self.server_version
    }

    /// Device clear (§6.12): AsyncDeviceClear, its acknowledgement, DeviceClearComplete on the
    /// synchronous channel, and its acknowledgement, with whatever the server had queued
    /// dropped on the way; message ids start again.
    pub async fn clear(&mut self) -> io::Result<()> {
        let timeout = self.timeout;
        let ask = Message::new(Kind::AsyncDeviceClear, 0, 0, Vec::new());
        self.asynchronous.write_all(&ask.encode()).await?;
        let ack = within(
            timeout,
            "AsyncDeviceClearAcknowledge",
            expect(&mut self.asynchronous, Kind::AsyncDeviceClearAcknowledge),
        )
        .await?;
        let complete = Message::new(Kind::DeviceClearComplete, ack.control, 0, Vec::new());
        self.sync.write_all(&complete.encode()).await?;
        within(
            timeout,
            "DeviceClearAcknowledge",
            expect(&mut self.sync, Kind::DeviceClearAcknowledge),
        )
        .await?;
        self.next_id = FIRST_MESSAGE_ID;
        self.last_end_id = FIRST_MESSAGE_ID.wrapping_sub(2);
        self.delivered = false;
        Ok(())
    }

    /// Asks for the exclusive lock, waiting up to `wait` (§6.5): true when granted.
    pub async fn lock(&mut self, wait: Duration) -> io::Result<bool> {
        let ms = u32::try_from(wait.as_millis()).unwrap_or(u32::MAX);
        let ask = Message::new(Kind::AsyncLock, 1, ms, Vec::new());
        self.asynchronous.write_all(&ask.encode()).await?;
        let answer = within(
            self.timeout + wait,
            "AsyncLockResponse",
            expect(&mut self.asynchronous, Kind::AsyncLockResponse),
        )
        .await?;
        match answer.control {
            1 => Ok(true),
            0 => Ok(false),
            _ => Err(io::Error::other("HiSLIP: the lock request was in error")),
        }
    }

    /// Releases the lock: true when one was held.
    pub async fn unlock(&mut self) -> io::Result<bool> {
        let release = Message::new(Kind::AsyncLock, 0, self.last_end_id, Vec::new());
        self.asynchronous.write_all(&release.encode()).await?;
        let answer = within(
            self.timeout,
            "AsyncLockResponse",
            expect(&mut self.asynchronous, Kind::AsyncLockResponse),
        )
        .await?;
        Ok(answer.control == 1)
    }

    /// The status byte, asked on the asynchronous channel (§6.10).
    pub async fn status(&mut self) -> io::Result<u8> {
        let ask = Message::new(
            Kind::AsyncStatusQuery,
            u8::from(self.delivered),
            self.last_end_id,
            Vec::new(),
        );
        self.asynchronous.write_all(&ask.encode()).await?;
        let answer = within(
            self.timeout,
            "AsyncStatusResponse",
            expect(&mut self.asynchronous, Kind::AsyncStatusResponse),
        )
        .await?;
        Ok(answer.control)
    }

    fn take_id(&mut self) -> u32 {
        let id = self.next_id;
        self.next_id = self.next_id.wrapping_add(2);
        id
    }
}

#[async_trait]
impl MessageSession for HislipClient {
    async fn write_message(&mut self, bytes: &[u8]) -> io::Result<()> {
        let chunk = usize::try_from(self.max_message)
            .unwrap_or(usize::MAX)
            .max(1);
        let pieces: Vec<&[u8]> = if bytes.is_empty() {
            vec![bytes]
        } else {
            bytes.chunks(chunk).collect()
        };
        let last = pieces.len() - 1;
        let mut wire = Vec::with_capacity(bytes.len() + 16 * pieces.len());
        for (i, piece) in pieces.into_iter().enumerate() {
            let id = self.take_id();
            let kind = if i == last { Kind::DataEnd } else { Kind::Data };
            if i == last {
                self.last_end_id = id;
            }
            let m = Message::new(kind, u8::from(self.delivered), id, piece.to_vec());
            wire.extend_from_slice(&m.encode());
        }
        self.delivered = false;
        self.sync.write_all(&wire).await
    }

    async fn read_message(&mut self, timeout: Duration) -> io::Result<Vec<u8>> {
        let work = async {
            let mut data = Vec::new();
            loop {
                let m = next(&mut self.sync).await?;
                match m.kind() {
                    Some(Kind::Data) | Some(Kind::DataEnd) if m.parameter != self.last_end_id => {
                        // A response to an earlier message: nobody waits for it any more.
                        tracing::debug!(
                            "HiSLIP: dropped a response to message {:#x} (waiting for {:#x})",
                            m.parameter,
                            self.last_end_id
                        );
                        data.clear();
                    }
                    Some(Kind::Data) => data.extend_from_slice(&m.payload),
                    Some(Kind::DataEnd) => {
                        data.extend_from_slice(&m.payload);
                        self.delivered = true;
                        return Ok(data);
                    }
                    Some(Kind::Error) | Some(Kind::FatalError) => return Err(server_error(&m)),
                    _ => {}
                }
                if data.len() as u64 > MAX_PAYLOAD_BYTES {
                    return Err(invalid("a HiSLIP response longer than 1 MiB"));
                }
            }
        };
        within(timeout, "HiSLIP response", work).await
    }
}
