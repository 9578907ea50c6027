//! Instrument addresses as users write them: `sim:`, `tcp:HOST:PORT`, `serial:PATH?baud=N&…`,
//! `exec:PROGRAM ARG…`.
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
}

/// The forms an address may take, for hints.
pub const ADDRESS_FORMS: &str =
    "`sim:`, `tcp:HOST:PORT` (e.g. tcp:127.0.0.1:5025), `serial:PATH?baud=N` (options: data_bits, parity=none|even|odd, stop_bits=1|2, flow=none|software|hardware) or `exec:PROGRAM ARG…` (a program speaking lines on stdin/stdout; quotes as in a shell, but no shell runs)";

impl Address {
    /// Parses an address string.
    pub fn parse(text: &str) -> Result<Address, AddressError> {
        let err = |reason: &str| AddressError {
            address: text.to_string(),
            reason: reason.to_string(),
        };
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
        }
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
            ("gpib:7", "unknown kind"),
            ("exec:", "names no program"),
            ("exec:tool 'half", "bad command line: a single quote"),
        ] {
            let e = Address::parse(text).expect_err(text);
            assert!(e.reason.contains(reason), "{text}: {}", e.reason);
        }
    }
}
