//! Transports: byte streams to an instrument, chosen from its address. Everything above them
//! (line framing, SCPI, driver files) is the same whether the bytes travel over TCP, a serial
//! line or a local program's stdin and stdout, so simulated instruments served on any of them
//! exercise the same client code.

pub mod address;
pub mod command_line;
pub mod link;
pub mod output;
pub mod process;
pub mod run_once;
pub mod serial;
pub mod tcp;

pub use address::{Address, AddressError, SerialSettings, ADDRESS_FORMS};
pub use link::{Link, LinkError};

use tokio::io::{AsyncRead, AsyncWrite};

/// A connected byte stream.
pub trait Stream: AsyncRead + AsyncWrite + Unpin + Send {}

impl<T: AsyncRead + AsyncWrite + Unpin + Send> Stream for T {}

/// Opens a stream to `address` (not `sim:`, which has no stream), waiting at most `timeout`;
/// for `exec:` this starts the program.
pub async fn open(
    address: &Address,
    timeout: std::time::Duration,
) -> std::io::Result<Box<dyn Stream>> {
    match address {
        Address::Sim => Err(std::io::Error::new(
            std::io::ErrorKind::Unsupported,
            "`sim:` is served in-process, not over a stream",
        )),
        Address::Tcp { host, port } => tcp::connect(host, *port, timeout).await,
        Address::Serial(settings) => serial::open(settings),
        Address::Exec(words) => {
            Ok(Box::new(process::spawn(words, &address.to_string())?) as Box<dyn Stream>)
        }
    }
}
