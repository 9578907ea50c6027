//! VISA resource strings (IVI-4.3/VPP-4.3, "The VISA Library", the address-string grammar):
//! the way instruments and their manuals write addresses, read into taucal's [`Address`].
//!
//! Forms accepted (keywords in any case, the board number after the interface optional):
//!
//! - `TCPIP[n]::HOST::PORT::SOCKET`: a raw socket;
//! - `TCPIP[n]::HOST[::LAN_DEVICE][::INSTR]`: VXI-11 (`inst0` when the device is left out);
//!   a device named `hislipN`, optionally `hislipN,PORT`, is HiSLIP (port 4880 by default);
//! - `ASRL/dev/PATH[::INSTR]` or `ASRLn[::INSTR]` (`/dev/ttyS{n-1}`, as VISA libraries on
//!   Linux number ports, from memory): a serial line with 9600 8N1 (VISA's defaults);
//! - `USB[n]::VENDOR::PRODUCT::SERIAL[::INTERFACE][::INSTR]`: USBTMC through the Linux usbtmc
//!   driver (vendor and product as `0x` hexadecimal or decimal).
//!
//! Parsing is pure; a malformed string is refused with the byte range of its faulty part, so
//! the error can put a caret under it before anything connects.

use super::address::{Address, Flow, Parity, SerialSettings, UsbtmcId};
use std::ops::Range;

/// The HiSLIP port IANA assigned (IVI-6.1 §2.1).
pub const HISLIP_PORT: u16 = 4880;
/// The ONC RPC portmapper's port (RFC 1833 §3), where VXI-11 clients look up the core channel.
pub const PORTMAPPER_PORT: u16 = 111;

/// Why a resource string is not one taucal can use, and where in it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct VisaError {
    /// What is wrong.
    pub reason: String,
    /// The faulty part's bytes in the string.
    pub span: Range<usize>,
}

/// True when `text` is written as a VISA resource string rather than one of taucal's own forms.
pub fn looks_like_visa(text: &str) -> bool {
    let own = ["sim:", "tcp:", "serial:", "exec:", "vxi11:", "hislip:"];
    if own.iter().any(|scheme| text.starts_with(scheme)) {
        return false;
    }
    text.contains("::")
        || ["TCPIP", "ASRL", "USB", "GPIB", "VXI", "PXI"]
            .iter()
            .any(|k| starts_with_ignore_case(text, k))
}

fn starts_with_ignore_case(text: &str, prefix: &str) -> bool {
    text.len() >= prefix.len()
        && text.is_char_boundary(prefix.len())
        && text[..prefix.len()].eq_ignore_ascii_case(prefix)
}

/// One `::`-separated part and where it starts.
struct Part<'a> {
    text: &'a str,
    at: usize,
}

impl Part<'_> {
    fn span(&self) -> Range<usize> {
        self.at..self.at + self.text.len().max(1)
    }

    fn err(&self, reason: impl Into<String>) -> VisaError {
        VisaError {
            reason: reason.into(),
            span: self.span(),
        }
    }
}

/// Splits at `::`, keeping a bracketed IPv6 host (`[::1]`) whole.
fn split(text: &str) -> Vec<Part<'_>> {
    let bytes = text.as_bytes();
    let mut parts = Vec::new();
    let (mut start, mut i, mut bracket) = (0, 0, false);
    while i < bytes.len() {
        match bytes[i] {
            b'[' => bracket = true,
            b']' => bracket = false,
            b':' if !bracket && bytes.get(i + 1) == Some(&b':') => {
                parts.push(Part {
                    text: &text[start..i],
                    at: start,
                });
                i += 2;
                start = i;
                continue;
            }
            _ => {}
        }
        i += 1;
    }
    parts.push(Part {
        text: &text[start..],
        at: start,
    });
    parts
}

/// Parses a VISA resource string.
pub fn parse(text: &str) -> Result<Address, VisaError> {
    let mut parts = split(text);
    // The resource class closes the string; INSTR is the default where VISA allows leaving it.
    let class = match parts.last() {
        Some(p)
            if p.text.eq_ignore_ascii_case("INSTR") || p.text.eq_ignore_ascii_case("SOCKET") =>
        {
            let class = p.text.to_ascii_uppercase();
            parts.pop();
            Some(class)
        }
        _ => None,
    };
    let Some(first) = parts.first() else {
        return Err(VisaError {
            reason: "the resource string is empty".into(),
            span: 0..1,
        });
    };
    let interface = first.text;
    if let Some(board) = strip_keyword(interface, "TCPIP") {
        board_number(first, board)?;
        return tcpip(&parts, class.as_deref(), text);
    }
    if let Some(rest) = strip_keyword(interface, "ASRL") {
        return asrl(&parts, rest, class.as_deref(), text);
    }
    if let Some(board) = strip_keyword(interface, "USB") {
        board_number(first, board)?;
        return usb(&parts, class.as_deref(), text);
    }
    let known = ["GPIB", "VXI", "PXI", "GPIB-VXI"];
    if known.iter().any(|k| starts_with_ignore_case(interface, k)) {
        return Err(first.err(
            "taucal does not drive this interface; it reaches instruments over TCPIP, ASRL and USB",
        ));
    }
    Err(first.err("is not a VISA interface (TCPIP, ASRL or USB)"))
}

fn strip_keyword<'a>(text: &'a str, keyword: &str) -> Option<&'a str> {
    starts_with_ignore_case(text, keyword).then(|| &text[keyword.len()..])
}

fn board_number(part: &Part<'_>, board: &str) -> Result<(), VisaError> {
    if board.is_empty() || board.parse::<u16>().is_ok() {
        Ok(())
    } else {
        Err(part.err("the board number after the interface is not a number"))
    }
}

fn end_of(text: &str) -> VisaError {
    VisaError {
        reason: "the string ends too soon".into(),
        span: text.len().saturating_sub(1)..text.len().max(1),
    }
}

fn tcpip(parts: &[Part<'_>], class: Option<&str>, text: &str) -> Result<Address, VisaError> {
    let host = parts.get(1).ok_or_else(|| end_of(text))?;
    if host.text.is_empty() {
        return Err(host.err("the host is empty"));
    }
    if host.text.contains(char::is_whitespace) {
        return Err(host.err("a host name has no spaces"));
    }
    let host_name = host
        .text
        .trim_start_matches('[')
        .trim_end_matches(']')
        .to_string();
    if class == Some("SOCKET") {
        let port = parts.get(2).ok_or_else(|| end_of(text))?;
        if let Some(extra) = parts.get(3) {
            return Err(extra.err("a SOCKET resource is TCPIP::HOST::PORT::SOCKET"));
        }
        let port_number = port
            .text
            .parse::<u16>()
            .ok()
            .filter(|p| *p > 0)
            .ok_or_else(|| port.err("the port is not a number from 1 to 65535"))?;
        return Ok(Address::Tcp {
            host: host_name,
            port: port_number,
        });
    }
    if let Some(extra) = parts.get(3) {
        return Err(extra.err("a TCPIP INSTR resource is TCPIP::HOST[::DEVICE]::INSTR"));
    }
    let device = parts.get(2);
    let name = device.map_or("inst0", |d| d.text);
    if let Some(d) = device {
        if d.text.is_empty() {
            return Err(d.err("the device name is empty"));
        }
        if d.text.parse::<u16>().is_ok() {
            return Err(d.err(
                "a port here needs the SOCKET class: TCPIP::HOST::PORT::SOCKET (an INSTR names a device, e.g. inst0 or hislip0)",
            ));
        }
    }
    if starts_with_ignore_case(name, "hislip") {
        let (session, port) = match name.split_once(',') {
            Some((session, port)) => {
                let d = device.ok_or_else(|| end_of(text))?;
                let port_at = d.at + session.len() + 1;
                let port = port
                    .parse::<u16>()
                    .ok()
                    .filter(|p| *p > 0)
                    .ok_or(VisaError {
                        reason: "the HiSLIP port after the comma is not a number from 1 to 65535"
                            .into(),
                        span: port_at..port_at + port.len().max(1),
                    })?;
                (session, port)
            }
            None => (name, HISLIP_PORT),
        };
        if !session[6..].chars().all(|c| c.is_ascii_digit()) {
            let d = device.ok_or_else(|| end_of(text))?;
            return Err(d.err("a HiSLIP device is hislipN or hislipN,PORT"));
        }
        return Ok(Address::Hislip {
            host: host_name,
            device: session.to_string(),
            port,
        });
    }
    if !name
        .chars()
        .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == ',' || c == '.')
    {
        let d = device.ok_or_else(|| end_of(text))?;
        return Err(d.err(
            "a VXI-11 device name is letters, digits, `_`, `,` and `.` (e.g. inst0, gpib0,5)",
        ));
    }
    Ok(Address::Vxi11 {
        host: host_name,
        device: name.to_string(),
        portmapper_port: PORTMAPPER_PORT,
    })
}

fn asrl(
    parts: &[Part<'_>],
    rest: &str,
    class: Option<&str>,
    text: &str,
) -> Result<Address, VisaError> {
    let first = &parts[0];
    if class == Some("SOCKET") {
        return Err(VisaError {
            reason: "a serial resource is an INSTR".into(),
            span: text.rfind("::").map_or(0..1, |i| i + 2..text.len()),
        });
    }
    if let Some(extra) = parts.get(1) {
        return Err(extra.err("a serial resource is ASRL/dev/PATH::INSTR or ASRLn::INSTR"));
    }
    let path = if rest.starts_with('/') {
        rest.to_string()
    } else {
        let n = rest
            .parse::<u16>()
            .ok()
            .filter(|n| *n >= 1)
            .ok_or_else(|| {
                first.err("after ASRL comes a device path (/dev/…) or a port number from 1")
            })?;
        format!("/dev/ttyS{}", n - 1)
    };
    Ok(Address::Serial(SerialSettings {
        path,
        baud: 9600,
        data_bits: 8,
        parity: Parity::None,
        stop_bits: 1,
        flow: Flow::None,
    }))
}

fn usb(parts: &[Part<'_>], class: Option<&str>, text: &str) -> Result<Address, VisaError> {
    if class == Some("SOCKET") {
        return Err(VisaError {
            reason: "a USB resource is an INSTR".into(),
            span: text.rfind("::").map_or(0..1, |i| i + 2..text.len()),
        });
    }
    let id = |i: usize, what: &str| -> Result<u16, VisaError> {
        let part = parts.get(i).ok_or_else(|| end_of(text))?;
        let value = match part
            .text
            .strip_prefix("0x")
            .or_else(|| part.text.strip_prefix("0X"))
        {
            Some(hex) => u16::from_str_radix(hex, 16).ok(),
            None => part.text.parse::<u16>().ok(),
        };
        value.ok_or_else(|| {
            part.err(format!(
                "the {what} is not a 16-bit number (0x7E57 or decimal)"
            ))
        })
    };
    let vendor = id(1, "vendor id")?;
    let product = id(2, "product id")?;
    let serial = parts.get(3).ok_or_else(|| end_of(text))?;
    if serial.text.is_empty() {
        return Err(serial.err("the serial number is empty"));
    }
    let interface = match parts.get(4) {
        None => None,
        Some(p) => Some(
            p.text
                .parse::<u8>()
                .map_err(|_| p.err("the USB interface number is not a number from 0 to 255"))?,
        ),
    };
    if let Some(extra) = parts.get(5) {
        return Err(extra.err("a USB resource is USB::VENDOR::PRODUCT::SERIAL[::INTERFACE]::INSTR"));
    }
    Ok(Address::Usbtmc(UsbtmcId {
        vendor,
        product,
        serial: serial.text.to_string(),
        interface,
    }))
}

/// The resource string's two lines that show where it is wrong: the string, and a caret under
/// `span`.
pub fn caret(text: &str, span: &Range<usize>) -> String {
    let start = text[..span.start.min(text.len())].chars().count();
    let end = span.end.min(text.len()).max(span.start);
    let width = text
        .get(span.start.min(text.len())..end)
        .map_or(1, |s| s.chars().count())
        .max(1);
    format!("    {text}\n    {}{}", " ".repeat(start), "^".repeat(width))
}

#[cfg(test)]
mod tests {
    use super::*;

    // Examples from the VISA specification's address-string table (VPP-4.3 §4.3.1.1), from
    // memory, and from the issue.
    #[test]
    fn reads_each_interface() {
        assert_eq!(
            parse("TCPIP0::192.0.2.10::inst0::INSTR"),
            Ok(Address::Vxi11 {
                host: "192.0.2.10".into(),
                device: "inst0".into(),
                portmapper_port: 111
            })
        );
        assert_eq!(
            parse("tcpip::host.example::INSTR"),
            Ok(Address::Vxi11 {
                host: "host.example".into(),
                device: "inst0".into(),
                portmapper_port: 111
            })
        );
        assert_eq!(
            parse("TCPIP::192.0.2.10"),
            Ok(Address::Vxi11 {
                host: "192.0.2.10".into(),
                device: "inst0".into(),
                portmapper_port: 111
            })
        );
        assert_eq!(
            parse("TCPIP::host::hislip0::INSTR"),
            Ok(Address::Hislip {
                host: "host".into(),
                device: "hislip0".into(),
                port: 4880
            })
        );
        assert_eq!(
            parse("TCPIP0::127.0.0.1::hislip1,4999::INSTR"),
            Ok(Address::Hislip {
                host: "127.0.0.1".into(),
                device: "hislip1".into(),
                port: 4999
            })
        );
        assert_eq!(
            parse("TCPIP0::host::5025::SOCKET"),
            Ok(Address::Tcp {
                host: "host".into(),
                port: 5025
            })
        );
        let Ok(Address::Serial(s)) = parse("ASRL/dev/ttyUSB0::INSTR") else {
            panic!("serial");
        };
        assert_eq!((s.path.as_str(), s.baud), ("/dev/ttyUSB0", 9600));
        let Ok(Address::Serial(s)) = parse("ASRL1::INSTR") else {
            panic!("serial by number");
        };
        assert_eq!(s.path, "/dev/ttyS0");
        // 0x7E57 is an invented vendor id, unassigned in Debian's usb.ids 2025.07.26.
        assert_eq!(
            parse("USB0::0x7E57::0x5678::SN42::INSTR"),
            Ok(Address::Usbtmc(UsbtmcId {
                vendor: 0x7e57,
                product: 0x5678,
                serial: "SN42".into(),
                interface: None
            }))
        );
        assert_eq!(
            parse("USB::32343::22136::SN42::1::INSTR"),
            Ok(Address::Usbtmc(UsbtmcId {
                vendor: 0x7e57,
                product: 0x5678,
                serial: "SN42".into(),
                interface: Some(1)
            }))
        );
    }

    #[test]
    fn points_at_the_faulty_part() {
        for (text, faulty, reason) in [
            ("TCPIP0::192.0.2.10::hislipX::INSTR", "hislipX", "hislipN"),
            ("TCPIP0::host::hislip0,99999::INSTR", "99999", "HiSLIP port"),
            ("TCPIP0::host::50x25::SOCKET", "50x25", "port"),
            ("TCPIP0::host::5025::INSTR", "5025", "SOCKET"),
            ("TCPIPx::host::INSTR", "TCPIPx", "board number"),
            ("USB0::0x12G4::0x5678::SN42::INSTR", "0x12G4", "vendor id"),
            ("USB0::0x7E57::0x5678::SN42::256::INSTR", "256", "interface"),
            ("GPIB0::7::INSTR", "GPIB0", "does not drive"),
            ("FOO0::bar::INSTR", "FOO0", "not a VISA interface"),
            ("TCPIP0::::INSTR", "", "host is empty"),
            ("ASRLtty::INSTR", "ASRLtty", "device path"),
        ] {
            let e = parse(text).expect_err(text);
            assert!(e.reason.contains(reason), "{text}: {}", e.reason);
            if !faulty.is_empty() {
                assert_eq!(&text[e.span.clone()], faulty, "{text}");
            }
        }
        let e = parse("TCPIP0::host::hislipX::INSTR").expect_err("bad");
        assert_eq!(
            caret("TCPIP0::host::hislipX::INSTR", &e.span),
            "    TCPIP0::host::hislipX::INSTR\n                  ^^^^^^^"
        );
    }

    #[test]
    fn tells_visa_strings_from_taucals_forms() {
        assert!(looks_like_visa("TCPIP0::h::INSTR"));
        assert!(looks_like_visa("usb0::1::2::3"));
        assert!(!looks_like_visa("tcp:127.0.0.1:5025"));
        assert!(!looks_like_visa("serial:/dev/ttyUSB0"));
        assert!(!looks_like_visa("sim:"));
        assert!(!looks_like_visa("tcp:[::1]:5025"));
        assert!(!looks_like_visa("exec:tool --at a::b"));
    }
}
