//! HiSLIP messages (IVI-6.1, High-Speed LAN Instrument Protocol, revision 2.0, §3.1): a
//! 16-byte header — the prologue `HS`, the message type, a control code, a 32-bit message
//! parameter, a 64-bit payload length, all big-endian — then the payload. Pure; shared by the
//! client and the served instrument.

use tokio::io::{AsyncRead, AsyncReadExt};

/// Header length in bytes.
pub const HEADER_BYTES: usize = 16;
/// Largest payload accepted (and offered in AsyncMaximumMessageSize): bigger is a fault here.
pub const MAX_PAYLOAD_BYTES: u64 = 1 << 20;
/// The protocol version this side speaks: 2.0 (major in the high byte; IVI-6.1 §6.1).
pub const PROTOCOL_VERSION: u16 = 0x0200;
/// The first message id a client uses after Initialize and after a device clear (§3.1.2).
pub const FIRST_MESSAGE_ID: u32 = 0xFFFF_FF00;
/// The two-character vendor id taucal sends (`tc`: ours, no registered vendor's).
pub const VENDOR_ID: u16 = u16::from_be_bytes(*b"tc");

/// HiSLIP message types (IVI-6.1 Table 4).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[allow(missing_docs)]
pub enum Kind {
    Initialize = 0,
    InitializeResponse = 1,
    FatalError = 2,
    Error = 3,
    AsyncLock = 4,
    AsyncLockResponse = 5,
    Data = 6,
    DataEnd = 7,
    DeviceClearComplete = 8,
    DeviceClearAcknowledge = 9,
    AsyncRemoteLocalControl = 10,
    AsyncRemoteLocalResponse = 11,
    Trigger = 12,
    Interrupted = 13,
    AsyncInterrupted = 14,
    AsyncMaximumMessageSize = 15,
    AsyncMaximumMessageSizeResponse = 16,
    AsyncInitialize = 17,
    AsyncInitializeResponse = 18,
    AsyncDeviceClear = 19,
    AsyncServiceRequest = 20,
    AsyncStatusQuery = 21,
    AsyncStatusResponse = 22,
    AsyncDeviceClearAcknowledge = 23,
    AsyncLockInfo = 24,
    AsyncLockInfoResponse = 25,
}

impl Kind {
    /// The type of a message type byte, if HiSLIP 2.0 defines one taucal handles.
    pub fn from_byte(b: u8) -> Option<Kind> {
        use Kind::*;
        const ALL: [Kind; 26] = [
            Initialize,
            InitializeResponse,
            FatalError,
            Error,
            AsyncLock,
            AsyncLockResponse,
            Data,
            DataEnd,
            DeviceClearComplete,
            DeviceClearAcknowledge,
            AsyncRemoteLocalControl,
            AsyncRemoteLocalResponse,
            Trigger,
            Interrupted,
            AsyncInterrupted,
            AsyncMaximumMessageSize,
            AsyncMaximumMessageSizeResponse,
            AsyncInitialize,
            AsyncInitializeResponse,
            AsyncDeviceClear,
            AsyncServiceRequest,
            AsyncStatusQuery,
            AsyncStatusResponse,
            AsyncDeviceClearAcknowledge,
            AsyncLockInfo,
            AsyncLockInfoResponse,
        ];
        ALL.get(usize::from(b)).copied()
    }
}

/// FatalError codes (IVI-6.1 Table 14).
pub mod fatal {
    /// Unidentified error.
    pub const UNIDENTIFIED: u8 = 0;
    /// Poorly formed message header.
    pub const BAD_HEADER: u8 = 1;
    /// Attempt to use the connection without both channels established.
    pub const CHANNELS_NOT_ESTABLISHED: u8 = 2;
    /// Invalid initialization sequence.
    pub const BAD_INITIALIZATION: u8 = 3;
    /// Server refused the connection: maximum number of clients exceeded.
    pub const TOO_MANY_CLIENTS: u8 = 4;
}

/// Error (non-fatal) codes (IVI-6.1 Table 15).
pub mod error {
    /// Unidentified error.
    pub const UNIDENTIFIED: u8 = 0;
    /// Unrecognized message type.
    pub const UNRECOGNIZED_TYPE: u8 = 1;
    /// Unrecognized control code.
    pub const UNRECOGNIZED_CONTROL: u8 = 2;
    /// Unrecognized vendor-defined message.
    pub const UNRECOGNIZED_VENDOR: u8 = 3;
    /// Message too large.
    pub const TOO_LARGE: u8 = 4;
}

/// One message.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Message {
    /// Message type byte (see [`Kind`]).
    pub kind: u8,
    /// Control code.
    pub control: u8,
    /// Message parameter.
    pub parameter: u32,
    /// Payload.
    pub payload: Vec<u8>,
}

/// Why bytes are not a HiSLIP message.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum HeaderError {
    /// The prologue is not `HS`.
    #[error("the message does not start with `HS`")]
    Prologue,
    /// The payload is longer than this side takes.
    #[error("a payload of {0} bytes is more than {MAX_PAYLOAD_BYTES}")]
    TooLarge(u64),
}

impl Message {
    /// A message of `kind`.
    pub fn new(kind: Kind, control: u8, parameter: u32, payload: Vec<u8>) -> Self {
        Message {
            kind: kind as u8,
            control,
            parameter,
            payload,
        }
    }

    /// Header and payload in one buffer, so each message leaves in one write.
    pub fn encode(&self) -> Vec<u8> {
        let mut bytes = Vec::with_capacity(HEADER_BYTES + self.payload.len());
        bytes.extend_from_slice(b"HS");
        bytes.push(self.kind);
        bytes.push(self.control);
        bytes.extend_from_slice(&self.parameter.to_be_bytes());
        bytes.extend_from_slice(&(self.payload.len() as u64).to_be_bytes());
        bytes.extend_from_slice(&self.payload);
        bytes
    }

    /// The header's fields and payload length, checked.
    pub fn decode_header(header: &[u8; HEADER_BYTES]) -> Result<(u8, u8, u32, u64), HeaderError> {
        if &header[..2] != b"HS" {
            return Err(HeaderError::Prologue);
        }
        let parameter = u32::from_be_bytes([header[4], header[5], header[6], header[7]]);
        let mut len = [0u8; 8];
        len.copy_from_slice(&header[8..]);
        let len = u64::from_be_bytes(len);
        if len > MAX_PAYLOAD_BYTES {
            return Err(HeaderError::TooLarge(len));
        }
        Ok((header[2], header[3], parameter, len))
    }

    /// The message type, if known.
    pub fn kind(&self) -> Option<Kind> {
        Kind::from_byte(self.kind)
    }
}

/// Why no message could be read.
#[derive(Debug, thiserror::Error)]
pub enum ReadError {
    /// The connection failed or closed inside a message.
    #[error(transparent)]
    Io(#[from] std::io::Error),
    /// The header is malformed.
    #[error(transparent)]
    Header(#[from] HeaderError),
}

/// Reads one message; `Ok(None)` when the peer closed the connection between messages.
pub async fn read<R: AsyncRead + Unpin + ?Sized>(
    reader: &mut R,
) -> Result<Option<Message>, ReadError> {
    let mut header = [0u8; HEADER_BYTES];
    let mut got = 0;
    while got < HEADER_BYTES {
        let n = reader.read(&mut header[got..]).await?;
        if n == 0 {
            if got == 0 {
                return Ok(None);
            }
            return Err(std::io::Error::from(std::io::ErrorKind::UnexpectedEof).into());
        }
        got += n;
    }
    let (kind, control, parameter, len) = Message::decode_header(&header)?;
    let mut payload = vec![0u8; len as usize];
    reader.read_exact(&mut payload).await?;
    Ok(Some(Message {
        kind,
        control,
        parameter,
        payload,
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_header_is_sixteen_big_endian_bytes() {
        // IVI-6.1 §3.1: "HS", type, control code, parameter (4), payload length (8).
        let m = Message::new(Kind::DataEnd, 0, FIRST_MESSAGE_ID, b"*IDN?\n".to_vec());
        let bytes = m.encode();
        assert_eq!(
            &bytes[..16],
            &[b'H', b'S', 7, 0, 0xFF, 0xFF, 0xFF, 0x00, 0, 0, 0, 0, 0, 0, 0, 6]
        );
        let mut header = [0u8; 16];
        header.copy_from_slice(&bytes[..16]);
        assert_eq!(
            Message::decode_header(&header),
            Ok((7, 0, FIRST_MESSAGE_ID, 6))
        );
        assert_eq!(Kind::from_byte(17), Some(Kind::AsyncInitialize));
        assert_eq!(Kind::from_byte(200), None);
    }

    #[tokio::test]
    async fn refuses_bad_prologues_and_huge_payloads() {
        let mut bad = &b"XS\x07\0\0\0\0\0\0\0\0\0\0\0\0\0"[..];
        assert!(matches!(
            read(&mut bad).await,
            Err(ReadError::Header(HeaderError::Prologue))
        ));
        let mut huge = Vec::from(&b"HS\x07\0\0\0\0\0"[..]);
        huge.extend_from_slice(&u64::MAX.to_be_bytes());
        assert!(matches!(
            read(&mut &huge[..]).await,
            Err(ReadError::Header(HeaderError::TooLarge(_)))
        ));
        assert!(matches!(read(&mut &b""[..]).await, Ok(None)));
        assert!(matches!(
            read(&mut &b"HS\x07"[..]).await,
            Err(ReadError::Io(_))
        ));
    }
}
