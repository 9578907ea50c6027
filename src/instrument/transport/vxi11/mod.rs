//! VXI-11 (VXIbus Consortium, VXI-11 TCP/IP Instrument Protocol Specification rev 1.0): the
//! client. The core channel is looked up once on the host's portmapper (RFC 1833 GETPORT), one
//! link is created (`create_link`) and kept for the connection's life, and each message is a
//! `device_write` with END followed by `device_read`s until END.
//!
//! Codecs are pure and shared with the served instrument (`sim::serve::vxi11`): [`xdr`],
//! [`rpc`], [`core`].

pub mod core;
pub mod rpc;
pub mod xdr;

use self::core::{
    flags, proc_num, reason, CreateLink, Generic, LinkCreated, Lock, Read, ReadResult, Write,
};
use super::message::MessageSession;
use async_trait::async_trait;
use std::io;
use std::time::Duration;
use tokio::io::{AsyncWriteExt, BufReader};
use tokio::net::TcpStream;
use xdr::{Decoder, Encoder};

/// A connection whose replies are read through a buffer: pipelined replies arriving together
/// cost one read. Writes go straight through.
type Channel = BufReader<TcpStream>;

/// Most bytes asked for in one device_read.
const READ_REQUEST_BYTES: u32 = 1 << 16;

/// A link to one VXI-11 device.
pub struct Vxi11Client {
    stream: Channel,
    lid: i32,
    xid: u32,
    timeout: Duration,
    max_recv_size: u32,
}

fn timed_out(timeout: Duration, what: &str) -> io::Error {
    io::Error::new(
        io::ErrorKind::TimedOut,
        format!("no {what} within {} ms", timeout.as_millis()),
    )
}

fn invalid(e: impl std::fmt::Display) -> io::Error {
    io::Error::new(io::ErrorKind::InvalidData, e.to_string())
}

/// A VXI-11 error code as an I/O error (15, I/O timeout, as a timeout).
fn device_error(code: i32, during: &str) -> io::Error {
    let kind = if code == self::core::ErrorCode::IoTimeout as i32 {
        io::ErrorKind::TimedOut
    } else {
        io::ErrorKind::Other
    };
    io::Error::new(
        kind,
        format!(
            "VXI-11 {during}: error {code} ({})",
            self::core::describe(code)
        ),
    )
}

async fn connect_tcp(host: &str, port: u16, timeout: Duration) -> io::Result<Channel> {
    let stream = tokio::time::timeout(timeout, TcpStream::connect((host, port)))
        .await
        .map_err(|_| timed_out(timeout, "connection"))??;
    // Every call waits for its reply: Nagle would hold each one for a delayed ACK.
    stream.set_nodelay(true)?;
    Ok(BufReader::new(stream))
}

/// A call record, whole: mark, header and arguments in one buffer, so it leaves in one write.
fn call_record(
    xid: u32,
    prog: u32,
    vers: u32,
    procedure: u32,
    args: impl FnOnce(&mut Encoder),
) -> Vec<u8> {
    let mut e = rpc::call_header(xid, prog, vers, procedure);
    args(&mut e);
    rpc::finish_record(e)
}

/// The results of the reply to call `xid`; a late reply to an earlier call (one that timed out
/// here) is skipped.
async fn read_reply(stream: &mut Channel, xid: u32) -> io::Result<Vec<u8>> {
    loop {
        let record = rpc::read_record(stream).await?.ok_or_else(|| {
            io::Error::new(
                io::ErrorKind::UnexpectedEof,
                "the server closed the connection",
            )
        })?;
        match rpc::decode_reply(&record, xid) {
            Ok(results) => return Ok(results.to_vec()),
            Err(rpc::RpcError::Xid { got, .. }) if got < xid => continue,
            Err(e) => return Err(invalid(e)),
        }
    }
}

/// One RPC call over `stream`: the record written in one piece, the reply's results returned.
async fn call(
    stream: &mut Channel,
    xid: u32,
    prog: u32,
    vers: u32,
    procedure: u32,
    args: impl FnOnce(&mut Encoder),
) -> io::Result<Vec<u8>> {
    stream
        .write_all(&call_record(xid, prog, vers, procedure, args))
        .await?;
    read_reply(stream, xid).await
}

/// Asks the portmapper at `host:port` for the VXI-11 core channel's TCP port.
pub async fn core_port(host: &str, port: u16, timeout: Duration) -> io::Result<u16> {
    let work = async {
        let mut stream = connect_tcp(host, port, timeout).await?;
        let results = call(
            &mut stream,
            1,
            rpc::PMAP_PROG,
            rpc::PMAP_VERS,
            rpc::PMAPPROC_GETPORT,
            |e| {
                e.u32(self::core::DEVICE_CORE)
                    .u32(self::core::DEVICE_CORE_VERSION)
                    .u32(rpc::IPPROTO_TCP)
                    .u32(0);
            },
        )
        .await?;
        let found = Decoder::new(&results).u32().map_err(invalid)?;
        match u16::try_from(found) {
            Ok(p) if p > 0 => Ok(p),
            _ => Err(io::Error::new(
                io::ErrorKind::NotFound,
                format!("the portmapper on {host}:{port} has no VXI-11 core channel"),
            )),
        }
    };
    tokio::time::timeout(timeout, work)
        .await
        .map_err(|_| timed_out(timeout, "portmapper reply"))?
}

impl Vxi11Client {
    /// Looks up the core channel on the portmapper at `host:portmapper_port` and creates a link
    /// to `device`, each step within `timeout`.
    pub async fn connect(
        host: &str,
        portmapper_port: u16,
        device: &str,
        timeout: Duration,
    ) -> io::Result<Self> {
        let port = core_port(host, portmapper_port, timeout).await?;
        let stream = connect_tcp(host, port, timeout).await?;
        let mut client = Vxi11Client {
            stream,
            lid: 0,
            xid: 0,
            timeout,
            max_recv_size: 1024,
        };
        let create = CreateLink {
            client_id: std::process::id() as i32,
            lock_device: false,
            lock_timeout_ms: 0,
            device: device.to_string(),
        };
        let results = client
            .core_call(proc_num::CREATE_LINK, |e| create.encode(e))
            .await?;
        let created = LinkCreated::decode(&mut Decoder::new(&results)).map_err(invalid)?;
        if created.error != 0 {
            return Err(device_error(
                created.error,
                &format!("create_link to `{device}`"),
            ));
        }
        client.lid = created.lid;
        // The specification asks servers for at least 1024 bytes.
        client.max_recv_size = created.max_recv_size.max(1024);
        Ok(client)
    }

    fn timeout_ms(&self) -> u32 {
        u32::try_from(self.timeout.as_millis()).unwrap_or(u32::MAX)
    }

    async fn core_call(
        &mut self,
        procedure: u32,
        args: impl FnOnce(&mut Encoder),
    ) -> io::Result<Vec<u8>> {
        self.xid = self.xid.wrapping_add(1);
        let (xid, timeout) = (self.xid, self.timeout);
        // The server may take io_timeout itself before answering; allow for the trip.
        let wait = timeout + Duration::from_millis(500);
        tokio::time::timeout(
            wait,
            call(
                &mut self.stream,
                xid,
                self::core::DEVICE_CORE,
                self::core::DEVICE_CORE_VERSION,
                procedure,
                args,
            ),
        )
        .await
        .map_err(|_| timed_out(timeout, "VXI-11 reply"))?
    }

    async fn error_call(
        &mut self,
        procedure: u32,
        what: &str,
        args: impl FnOnce(&mut Encoder),
    ) -> io::Result<()> {
        let results = self.core_call(procedure, args).await?;
        let code = Decoder::new(&results).i32().map_err(invalid)?;
        if code != 0 {
            return Err(device_error(code, what));
        }
        Ok(())
    }

    /// device_clear: the device drops its input and output (IEEE 488.1 device clear).
    pub async fn clear(&mut self) -> io::Result<()> {
        let g = Generic {
            lid: self.lid,
            flags: 0,
            lock_timeout_ms: 0,
            io_timeout_ms: self.timeout_ms(),
        };
        self.error_call(proc_num::DEVICE_CLEAR, "device_clear", |e| g.encode(e))
            .await
    }

    /// device_lock, waiting up to `wait` for a lock another link holds.
    pub async fn lock(&mut self, wait: Duration) -> io::Result<()> {
        let l = Lock {
            lid: self.lid,
            flags: flags::WAITLOCK,
            lock_timeout_ms: u32::try_from(wait.as_millis()).unwrap_or(u32::MAX),
        };
        self.error_call(proc_num::DEVICE_LOCK, "device_lock", |e| l.encode(e))
            .await
    }

    /// device_unlock.
    pub async fn unlock(&mut self) -> io::Result<()> {
        let lid = self.lid;
        self.error_call(proc_num::DEVICE_UNLOCK, "device_unlock", |e| {
            e.i32(lid);
        })
        .await
    }
}

/// Checks device_write's results: no error, every byte taken.
fn check_written(results: &[u8], sent: usize) -> io::Result<()> {
    let mut d = Decoder::new(results);
    let code = d.i32().map_err(invalid)?;
    if code != 0 {
        return Err(device_error(code, "device_write"));
    }
    let taken = d.u32().map_err(invalid)? as usize;
    if taken != sent {
        return Err(io::Error::other(format!(
            "VXI-11 device_write: the device took {taken} of {sent} bytes"
        )));
    }
    Ok(())
}

/// Adds device_read's data to `message`; true once the message is whole.
fn add_read(results: &[u8], message: &mut Vec<u8>) -> io::Result<bool> {
    let got = ReadResult::decode(&mut Decoder::new(results)).map_err(invalid)?;
    if got.error != 0 {
        return Err(device_error(got.error, "device_read"));
    }
    message.extend_from_slice(got.data);
    if message.len() > rpc::MAX_RECORD_BYTES {
        return Err(invalid("a VXI-11 response longer than 1 MiB"));
    }
    Ok(got.reason & (reason::END | reason::CHR) != 0)
}

impl Vxi11Client {
    fn read_args(&self, timeout: Duration) -> Read {
        Read {
            lid: self.lid,
            request_size: READ_REQUEST_BYTES,
            io_timeout_ms: u32::try_from(timeout.as_millis()).unwrap_or(u32::MAX),
            lock_timeout_ms: 0,
            flags: 0,
            term_char: 0,
        }
    }
}

#[async_trait]
impl MessageSession for Vxi11Client {
    /// device_write and device_read leave together, one record after the other, and their
    /// replies come back in order: ONC RPC calls on one TCP connection are served in turn
    /// (RFC 5531 §11 frames them; the server reads the next record after answering one), so
    /// the query costs one round trip rather than two. Should the write fail, the connection
    /// is dropped with the error, the read's reply with it.
    async fn query_message(&mut self, bytes: &[u8], timeout: Duration) -> io::Result<Vec<u8>> {
        if bytes.len() > self.max_recv_size as usize {
            self.write_message(bytes).await?;
            return self.read_message(timeout).await;
        }
        let w = Write {
            lid: self.lid,
            io_timeout_ms: self.timeout_ms(),
            lock_timeout_ms: 0,
            flags: flags::END,
            data: bytes,
        };
        let r = self.read_args(timeout);
        let write_xid = self.xid.wrapping_add(1);
        let read_xid = self.xid.wrapping_add(2);
        self.xid = read_xid;
        let (prog, vers) = (self::core::DEVICE_CORE, self::core::DEVICE_CORE_VERSION);
        let mut wire = call_record(write_xid, prog, vers, proc_num::DEVICE_WRITE, |e| {
            w.encode(e)
        });
        wire.extend_from_slice(&call_record(
            read_xid,
            prog,
            vers,
            proc_num::DEVICE_READ,
            |e| r.encode(e),
        ));
        let wait = timeout + Duration::from_millis(500);
        let stream = &mut self.stream;
        let first = tokio::time::timeout(wait, async {
            stream.write_all(&wire).await?;
            check_written(&read_reply(stream, write_xid).await?, bytes.len())?;
            let mut message = Vec::new();
            let whole = add_read(&read_reply(stream, read_xid).await?, &mut message)?;
            Ok::<_, io::Error>((message, whole))
        })
        .await
        .map_err(|_| timed_out(timeout, "VXI-11 reply"))??;
        let (mut message, whole) = first;
        if !whole {
            message.extend_from_slice(&self.read_message(timeout).await?);
        }
        Ok(message)
    }

    async fn write_message(&mut self, bytes: &[u8]) -> io::Result<()> {
        let chunk = self.max_recv_size as usize;
        let pieces: Vec<&[u8]> = if bytes.is_empty() {
            vec![bytes]
        } else {
            bytes.chunks(chunk).collect()
        };
        let last = pieces.len() - 1;
        for (i, piece) in pieces.into_iter().enumerate() {
            let w = Write {
                lid: self.lid,
                io_timeout_ms: self.timeout_ms(),
                lock_timeout_ms: 0,
                flags: if i == last { flags::END } else { 0 },
                data: piece,
            };
            let results = self
                .core_call(proc_num::DEVICE_WRITE, |e| w.encode(e))
                .await?;
            check_written(&results, piece.len())?;
        }
        Ok(())
    }

    async fn read_message(&mut self, timeout: Duration) -> io::Result<Vec<u8>> {
        let mut message = Vec::new();
        loop {
            let r = self.read_args(timeout);
            let results = self
                .core_call(proc_num::DEVICE_READ, |e| r.encode(e))
                .await?;
            if add_read(&results, &mut message)? {
                return Ok(message);
            }
        }
    }
}
