//! Instrument addresses as users write them: `sim:`, `tcp:HOST:PORT`, `serial:PATH?baud=N&…`,
//! `exec:PROGRAM ARG…`, `vxi11:HOST[:PORTMAPPER_PORT][/DEVICE]`, `hislip:HOST[:PORT][/hislipN]`,
//! and VISA resource strings ([`super::visa`]).
//!
//! Parsing is pure (no I/O) so a bench file's addresses are checked before anything connects.

use super::command_line;
use std::fmt;
use thiserror::Error;

/// Where an instrument is reached.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Address {
    /// The in-process simulated bench.
    Sim,
    /// A raw TCP socket carrying newline-terminated text (5025 is the usual SCPI raw-socket port).
    Tcp {
        /// Host name or IP literal.
        host: String,
        /// TCP port.
        port: u16,
    },
    /// A serial port (or a pseudo-terminal's path).
    Serial(SerialSettings),
    /// A local program whose stdin and stdout carry the lines; the words of its command line,
    /// program first (split like a shell would, but never run by one).
    Exec(Vec<String>),
    /// A VXI-11 instrument (VXI-11 rev 1.0): its core channel is looked up on the host's
    /// portmapper, and the link is made to `device` (`inst0` usually).
    Vxi11 {
        /// Host name or IP literal.
        host: String,
        /// The device name the link is created to.
        device: String,
        /// The portmapper's port (111 but for test servers).
        portmapper_port: u16,
    },
    /// A HiSLIP 2.0 instrument (IVI-6.1).
    Hislip {
        /// Host name or IP literal.
        host: String,
        /// The sub-address sent in Initialize (`hislip0` …).
        device: String,
        /// TCP port (4880 by default).
        port: u16,
    },
    /// A USBTMC instrument, through the Linux usbtmc driver's character device.
    Usbtmc(UsbtmcId),
}

/// A USB instrument as VISA names it: vendor, product, serial and, optionally, interface.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct UsbtmcId {
    /// idVendor.
    pub vendor: u16,
    /// idProduct.
    pub product: u16,
    /// The iSerialNumber string.
    pub serial: String,
    /// bInterfaceNumber, when the device has more than one USBTMC interface.
    pub interface: Option<u8>,
}

/// Serial line settings; everything but the path has the usual defaults (8N1, no flow control).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SerialSettings {
    /// Device path, e.g. `/dev/ttyUSB0`.
    pub path: String,
    /// Baud rate.
    pub baud: u32,
    /// Data bits: 5 to 8.
    pub data_bits: u8,
    /// Parity.
    pub parity: Parity,
    /// Stop bits: 1 or 2.
    pub stop_bits: u8,
    /// Flow control.
    pub flow: Flow,
}

/// Serial parity.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Parity {
    /// No parity bit.
    None,
    /// Even parity.
    Even,
    /// Odd parity.
    Odd,
}

/// Serial flow control.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Flow {
    /// None.
    None,
    /// XON/XOFF characters.
    Software,
    /// RTS/CTS lines.
    Hardware,
}

/// Why an address string is not an address.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
#[error("`{address}`: {reason}")]
pub struct AddressError {
    /// The address as written.
    pub address: String,
    /// What is wrong with it.
    pub reason: String,
    /// The faulty part's bytes in the address, where known (VISA resource strings).
    pub span: Option<std::ops::Range<usize>>,
}

impl AddressError {
    /// The reason, followed by the address with a caret under its faulty part where known.
    pub fn explained(&self) -> String {
        match &self.span {
            Some(span) => format!(
                "{}\n{}",
                self.reason,
                super::visa::caret(&self.address, span)
            ),
            None => self.reason.clone(),
        }
    }
}

/// The forms an address may take, for hints.
pub const ADDRESS_FORMS: &str =
    "a VISA resource string (TCPIP0::HOST::inst0::INSTR for VXI-11, TCPIP0::HOST::hislip0::INSTR for HiSLIP, TCPIP0::HOST::PORT::SOCKET, ASRL/dev/PATH::INSTR, USB0::VENDOR::PRODUCT::SERIAL::INSTR), `vxi11:HOST[:PORTMAPPER_PORT][/DEVICE]`, `hislip:HOST[:PORT][/hislipN]`, `sim:`, `tcp:HOST:PORT` (e.g. tcp:127.0.0.1:5025), `serial:PATH?baud=N` (options: data_bits, parity=none|even|odd, stop_bits=1|2, flow=none|software|hardware) or `exec:PROGRAM ARG…` (a program speaking lines on stdin/stdout; quotes as in a shell, but no shell runs)";

impl Address {
    /// Parses an address string.
    pub fn parse(text: &str) -> Result<Address, AddressError> {
        let err = |reason: &str| AddressError {
            address: text.to_string(),
            reason: reason.to_string(),
            span: None,
        };
        if super::visa::looks_like_visa(text) {
            return super::visa::parse(text).map_err(|e| AddressError {
                address: text.to_string(),
                reason: e.reason,
                span: Some(e.span),
            });
        }
        if let Some(rest) = text.strip_prefix("vxi11:") {
            let (host, port, device) =
                host_port_device(rest, super::visa::PORTMAPPER_PORT).map_err(|r| err(&r))?;
            return Ok(Address::Vxi11 {
                host,
                device: device.unwrap_or_else(|| "inst0".into()),
                portmapper_port: port,
            });
        }
        if let Some(rest) = text.strip_prefix("hislip:") {
            let (host, port, device) =
                host_port_device(rest, super::visa::HISLIP_PORT).map_err(|r| err(&r))?;
            return Ok(Address::Hislip {
                host,
                device: device.unwrap_or_else(|| "hislip0".into()),
                port,
            });
        }
        if text == "sim:" {
            return Ok(Address::Sim);
        }
        if let Some(rest) = text.strip_prefix("tcp:") {
            let (host, port) = rest
                .rsplit_once(':')
                .ok_or_else(|| err("a TCP address needs a host and a port"))?;
            let host = host.trim_start_matches('[').trim_end_matches(']');
            if host.is_empty() {
                return Err(err("the host is empty"));
            }
            let port = port
                .parse::<u16>()
                .map_err(|_| err("the port is not a number from 0 to 65535"))?;
            return Ok(Address::Tcp {
                host: host.to_string(),
                port,
            });
        }
        if let Some(rest) = text.strip_prefix("exec:") {
            return command_line::split(rest)
                .map(Address::Exec)
                .map_err(|r| err(&format!("bad command line: {r}")));
        }
        if let Some(rest) = text.strip_prefix("serial:") {
            return parse_serial(rest).map(Address::Serial).map_err(|r| err(&r));
        }
        Err(err("unknown kind of address"))
    }
}

/// `HOST[:PORT][/DEVICE]` (an IPv6 host in brackets).
fn host_port_device(
    rest: &str,
    default_port: u16,
) -> Result<(String, u16, Option<String>), String> {
    let (hostport, device) = match rest.split_once('/') {
        Some((h, "")) => return Err(format!("the device after `{h}/` is empty")),
        Some((h, d)) => (h, Some(d.to_string())),
        None => (rest, None),
    };
    let (host, port) = if let Some(v6) = hostport.strip_prefix('[') {
        let (host, after) = v6
            .split_once(']')
            .ok_or("an IPv6 host needs its closing `]`")?;
        (host, after.strip_prefix(':'))
    } else {
        match hostport.rsplit_once(':') {
            Some((h, p)) => (h, Some(p)),
            None => (hostport, None),
        }
    };
    if host.is_empty() {
        return Err("the host is empty".into());
    }
    let port = match port {
        None => default_port,
        Some(p) => p
            .parse::<u16>()
            .ok()
            .filter(|p| *p > 0)
            .ok_or("the port is not a number from 1 to 65535")?,
    };
    Ok((host.to_string(), port, device))
}

fn parse_serial(rest: &str) -> Result<SerialSettings, String> {
    let (path, query) = rest.split_once('?').unwrap_or((rest, ""));
    if path.is_empty() {
        return Err("the serial port's path is empty".into());
    }
    let mut s = SerialSettings {
        path: path.to_string(),
        baud: 115_200,
        data_bits: 8,
        parity: Parity::None,
        stop_bits: 1,
        flow: Flow::None,
    };
    for option in query.split('&').filter(|o| !o.is_empty()) {
        let (key, value) = option
            .split_once('=')
            .ok_or_else(|| format!("option `{option}` needs a value (key=value)"))?;
        match key {
            "baud" => {
                s.baud = value
                    .parse()
                    .ok()
                    .filter(|b| *b > 0)
                    .ok_or_else(|| format!("baud `{value}` is not a positive number"))?
            }
            "data_bits" => {
                s.data_bits = value
                    .parse()
                    .ok()
                    .filter(|b| (5..=8).contains(b))
                    .ok_or_else(|| format!("data_bits `{value}` is not 5, 6, 7 or 8"))?
            }
            "stop_bits" => {
                s.stop_bits = value
                    .parse()
                    .ok()
                    .filter(|b| *b == 1 || *b == 2)
                    .ok_or_else(|| format!("stop_bits `{value}` is not 1 or 2"))?
            }
            "parity" => {
                s.parity = match value {
                    "none" => Parity::None,
                    "even" => Parity::Even,
                    "odd" => Parity::Odd,
                    _ => return Err(format!("parity `{value}` is not none, even or odd")),
                }
            }
            "flow" => {
                s.flow = match value {
                    "none" => Flow::None,
                    "software" => Flow::Software,
                    "hardware" => Flow::Hardware,
                    _ => return Err(format!("flow `{value}` is not none, software or hardware")),
                }
            }
            _ => {
                return Err(format!(
                    "unknown serial option `{key}` (baud, data_bits, parity, stop_bits, flow)"
                ))
            }
        }
    }
    Ok(s)
}

impl fmt::Display for Address {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Address::Sim => write!(f, "sim:"),
            Address::Tcp { host, port } if host.contains(':') => write!(f, "tcp:[{host}]:{port}"),
            Address::Tcp { host, port } => write!(f, "tcp:{host}:{port}"),
            Address::Serial(s) => write!(f, "serial:{}?baud={}", s.path, s.baud),
            Address::Exec(words) => write!(f, "exec:{}", command_line::join(words)),
            Address::Vxi11 {
                host,
                device,
                portmapper_port,
            } => {
                let host = bracketed(host);
                if *portmapper_port == super::visa::PORTMAPPER_PORT {
                    write!(f, "TCPIP0::{host}::{device}::INSTR")
                } else {
                    write!(f, "vxi11:{host}:{portmapper_port}/{device}")
                }
            }
            Address::Hislip { host, device, port } => {
                let host = bracketed(host);
                if *port == super::visa::HISLIP_PORT {
                    write!(f, "TCPIP0::{host}::{device}::INSTR")
                } else {
                    write!(f, "TCPIP0::{host}::{device},{port}::INSTR")
                }
            }
            Address::Usbtmc(id) => {
                write!(
                    f,
                    "USB0::0x{:04X}::0x{:04X}::{}",
                    id.vendor, id.product, id.serial
                )?;
                if let Some(i) = id.interface {
                    write!(f, "::{i}")?;
                }
                write!(f, "::INSTR")
            }
        }
    }
}

fn bracketed(host: &str) -> String {
    if host.contains(':') {
        format!("[{host}]")
    } else {
        host.to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_each_kind() {
        assert_eq!(Address::parse("sim:"), Ok(Address::Sim));
        assert_eq!(
            Address::parse("tcp:127.0.0.1:5025"),
            Ok(Address::Tcp {
                host: "127.0.0.1".into(),
                port: 5025
            })
        );
        assert_eq!(
            Address::parse("tcp:[::1]:5025"),
            Ok(Address::Tcp {
                host: "::1".into(),
                port: 5025
            })
        );
        let Ok(Address::Serial(s)) =
            Address::parse("serial:/dev/ttyUSB0?baud=9600&parity=even&stop_bits=2&flow=hardware")
        else {
            panic!("serial address");
        };
        assert_eq!(s.path, "/dev/ttyUSB0");
        assert_eq!(s.baud, 9600);
        assert_eq!(s.parity, Parity::Even);
        assert_eq!(s.stop_bits, 2);
        assert_eq!(s.flow, Flow::Hardware);
        assert_eq!(s.data_bits, 8);
        let exec =
            Address::parse("exec:/opt/x/taucal sim serve --stdio 'dut' --bench \"a b.toml\"")
                .expect("exec address");
        assert_eq!(
            exec,
            Address::Exec(
                [
                    "/opt/x/taucal",
                    "sim",
                    "serve",
                    "--stdio",
                    "dut",
                    "--bench",
                    "a b.toml"
                ]
                .map(String::from)
                .to_vec()
            )
        );
        assert_eq!(Address::parse(&exec.to_string()), Ok(exec));
        for text in [
            "vxi11:127.0.0.1:40111/inst0",
            "TCPIP0::127.0.0.1::inst0::INSTR",
            "TCPIP0::127.0.0.1::hislip0,4999::INSTR",
            "TCPIP0::[::1]::hislip0::INSTR",
            "USB0::0x7E57::0x5678::SN42::1::INSTR",
        ] {
            let a = Address::parse(text).expect(text);
            assert_eq!(a.to_string(), text);
        }
        assert_eq!(
            Address::parse("hislip:[::1]/hislip2"),
            Ok(Address::Hislip {
                host: "::1".into(),
                device: "hislip2".into(),
                port: 4880
            })
        );
    }

    #[test]
    fn a_malformed_resource_string_is_explained_with_a_caret() {
        let e = Address::parse("TCPIP0::host::5x::SOCKET").expect_err("bad port");
        assert_eq!(
            e.explained(),
            "the port is not a number from 1 to 65535\n    TCPIP0::host::5x::SOCKET\n                  ^^"
        );
    }

    #[test]
    fn refuses_malformed_addresses_with_a_reason() {
        for (text, reason) in [
            ("tcp:host", "host and a port"),
            ("tcp::5025", "host is empty"),
            ("tcp:h:70000", "port"),
            ("serial:", "path is empty"),
            ("serial:/dev/x?baud=fast", "baud"),
            ("serial:/dev/x?speed=9600", "unknown serial option"),
            ("serial:/dev/x?parity=mark", "parity"),
            ("gpib:7", "does not drive this interface"),
            ("modbus:7", "unknown kind"),
            ("exec:", "names no program"),
            ("exec:tool 'half", "bad command line: a single quote"),
            ("vxi11:", "host is empty"),
            ("hislip:h:0", "port"),
            ("TCPIP0::h::hislipX::INSTR", "hislipN"),
        ] {
            let e = Address::parse(text).expect_err(text);
            assert!(e.reason.contains(reason), "{text}: {}", e.reason);
        }
    }
}
