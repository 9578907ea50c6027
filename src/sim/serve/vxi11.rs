//! The served instrument over VXI-11 (VXI-11 rev 1.0): a portmapper (RFC 1833, version 2,
//! GETPORT and NULL only) that points at the core channel, and the core channel itself —
//! create_link, device_write with END, device_read (END, termChar, requestSize),
//! device_readstb, device_clear, device_lock/unlock, destroy_link, and error codes for the
//! rest. The abort and interrupt channels are not offered (create_link answers abortPort 0;
//! create_intr_chan is "operation not supported").
//!
//! A malformed record ends only its own connection: other clients' links go on.

use super::message_device::MessageDevice;
use crate::instrument::transport::vxi11::core::{
    flags, proc_num, reason, CreateLink, ErrorCode, Generic, LinkCreated, Lock, Read, ReadResult,
    Write, DEVICE_CORE, DEVICE_CORE_VERSION,
};
use crate::instrument::transport::vxi11::rpc::{self, AcceptStat, RpcError};
use crate::instrument::transport::vxi11::xdr::{Decoder, Encoder};
use std::collections::HashMap;
use std::sync::atomic::{AtomicI32, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Duration;
use tokio::io::{AsyncRead, AsyncWrite, AsyncWriteExt, BufReader};
use tokio::sync::Notify;

/// The largest device_write data taken in one call (create_link's maxRecvSize).
pub const MAX_RECV_SIZE: u32 = 64 * 1024;
/// Longest a device_read with nothing to read waits, whatever io_timeout asks: one client's
/// patience must not hold its connection's task for ever.
const LONGEST_READ_WAIT: Duration = Duration::from_secs(60);

/// The device's lock, held by at most one link, and the link ids handed out.
#[derive(Default)]
pub struct Links {
    holder: Mutex<Option<i32>>,
    released: Notify,
    next_lid: AtomicI32,
}

impl Links {
    fn holder(&self) -> Option<i32> {
        self.holder.lock().map_or(None, |h| *h)
    }

    /// Takes the lock for `lid`, waiting up to `wait` for another link to let it go.
    async fn acquire(&self, lid: i32, wait: Duration) -> bool {
        self.wait_for(wait, |holder| {
            if holder.is_none_or(|h| h == lid) {
                Some(Some(lid))
            } else {
                None
            }
        })
        .await
    }

    /// Waits up to `wait` until no other link than `lid` holds the lock.
    async fn free_for(&self, lid: i32, wait: Duration) -> bool {
        self.wait_for(wait, |holder| {
            holder.is_none_or(|h| h == lid).then_some(holder)
        })
        .await
    }

    /// Applies `step` to the holder once it returns a new holder, waiting up to `wait`.
    async fn wait_for(
        &self,
        wait: Duration,
        step: impl Fn(Option<i32>) -> Option<Option<i32>>,
    ) -> bool {
        let deadline = tokio::time::Instant::now() + wait;
        loop {
            let notified = self.released.notified();
            tokio::pin!(notified);
            notified.as_mut().enable();
            if let Ok(mut holder) = self.holder.lock() {
                if let Some(next) = step(*holder) {
                    *holder = next;
                    return true;
                }
            } else {
                return false;
            }
            if tokio::time::timeout_at(deadline, notified).await.is_err() {
                return false;
            }
        }
    }

    /// Lets the lock go if `lid` holds it; true when it did.
    fn release(&self, lid: i32) -> bool {
        let Ok(mut holder) = self.holder.lock() else {
            return false;
        };
        if *holder == Some(lid) {
            *holder = None;
            self.released.notify_waiters();
            true
        } else {
            false
        }
    }
}

/// Answers portmapper calls on one connection: GETPORT for the VXI-11 core program over TCP
/// gives `core_port`, anything else 0 (RFC 1833: "not registered").
pub async fn serve_portmapper<S: AsyncRead + AsyncWrite + Unpin>(
    mut stream: S,
    core_port: u16,
) -> std::io::Result<()> {
    while let Some(record) = rpc::read_record(&mut stream).await? {
        let reply = match portmapper_reply(&record, core_port) {
            Some(reply) => reply,
            None => return Ok(()),
        };
        stream.write_all(&reply).await?;
    }
    Ok(())
}

/// The reply to one portmapper record; `None` when it is not an RPC call at all.
pub fn portmapper_reply(record: &[u8], core_port: u16) -> Option<Vec<u8>> {
    let call = match rpc::decode_call(record) {
        Ok(call) => call,
        Err(RpcError::Version(_)) => {
            return Some(rpc::rpc_mismatch(Decoder::new(record).u32().ok()?))
        }
        Err(_) => return None,
    };
    let stat = if call.prog != rpc::PMAP_PROG {
        AcceptStat::ProgUnavail
    } else if call.vers != rpc::PMAP_VERS {
        AcceptStat::ProgMismatch
    } else {
        match call.proc_num {
            0 => {
                return Some(rpc::finish_record(rpc::reply_header(
                    call.xid,
                    AcceptStat::Success,
                )))
            }
            rpc::PMAPPROC_GETPORT => {
                let mut d = Decoder::new(call.args);
                let mapping = (|| {
                    Ok::<_, crate::instrument::transport::vxi11::xdr::XdrError>((
                        d.u32()?,
                        d.u32()?,
                        d.u32()?,
                        d.u32()?,
                    ))
                })();
                match mapping {
                    Ok((prog, vers, prot, _)) => {
                        let port = if prog == DEVICE_CORE
                            && vers == DEVICE_CORE_VERSION
                            && prot == rpc::IPPROTO_TCP
                        {
                            u32::from(core_port)
                        } else {
                            0
                        };
                        let mut e = rpc::reply_header(call.xid, AcceptStat::Success);
                        e.u32(port);
                        return Some(rpc::finish_record(e));
                    }
                    Err(_) => AcceptStat::GarbageArgs,
                }
            }
            _ => AcceptStat::ProcUnavail,
        }
    };
    Some(rpc::finish_record(rpc::reply_header(call.xid, stat)))
}

/// One link's pending bytes: a message being written, and a response being read.
#[derive(Default)]
struct LinkBuffers {
    input: Vec<u8>,
    output: Vec<u8>,
}

/// What one core-channel record leads to.
enum Outcome {
    /// Send this reply record.
    Reply(Vec<u8>),
    /// Close the connection (a record that is no RPC call, or an injected drop).
    HangUp,
}

/// Serves the core channel on one connection. Links made here end with it (and any lock they
/// held is let go).
pub async fn serve_core<S: AsyncRead + AsyncWrite + Unpin, D: MessageDevice>(
    stream: S,
    device: Arc<D>,
    links: Arc<Links>,
) -> std::io::Result<()> {
    let mut mine: HashMap<i32, LinkBuffers> = HashMap::new();
    // Records are read through a buffer, and replies held while the next record is already
    // there: a client's pipelined device_write and device_read cost one read and one write.
    let mut reader = BufReader::new(stream);
    let mut replies = Vec::new();
    let outcome = async {
        while let Some(record) = rpc::read_record(&mut reader).await? {
            match core_call(&record, device.as_ref(), &links, &mut mine).await {
                Outcome::Reply(reply) => replies.extend_from_slice(&reply),
                Outcome::HangUp => break,
            }
            if !rpc::record_buffered(reader.buffer()) {
                reader.get_mut().write_all(&replies).await?;
                replies.clear();
            }
        }
        Ok(())
    }
    .await;
    for lid in mine.keys() {
        links.release(*lid);
    }
    outcome
}

fn ms(v: u32) -> Duration {
    Duration::from_millis(u64::from(v))
}

fn error_only(xid: u32, code: ErrorCode) -> Outcome {
    let mut e = rpc::reply_header(xid, AcceptStat::Success);
    e.i32(code as i32);
    Outcome::Reply(rpc::finish_record(e))
}

async fn core_call<D: MessageDevice>(
    record: &[u8],
    device: &D,
    links: &Links,
    mine: &mut HashMap<i32, LinkBuffers>,
) -> Outcome {
    let call = match rpc::decode_call(record) {
        Ok(call) => call,
        Err(RpcError::Version(_)) => match Decoder::new(record).u32() {
            Ok(xid) => return Outcome::Reply(rpc::rpc_mismatch(xid)),
            Err(_) => return Outcome::HangUp,
        },
        Err(_) => return Outcome::HangUp,
    };
    let xid = call.xid;
    if call.prog != DEVICE_CORE {
        return Outcome::Reply(rpc::finish_record(rpc::reply_header(
            xid,
            AcceptStat::ProgUnavail,
        )));
    }
    if call.vers != DEVICE_CORE_VERSION {
        return Outcome::Reply(rpc::finish_record(rpc::reply_header(
            xid,
            AcceptStat::ProgMismatch,
        )));
    }
    let garbage = || {
        Outcome::Reply(rpc::finish_record(rpc::reply_header(
            xid,
            AcceptStat::GarbageArgs,
        )))
    };
    let mut d = Decoder::new(call.args);
    let mut reply = rpc::reply_header(xid, AcceptStat::Success);
    match call.proc_num {
        proc_num::CREATE_LINK => {
            let Ok(create) = CreateLink::decode(&mut d) else {
                return garbage();
            };
            let mut created = LinkCreated {
                error: 0,
                lid: 0,
                abort_port: 0,
                max_recv_size: MAX_RECV_SIZE,
            };
            let name_ok = create
                .device
                .strip_prefix("inst")
                .is_some_and(|n| !n.is_empty() && n.chars().all(|c| c.is_ascii_digit()));
            if !name_ok {
                created.error = ErrorCode::InvalidAddress as i32;
            } else if mine.len() >= 16 {
                created.error = ErrorCode::OutOfResources as i32;
            } else {
                let lid = links
                    .next_lid
                    .fetch_add(1, Ordering::Relaxed)
                    .wrapping_add(1);
                if create.lock_device && !links.acquire(lid, ms(create.lock_timeout_ms)).await {
                    created.error = ErrorCode::Locked as i32;
                } else {
                    mine.insert(lid, LinkBuffers::default());
                    created.lid = lid;
                }
            }
            created.encode(&mut reply);
        }
        proc_num::DEVICE_WRITE => {
            let Ok(w) = Write::decode(&mut d) else {
                return garbage();
            };
            let (code, taken) = match mine.get_mut(&w.lid) {
                None => (ErrorCode::InvalidLink, 0),
                Some(_) if !may_use(links, w.lid, w.flags, w.lock_timeout_ms).await => {
                    (ErrorCode::Locked, 0)
                }
                Some(buffers) if buffers.input.len() + w.data.len() > rpc::MAX_RECORD_BYTES => {
                    buffers.input.clear();
                    (ErrorCode::OutOfResources, 0)
                }
                Some(buffers) => {
                    buffers.input.extend_from_slice(w.data);
                    if w.flags & flags::END != 0 {
                        let message = std::mem::take(&mut buffers.input);
                        match device.execute(&message).await {
                            Some(response) => buffers.output.extend_from_slice(&response),
                            None => return Outcome::HangUp,
                        }
                    }
                    (ErrorCode::NoError, w.data.len() as u32)
                }
            };
            reply.i32(code as i32).u32(taken);
        }
        proc_num::DEVICE_READ => {
            let Ok(r) = Read::decode(&mut d) else {
                return garbage();
            };
            let empty = |code: ErrorCode, reply: &mut Encoder| {
                ReadResult {
                    error: code as i32,
                    reason: 0,
                    data: &[],
                }
                .encode(reply)
            };
            if !mine.contains_key(&r.lid) {
                empty(ErrorCode::InvalidLink, &mut reply);
            } else if !may_use(links, r.lid, r.flags, r.lock_timeout_ms).await {
                empty(ErrorCode::Locked, &mut reply);
            } else {
                let buffers = mine.get_mut(&r.lid).expect("checked above");
                if buffers.output.is_empty() {
                    // Nothing was asked: the instrument stays silent until io_timeout, as
                    // one on a bus would.
                    tokio::time::sleep(ms(r.io_timeout_ms).min(LONGEST_READ_WAIT)).await;
                    empty(ErrorCode::IoTimeout, &mut reply);
                } else {
                    let (data, why) = take_response(&mut buffers.output, &r);
                    ReadResult {
                        error: 0,
                        reason: why,
                        data: &data,
                    }
                    .encode(&mut reply);
                }
            }
        }
        proc_num::DEVICE_READSTB => {
            let Ok(g) = Generic::decode(&mut d) else {
                return garbage();
            };
            if mine.contains_key(&g.lid) {
                reply.i32(0).u32(u32::from(device.status_byte()));
            } else {
                reply.i32(ErrorCode::InvalidLink as i32).u32(0);
            }
        }
        proc_num::DEVICE_TRIGGER
        | proc_num::DEVICE_REMOTE
        | proc_num::DEVICE_LOCAL
        | proc_num::DEVICE_CLEAR => {
            let Ok(g) = Generic::decode(&mut d) else {
                return garbage();
            };
            let code = match mine.get_mut(&g.lid) {
                None => ErrorCode::InvalidLink,
                Some(_) if !may_use(links, g.lid, g.flags, g.lock_timeout_ms).await => {
                    ErrorCode::Locked
                }
                Some(buffers) => {
                    if call.proc_num == proc_num::DEVICE_CLEAR {
                        buffers.input.clear();
                        buffers.output.clear();
                    }
                    ErrorCode::NoError
                }
            };
            return error_only(xid, code);
        }
        proc_num::DEVICE_LOCK => {
            let Ok(l) = Lock::decode(&mut d) else {
                return garbage();
            };
            let wait = if l.flags & flags::WAITLOCK != 0 {
                ms(l.lock_timeout_ms)
            } else {
                Duration::ZERO
            };
            let code = if !mine.contains_key(&l.lid) {
                ErrorCode::InvalidLink
            } else if links.acquire(l.lid, wait).await {
                ErrorCode::NoError
            } else {
                ErrorCode::Locked
            };
            return error_only(xid, code);
        }
        proc_num::DEVICE_UNLOCK | proc_num::DESTROY_LINK => {
            let Ok(lid) = d.i32() else {
                return garbage();
            };
            let code = if !mine.contains_key(&lid) {
                ErrorCode::InvalidLink
            } else if call.proc_num == proc_num::DESTROY_LINK {
                mine.remove(&lid);
                links.release(lid);
                ErrorCode::NoError
            } else if links.release(lid) {
                ErrorCode::NoError
            } else {
                ErrorCode::NoLock
            };
            return error_only(xid, code);
        }
        proc_num::DEVICE_DOCMD => {
            reply.i32(ErrorCode::NotSupported as i32).opaque(&[]);
        }
        proc_num::DEVICE_ENABLE_SRQ | proc_num::CREATE_INTR_CHAN | proc_num::DESTROY_INTR_CHAN => {
            return error_only(xid, ErrorCode::NotSupported);
        }
        _ => {
            return Outcome::Reply(rpc::finish_record(rpc::reply_header(
                xid,
                AcceptStat::ProcUnavail,
            )))
        }
    }
    Outcome::Reply(rpc::finish_record(reply))
}

/// True when `lid` may use the device now: no other link holds the lock, or it let go within
/// lock_timeout (with WAITLOCK).
async fn may_use(links: &Links, lid: i32, flags: u32, lock_timeout_ms: u32) -> bool {
    match links.holder() {
        None => true,
        Some(h) if h == lid => true,
        Some(_) if flags & flags::WAITLOCK != 0 => links.free_for(lid, ms(lock_timeout_ms)).await,
        Some(_) => false,
    }
}

/// The next piece of a response for a device_read: up to requestSize bytes, ending early after
/// termChar when asked (VXI-11 §B.6.12), with its reason bits.
fn take_response(output: &mut Vec<u8>, r: &Read) -> (Vec<u8>, i32) {
    let mut n = output.len().min(r.request_size.max(1) as usize);
    let mut why = 0;
    if r.flags & flags::TERMCHRSET != 0 {
        if let Some(at) = output[..n].iter().position(|b| *b == r.term_char) {
            n = at + 1;
            why |= reason::CHR;
        }
    }
    let data: Vec<u8> = output.drain(..n).collect();
    if output.is_empty() {
        why |= reason::END;
    } else if why == 0 {
        why |= reason::REQCNT;
    }
    (data, why)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn read(size: u32, flags: u32, term: u8) -> Read {
        Read {
            lid: 1,
            request_size: size,
            io_timeout_ms: 0,
            lock_timeout_ms: 0,
            flags,
            term_char: term,
        }
    }

    #[test]
    fn a_response_is_read_in_pieces_with_their_reasons() {
        // VXI-11 §B.6.12: REQCNT when requestSize ends it, CHR at termChar, END at its end.
        let mut out = b"1,2\n3\n".to_vec();
        assert_eq!(
            take_response(&mut out, &read(2, 0, 0)),
            (b"1,".to_vec(), reason::REQCNT)
        );
        assert_eq!(
            take_response(&mut out, &read(100, flags::TERMCHRSET, b'\n')),
            (b"2\n".to_vec(), reason::CHR)
        );
        assert_eq!(
            take_response(&mut out, &read(100, flags::TERMCHRSET, b'\n')),
            (b"3\n".to_vec(), reason::CHR | reason::END)
        );
    }

    #[test]
    fn the_portmapper_points_at_the_core_channel_only() {
        let ask = |prog: u32, vers: u32, prot: u32| {
            let mut e = rpc::call_header(5, rpc::PMAP_PROG, rpc::PMAP_VERS, rpc::PMAPPROC_GETPORT);
            e.u32(prog).u32(vers).u32(prot).u32(0);
            let record = rpc::finish_record(e);
            let reply = portmapper_reply(&record[4..], 4321).expect("a call");
            let results = rpc::decode_reply(&reply[4..], 5)
                .expect("accepted")
                .to_vec();
            Decoder::new(&results).u32().expect("port")
        };
        assert_eq!(ask(DEVICE_CORE, 1, rpc::IPPROTO_TCP), 4321);
        assert_eq!(ask(DEVICE_CORE, 1, 17), 0, "UDP is not offered");
        assert_eq!(ask(0x0607B0, 1, rpc::IPPROTO_TCP), 0, "no abort program");
        assert_eq!(
            portmapper_reply(b"\0\0\0\x01\0\0\0\x01", 1),
            None,
            "a reply is no call"
        );
    }

    #[tokio::test]
    async fn the_lock_is_held_by_one_link_and_waited_for() {
        let links = Arc::new(Links::default());
        assert!(links.acquire(1, Duration::ZERO).await);
        assert!(!links.acquire(2, Duration::from_millis(20)).await);
        let waiting = {
            let links = links.clone();
            tokio::spawn(async move { links.acquire(2, Duration::from_secs(5)).await })
        };
        tokio::time::sleep(Duration::from_millis(20)).await;
        assert!(!links.release(2), "2 holds nothing");
        assert!(links.release(1));
        assert!(waiting.await.expect("task"), "2 got it once 1 let go");
        assert_eq!(links.holder(), Some(2));
    }
}
