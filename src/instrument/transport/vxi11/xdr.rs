//! XDR (RFC 4506): the big-endian, four-byte-aligned encoding ONC RPC carries. Only what
//! VXI-11 and the portmapper use: unsigned and signed ints, bools, and variable-length opaque
//! data and strings (a length, the bytes, zero padding to a multiple of four: §4.10, §4.11).

/// Why bytes are not the XDR value expected.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum XdrError {
    /// The data ended inside a value.
    #[error("the XDR data ends inside a value")]
    Short,
    /// A length exceeds the data or the limit.
    #[error("an XDR length of {0} bytes is more than the message holds")]
    Length(u32),
    /// A bool is neither 0 nor 1 (§4.4).
    #[error("an XDR bool is {0}, not 0 or 1")]
    Bool(u32),
}

/// Appends XDR values to a buffer.
#[derive(Debug, Default)]
pub struct Encoder {
    /// The encoded bytes.
    pub bytes: Vec<u8>,
}

impl Encoder {
    /// An encoder writing after `bytes` (a record mark's room, say).
    pub fn after(bytes: Vec<u8>) -> Self {
        Encoder { bytes }
    }

    /// An unsigned int (§4.2).
    pub fn u32(&mut self, v: u32) -> &mut Self {
        self.bytes.extend_from_slice(&v.to_be_bytes());
        self
    }

    /// A signed int (§4.1).
    pub fn i32(&mut self, v: i32) -> &mut Self {
        self.u32(v as u32)
    }

    /// A bool (§4.4).
    pub fn bool(&mut self, v: bool) -> &mut Self {
        self.u32(u32::from(v))
    }

    /// Variable-length opaque data (§4.10); a string (§4.11) is the same on the wire.
    pub fn opaque(&mut self, data: &[u8]) -> &mut Self {
        self.u32(data.len() as u32);
        self.bytes.extend_from_slice(data);
        let pad = (4 - data.len() % 4) % 4;
        self.bytes.extend_from_slice(&[0; 3][..pad]);
        self
    }
}

/// Reads XDR values from a slice.
#[derive(Debug)]
pub struct Decoder<'a> {
    bytes: &'a [u8],
    at: usize,
}

impl<'a> Decoder<'a> {
    /// A decoder at the start of `bytes`.
    pub fn new(bytes: &'a [u8]) -> Self {
        Decoder { bytes, at: 0 }
    }

    /// An unsigned int.
    pub fn u32(&mut self) -> Result<u32, XdrError> {
        let end = self.at.checked_add(4).ok_or(XdrError::Short)?;
        let word = self.bytes.get(self.at..end).ok_or(XdrError::Short)?;
        self.at = end;
        Ok(u32::from_be_bytes([word[0], word[1], word[2], word[3]]))
    }

    /// A signed int.
    pub fn i32(&mut self) -> Result<i32, XdrError> {
        self.u32().map(|v| v as i32)
    }

    /// A bool.
    pub fn bool(&mut self) -> Result<bool, XdrError> {
        match self.u32()? {
            0 => Ok(false),
            1 => Ok(true),
            other => Err(XdrError::Bool(other)),
        }
    }

    /// Variable-length opaque data or a string's bytes.
    pub fn opaque(&mut self) -> Result<&'a [u8], XdrError> {
        let len = self.u32()?;
        let padded = (len as usize).div_ceil(4) * 4;
        let end = self
            .at
            .checked_add(padded)
            .filter(|e| *e <= self.bytes.len())
            .ok_or(XdrError::Length(len))?;
        let data = &self.bytes[self.at..self.at + len as usize];
        self.at = end;
        Ok(data)
    }

    /// What is left undecoded.
    pub fn rest(&self) -> &'a [u8] {
        &self.bytes[self.at.min(self.bytes.len())..]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn opaque_data_is_padded_to_four_bytes() {
        // RFC 4506 §4.10: length, bytes, then zero bytes up to a multiple of four.
        let mut e = Encoder::default();
        e.opaque(b"inst0").u32(7);
        assert_eq!(e.bytes, b"\0\0\0\x05inst0\0\0\0\0\0\0\x07".to_vec());
        let mut d = Decoder::new(&e.bytes);
        assert_eq!(d.opaque(), Ok(&b"inst0"[..]));
        assert_eq!(d.u32(), Ok(7));
        assert_eq!(d.u32(), Err(XdrError::Short));
    }

    #[test]
    fn refuses_lengths_past_the_end_and_odd_bools() {
        assert_eq!(
            Decoder::new(b"\xff\xff\xff\xffab").opaque(),
            Err(XdrError::Length(u32::MAX))
        );
        assert_eq!(Decoder::new(b"\0\0\0\x02").bool(), Err(XdrError::Bool(2)));
        assert_eq!(Decoder::new(&(-15i32).to_be_bytes()).i32(), Ok(-15));
    }
}
