//! Transports: byte streams to an instrument, chosen from its address. Everything above them
//! (line framing, SCPI, driver files) is the same whether the bytes travel over TCP, a serial
//! line or a local program's stdin and stdout, so simulated instruments served on any of them
//! exercise the same client code.

pub mod address;
pub mod command_line;
pub mod hislip;
pub mod link;
pub mod message;
pub mod output;
pub mod process;
pub mod run_once;
pub mod serial;
pub mod tcp;
pub mod usbtmc;
pub mod visa;
pub mod vxi11;

pub use address::{Address, AddressError, SerialSettings, UsbtmcId, ADDRESS_FORMS};
pub use link::{Link, LinkError};
pub use message::{Connection, MessageSession};

use tokio::io::{AsyncRead, AsyncWrite};

/// A connected byte stream.
pub trait Stream: AsyncRead + AsyncWrite + Unpin + Send {}

impl<T: AsyncRead + AsyncWrite + Unpin + Send> Stream for T {}

/// Opens a connection to `address` (not `sim:`, which has no stream), waiting at most
/// `timeout`; for `exec:` this starts the program.
pub async fn open(address: &Address, timeout: std::time::Duration) -> std::io::Result<Connection> {
    let stream = match address {
        Address::Sim => {
            return Err(std::io::Error::new(
                std::io::ErrorKind::Unsupported,
                "`sim:` is served in-process, not over a stream",
            ))
        }
        Address::Tcp { host, port } => tcp::connect(host, *port, timeout).await?,
        Address::Serial(settings) => serial::open(settings)?,
        Address::Exec(words) => {
            Box::new(process::spawn(words, &address.to_string())?) as Box<dyn Stream>
        }
        Address::Usbtmc(id) => usbtmc::open(&usbtmc::SysfsRoots::system(), id).await?,
        Address::Vxi11 {
            host,
            device,
            portmapper_port,
        } => {
            let client =
                vxi11::Vxi11Client::connect(host, *portmapper_port, device, timeout).await?;
            return Ok(Connection::Messages(Box::new(client)));
        }
        Address::Hislip { host, device, port } => {
            let client = hislip::HislipClient::connect(host, *port, device, timeout).await?;
            return Ok(Connection::Messages(Box::new(client)));
        }
    };
    Ok(Connection::Stream(stream))
}
