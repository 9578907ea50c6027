//! The VXI-11 core channel's procedures (VXI-11 rev 1.0, §B.6, the `vxi11core` RPC program):
//! their numbers, arguments, results and error codes, encoded and decoded for both the client
//! and the served instrument. Pure: no sockets here.

use super::xdr::{Decoder, Encoder, XdrError};

/// DEVICE_CORE program number (VXI-11 §B.6.2).
pub const DEVICE_CORE: u32 = 0x0607AF;
/// DEVICE_CORE_VERSION.
pub const DEVICE_CORE_VERSION: u32 = 1;

/// Procedure numbers (VXI-11 §B.6.2).
pub mod proc_num {
    /// create_link.
    pub const CREATE_LINK: u32 = 10;
    /// device_write.
    pub const DEVICE_WRITE: u32 = 11;
    /// device_read.
    pub const DEVICE_READ: u32 = 12;
    /// device_readstb.
    pub const DEVICE_READSTB: u32 = 13;
    /// device_trigger.
    pub const DEVICE_TRIGGER: u32 = 14;
    /// device_clear.
    pub const DEVICE_CLEAR: u32 = 15;
    /// device_remote.
    pub const DEVICE_REMOTE: u32 = 16;
    /// device_local.
    pub const DEVICE_LOCAL: u32 = 17;
    /// device_lock.
    pub const DEVICE_LOCK: u32 = 18;
    /// device_unlock.
    pub const DEVICE_UNLOCK: u32 = 19;
    /// device_enable_srq.
    pub const DEVICE_ENABLE_SRQ: u32 = 20;
    /// device_docmd.
    pub const DEVICE_DOCMD: u32 = 22;
    /// destroy_link.
    pub const DESTROY_LINK: u32 = 23;
    /// create_intr_chan.
    pub const CREATE_INTR_CHAN: u32 = 25;
    /// destroy_intr_chan.
    pub const DESTROY_INTR_CHAN: u32 = 26;
}

/// Device_Flags bits (VXI-11 §B.5.3).
pub mod flags {
    /// Wait up to lock_timeout for a lock held elsewhere.
    pub const WAITLOCK: u32 = 0x01;
    /// The write's last byte ends the message.
    pub const END: u32 = 0x08;
    /// A read ends at termChar.
    pub const TERMCHRSET: u32 = 0x80;
}

/// device_read's `reason` bits (VXI-11 §B.6.12).
pub mod reason {
    /// requestSize bytes were read.
    pub const REQCNT: i32 = 0x1;
    /// termChar was read.
    pub const CHR: i32 = 0x2;
    /// The message's end was read.
    pub const END: i32 = 0x4;
}

/// Device_ErrorCode values (VXI-11 §B.5.4).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ErrorCode {
    /// 0: no error.
    NoError = 0,
    /// 1: syntax error.
    Syntax = 1,
    /// 3: device not accessible.
    NotAccessible = 3,
    /// 4: invalid link identifier.
    InvalidLink = 4,
    /// 5: parameter error.
    Parameter = 5,
    /// 8: operation not supported.
    NotSupported = 8,
    /// 9: out of resources.
    OutOfResources = 9,
    /// 11: device locked by another link.
    Locked = 11,
    /// 12: no lock held by this link.
    NoLock = 12,
    /// 15: I/O timeout.
    IoTimeout = 15,
    /// 17: I/O error.
    IoError = 17,
    /// 21: invalid address.
    InvalidAddress = 21,
    /// 23: abort.
    Abort = 23,
}

/// What a VXI-11 error code means, for messages.
pub fn describe(code: i32) -> &'static str {
    match code {
        0 => "no error",
        1 => "syntax error",
        3 => "device not accessible",
        4 => "invalid link identifier",
        5 => "parameter error",
        6 => "channel not established",
        8 => "operation not supported",
        9 => "out of resources",
        11 => "device locked by another link",
        12 => "no lock held by this link",
        15 => "I/O timeout",
        17 => "I/O error",
        21 => "invalid address",
        23 => "abort",
        29 => "channel already established",
        _ => "an error code VXI-11 does not define",
    }
}

/// Create_LinkParms.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CreateLink {
    /// clientId (opaque to the server).
    pub client_id: i32,
    /// Take the lock with the link.
    pub lock_device: bool,
    /// How long to wait for the lock, ms.
    pub lock_timeout_ms: u32,
    /// The device name (`inst0`).
    pub device: String,
}

impl CreateLink {
    /// Encodes the arguments.
    pub fn encode(&self, e: &mut Encoder) {
        e.i32(self.client_id)
            .bool(self.lock_device)
            .u32(self.lock_timeout_ms)
            .opaque(self.device.as_bytes());
    }

    /// Decodes the arguments.
    pub fn decode(d: &mut Decoder<'_>) -> Result<Self, XdrError> {
        Ok(CreateLink {
            client_id: d.i32()?,
            lock_device: d.bool()?,
            lock_timeout_ms: d.u32()?,
            device: String::from_utf8_lossy(d.opaque()?).into_owned(),
        })
    }
}

/// Create_LinkResp.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LinkCreated {
    /// Device_ErrorCode.
    pub error: i32,
    /// The link id.
    pub lid: i32,
    /// The abort channel's port (0: none offered).
    pub abort_port: u16,
    /// The largest device_write data the server takes.
    pub max_recv_size: u32,
}

impl LinkCreated {
    /// Encodes the results.
    pub fn encode(&self, e: &mut Encoder) {
        e.i32(self.error)
            .i32(self.lid)
            .u32(u32::from(self.abort_port))
            .u32(self.max_recv_size);
    }

    /// Decodes the results.
    pub fn decode(d: &mut Decoder<'_>) -> Result<Self, XdrError> {
        Ok(LinkCreated {
            error: d.i32()?,
            lid: d.i32()?,
            abort_port: d.u32()? as u16,
            max_recv_size: d.u32()?,
        })
    }
}

/// Device_WriteParms.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Write<'a> {
    /// The link.
    pub lid: i32,
    /// How long the device may take, ms.
    pub io_timeout_ms: u32,
    /// How long to wait for a lock, ms.
    pub lock_timeout_ms: u32,
    /// Device_Flags.
    pub flags: u32,
    /// The bytes.
    pub data: &'a [u8],
}

impl<'a> Write<'a> {
    /// Encodes the arguments.
    pub fn encode(&self, e: &mut Encoder) {
        e.i32(self.lid)
            .u32(self.io_timeout_ms)
            .u32(self.lock_timeout_ms)
            .u32(self.flags)
            .opaque(self.data);
    }

    /// Decodes the arguments.
    pub fn decode(d: &mut Decoder<'a>) -> Result<Self, XdrError> {
        Ok(Write {
            lid: d.i32()?,
            io_timeout_ms: d.u32()?,
            lock_timeout_ms: d.u32()?,
            flags: d.u32()?,
            data: d.opaque()?,
        })
    }
}

/// Device_ReadParms.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Read {
    /// The link.
    pub lid: i32,
    /// Most bytes to return.
    pub request_size: u32,
    /// How long to wait for data, ms.
    pub io_timeout_ms: u32,
    /// How long to wait for a lock, ms.
    pub lock_timeout_ms: u32,
    /// Device_Flags.
    pub flags: u32,
    /// The termination character, when TERMCHRSET.
    pub term_char: u8,
}

impl Read {
    /// Encodes the arguments.
    pub fn encode(&self, e: &mut Encoder) {
        e.i32(self.lid)
            .u32(self.request_size)
            .u32(self.io_timeout_ms)
            .u32(self.lock_timeout_ms)
            .u32(self.flags)
            .u32(u32::from(self.term_char));
    }

    /// Decodes the arguments.
    pub fn decode(d: &mut Decoder<'_>) -> Result<Self, XdrError> {
        Ok(Read {
            lid: d.i32()?,
            request_size: d.u32()?,
            io_timeout_ms: d.u32()?,
            lock_timeout_ms: d.u32()?,
            flags: d.u32()?,
            term_char: d.u32()? as u8,
        })
    }
}

/// Device_ReadResp.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ReadResult<'a> {
    /// Device_ErrorCode.
    pub error: i32,
    /// Why the read ended (`reason` bits).
    pub reason: i32,
    /// The bytes.
    pub data: &'a [u8],
}

impl<'a> ReadResult<'a> {
    /// Encodes the results.
    pub fn encode(&self, e: &mut Encoder) {
        e.i32(self.error).i32(self.reason).opaque(self.data);
    }

    /// Decodes the results.
    pub fn decode(d: &mut Decoder<'a>) -> Result<Self, XdrError> {
        Ok(ReadResult {
            error: d.i32()?,
            reason: d.i32()?,
            data: d.opaque()?,
        })
    }
}

/// Device_GenericParms (readstb, trigger, clear, remote, local).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Generic {
    /// The link.
    pub lid: i32,
    /// Device_Flags.
    pub flags: u32,
    /// ms.
    pub lock_timeout_ms: u32,
    /// ms.
    pub io_timeout_ms: u32,
}

impl Generic {
    /// Encodes the arguments.
    pub fn encode(&self, e: &mut Encoder) {
        e.i32(self.lid)
            .u32(self.flags)
            .u32(self.lock_timeout_ms)
            .u32(self.io_timeout_ms);
    }

    /// Decodes the arguments.
    pub fn decode(d: &mut Decoder<'_>) -> Result<Self, XdrError> {
        Ok(Generic {
            lid: d.i32()?,
            flags: d.u32()?,
            lock_timeout_ms: d.u32()?,
            io_timeout_ms: d.u32()?,
        })
    }
}

/// Device_LockParms.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Lock {
    /// The link.
    pub lid: i32,
    /// Device_Flags (WAITLOCK).
    pub flags: u32,
    /// ms.
    pub lock_timeout_ms: u32,
}

impl Lock {
    /// Encodes the arguments.
    pub fn encode(&self, e: &mut Encoder) {
        e.i32(self.lid).u32(self.flags).u32(self.lock_timeout_ms);
    }

    /// Decodes the arguments.
    pub fn decode(d: &mut Decoder<'_>) -> Result<Self, XdrError> {
        Ok(Lock {
            lid: d.i32()?,
            flags: d.u32()?,
            lock_timeout_ms: d.u32()?,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn each_message_decodes_to_what_was_encoded() {
        let create = CreateLink {
            client_id: 7,
            lock_device: true,
            lock_timeout_ms: 250,
            device: "inst0".into(),
        };
        let mut e = Encoder::default();
        create.encode(&mut e);
        // VXI-11 §B.6.2: long, bool, u_long, string — 12 bytes then "inst0" padded to 8.
        assert_eq!(e.bytes.len(), 4 * 3 + 4 + 8);
        assert_eq!(CreateLink::decode(&mut Decoder::new(&e.bytes)), Ok(create));
        let write = Write {
            lid: 3,
            io_timeout_ms: 1000,
            lock_timeout_ms: 0,
            flags: flags::END,
            data: b"*IDN?\n",
        };
        let mut e = Encoder::default();
        write.encode(&mut e);
        assert_eq!(Write::decode(&mut Decoder::new(&e.bytes)), Ok(write));
        let read = ReadResult {
            error: 0,
            reason: reason::END,
            data: b"30.0\n",
        };
        let mut e = Encoder::default();
        read.encode(&mut e);
        assert_eq!(ReadResult::decode(&mut Decoder::new(&e.bytes)), Ok(read));
        assert_eq!(
            describe(ErrorCode::Locked as i32),
            "device locked by another link"
        );
    }
}
