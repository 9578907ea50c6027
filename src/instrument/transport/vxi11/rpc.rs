//! ONC RPC version 2 (RFC 5531) over TCP: record marking (§11), call and reply headers (§9),
//! and the portmapper's GETPORT (RFC 1833 §3, version 2), as VXI-11 uses them.
//!
//! Encoding builds each record whole (mark, header, arguments) so it leaves in one write: a
//! mark and a body written apart cost a delayed-ACK wait on many stacks.

use super::xdr::{Decoder, Encoder, XdrError};
use tokio::io::{AsyncRead, AsyncReadExt};

/// Largest record accepted: VXI-11 messages are small, so anything larger is a fault, not a
/// reason to allocate.
pub const MAX_RECORD_BYTES: usize = 1 << 20;
/// The last-fragment bit of a record mark (RFC 5531 §11).
const LAST_FRAGMENT: u32 = 0x8000_0000;

/// The portmapper program (RFC 1833 §3).
pub const PMAP_PROG: u32 = 100_000;
/// Its version 2.
pub const PMAP_VERS: u32 = 2;
/// PMAPPROC_GETPORT.
pub const PMAPPROC_GETPORT: u32 = 3;
/// IPPROTO_TCP in a portmapper mapping.
pub const IPPROTO_TCP: u32 = 6;

/// `accept_stat` values (RFC 5531 §9).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AcceptStat {
    /// The call succeeded.
    Success = 0,
    /// The program is not here.
    ProgUnavail = 1,
    /// The program's version is not here.
    ProgMismatch = 2,
    /// The procedure is not here.
    ProcUnavail = 3,
    /// The arguments could not be decoded.
    GarbageArgs = 4,
}

/// Why bytes are not the RPC message expected.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum RpcError {
    /// A value inside did not decode.
    #[error(transparent)]
    Xdr(#[from] XdrError),
    /// The record is larger than [`MAX_RECORD_BYTES`].
    #[error("an RPC record of more than {MAX_RECORD_BYTES} bytes")]
    TooLarge,
    /// Not a call where one was expected, or not a reply.
    #[error("RPC message type {0} where {1} was expected")]
    MessageType(u32, &'static str),
    /// The RPC version is not 2.
    #[error("RPC version {0}, not 2")]
    Version(u32),
    /// A reply to another call.
    #[error("an RPC reply with transaction id {got:#x} to call {want:#x}")]
    Xid {
        /// The reply's.
        got: u32,
        /// The call's.
        want: u32,
    },
    /// The server refused the call.
    #[error("the RPC call was {0}")]
    Refused(String),
}

/// A call's header fields that matter to a server.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Call<'a> {
    /// Transaction id.
    pub xid: u32,
    /// Program number.
    pub prog: u32,
    /// Program version.
    pub vers: u32,
    /// Procedure number.
    pub proc_num: u32,
    /// The encoded arguments.
    pub args: &'a [u8],
}

/// Starts a record: room for its mark, which [`finish_record`] fills in.
pub fn start_record() -> Encoder {
    Encoder::after(vec![0; 4])
}

/// Writes the record mark of a record started by [`start_record`] (one fragment, the last).
pub fn finish_record(e: Encoder) -> Vec<u8> {
    let mut bytes = e.bytes;
    let len = (bytes.len() - 4) as u32 | LAST_FRAGMENT;
    bytes[..4].copy_from_slice(&len.to_be_bytes());
    bytes
}

/// A call record's header (RFC 5531 §9, AUTH_NONE credential and verifier); the arguments
/// follow.
pub fn call_header(xid: u32, prog: u32, vers: u32, proc_num: u32) -> Encoder {
    let mut e = start_record();
    e.u32(xid).u32(0).u32(2).u32(prog).u32(vers).u32(proc_num);
    e.u32(0).opaque(&[]).u32(0).opaque(&[]);
    e
}

/// An accepted reply record's header with `stat`; results follow a `Success`.
pub fn reply_header(xid: u32, stat: AcceptStat) -> Encoder {
    let mut e = start_record();
    e.u32(xid).u32(1).u32(0).u32(0).opaque(&[]).u32(stat as u32);
    if stat == AcceptStat::ProgMismatch {
        // The versions supported, lowest and highest: VXI-11 and the portmapper have one each.
        e.u32(1).u32(2);
    }
    e
}

/// A denied reply (RPC_MISMATCH: versions 2 to 2), for a call of another RPC version.
pub fn rpc_mismatch(xid: u32) -> Vec<u8> {
    let mut e = start_record();
    e.u32(xid).u32(1).u32(1).u32(0).u32(2).u32(2);
    finish_record(e)
}

/// Decodes a call record's body.
pub fn decode_call(record: &[u8]) -> Result<Call<'_>, RpcError> {
    let mut d = Decoder::new(record);
    let xid = d.u32()?;
    let kind = d.u32()?;
    if kind != 0 {
        return Err(RpcError::MessageType(kind, "a call"));
    }
    let rpcvers = d.u32()?;
    if rpcvers != 2 {
        return Err(RpcError::Version(rpcvers));
    }
    let (prog, vers, proc_num) = (d.u32()?, d.u32()?, d.u32()?);
    // Credential and verifier: any flavour is accepted and ignored (loopback instruments).
    for _ in 0..2 {
        d.u32()?;
        d.opaque()?;
    }
    Ok(Call {
        xid,
        prog,
        vers,
        proc_num,
        args: d.rest(),
    })
}

/// The results of an accepted, successful reply to call `xid`.
pub fn decode_reply(record: &[u8], xid: u32) -> Result<&[u8], RpcError> {
    let mut d = Decoder::new(record);
    let got = d.u32()?;
    if got != xid {
        return Err(RpcError::Xid { got, want: xid });
    }
    let kind = d.u32()?;
    if kind != 1 {
        return Err(RpcError::MessageType(kind, "a reply"));
    }
    match d.u32()? {
        0 => {
            d.u32()?;
            d.opaque()?;
            match d.u32()? {
                0 => Ok(d.rest()),
                1 => Err(RpcError::Refused(
                    "for a program the server does not have".into(),
                )),
                2 => Err(RpcError::Refused(
                    "for a version the server does not have".into(),
                )),
                3 => Err(RpcError::Refused(
                    "for a procedure the server does not have".into(),
                )),
                4 => Err(RpcError::Refused(
                    "refused: its arguments did not decode".into(),
                )),
                other => Err(RpcError::Refused(format!("failed (accept_stat {other})"))),
            }
        }
        _ => Err(RpcError::Refused(
            "denied (RPC version or authentication)".into(),
        )),
    }
}

/// True when `bytes` begin with a whole record (every fragment to the last one there).
pub fn record_buffered(mut bytes: &[u8]) -> bool {
    loop {
        let Some(mark) = bytes.get(..4) else {
            return false;
        };
        let mark = u32::from_be_bytes([mark[0], mark[1], mark[2], mark[3]]);
        let end = 4 + (mark & !LAST_FRAGMENT) as usize;
        if bytes.len() < end {
            return false;
        }
        if mark & LAST_FRAGMENT != 0 {
            return true;
        }
        bytes = &bytes[end..];
    }
}

/// Reads one whole record (its fragments joined); `None` when the peer closed the connection
/// between records.
pub async fn read_record<R: AsyncRead + Unpin + ?Sized>(
    reader: &mut R,
) -> std::io::Result<Option<Vec<u8>>> {
    let mut record = Vec::new();
    loop {
        let mut mark = [0u8; 4];
        match reader.read_exact(&mut mark).await {
            Ok(_) => {}
            Err(e) if e.kind() == std::io::ErrorKind::UnexpectedEof && record.is_empty() => {
                return Ok(None)
            }
            Err(e) => return Err(e),
        }
        let mark = u32::from_be_bytes(mark);
        let len = (mark & !LAST_FRAGMENT) as usize;
        if record.len() + len > MAX_RECORD_BYTES {
            return Err(std::io::Error::new(
                std::io::ErrorKind::InvalidData,
                RpcError::TooLarge,
            ));
        }
        let start = record.len();
        record.resize(start + len, 0);
        reader.read_exact(&mut record[start..]).await?;
        if mark & LAST_FRAGMENT != 0 {
            return Ok(Some(record));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_call_record_is_marked_and_decodes_back() {
        let mut e = call_header(0x1234, PMAP_PROG, PMAP_VERS, PMAPPROC_GETPORT);
        e.u32(0x0607AF).u32(1).u32(IPPROTO_TCP).u32(0);
        let record = finish_record(e);
        // RFC 5531 §11: one fragment, the last, of 40 header + 16 argument bytes.
        assert_eq!(&record[..4], &(0x8000_0000u32 | 56).to_be_bytes());
        let call = decode_call(&record[4..]).expect("call");
        assert_eq!(
            (call.xid, call.prog, call.vers, call.proc_num),
            (0x1234, 100_000, 2, 3)
        );
        assert_eq!(call.args.len(), 16);
    }

    #[test]
    fn replies_are_matched_to_their_call() {
        let mut e = reply_header(7, AcceptStat::Success);
        e.u32(4321);
        let record = finish_record(e);
        assert_eq!(
            decode_reply(&record[4..], 7),
            Ok(&4321u32.to_be_bytes()[..])
        );
        assert!(matches!(
            decode_reply(&record[4..], 8),
            Err(RpcError::Xid { got: 7, want: 8 })
        ));
        let refused = finish_record(reply_header(9, AcceptStat::ProcUnavail));
        assert!(matches!(
            decode_reply(&refused[4..], 9),
            Err(RpcError::Refused(_))
        ));
    }

    #[tokio::test]
    async fn fragments_join_into_one_record() {
        let mut wire = Vec::new();
        wire.extend_from_slice(&3u32.to_be_bytes());
        wire.extend_from_slice(b"abc");
        wire.extend_from_slice(&(0x8000_0000u32 | 2).to_be_bytes());
        wire.extend_from_slice(b"de");
        let mut r = &wire[..];
        assert_eq!(
            read_record(&mut r).await.expect("read"),
            Some(b"abcde".to_vec())
        );
        assert_eq!(read_record(&mut r).await.expect("eof"), None);
        assert!(
            !record_buffered(&wire[..9]),
            "the last fragment is not all there"
        );
        assert!(record_buffered(&wire));
        assert!(!record_buffered(&wire[..3]));
        let mut huge = &(0x8000_0000u32 | 0x7fff_ffff).to_be_bytes()[..];
        assert!(read_record(&mut huge).await.is_err());
    }
}
