//! Serial lines (USB-serial consoles of ranging devices, RS-232 instruments), and the
//! pseudo-terminals `taucal sim serve` offers in their place.

use super::address::{Flow, Parity, SerialSettings};
use super::Stream;
use std::io;
use tokio_serial::{SerialPort, SerialPortBuilderExt};

/// Opens the port with its line settings, discarding input that arrived while it was closed. Must run inside the tokio runtime (the port is
/// registered with its reactor).
pub fn open(s: &SerialSettings) -> io::Result<Box<dyn Stream>> {
    let data_bits = match s.data_bits {
        5 => tokio_serial::DataBits::Five,
        6 => tokio_serial::DataBits::Six,
        7 => tokio_serial::DataBits::Seven,
        _ => tokio_serial::DataBits::Eight,
    };
    let parity = match s.parity {
        Parity::None => tokio_serial::Parity::None,
        Parity::Even => tokio_serial::Parity::Even,
        Parity::Odd => tokio_serial::Parity::Odd,
    };
    let stop_bits = match s.stop_bits {
        2 => tokio_serial::StopBits::Two,
        _ => tokio_serial::StopBits::One,
    };
    let flow = match s.flow {
        Flow::None => tokio_serial::FlowControl::None,
        Flow::Software => tokio_serial::FlowControl::Software,
        Flow::Hardware => tokio_serial::FlowControl::Hardware,
    };
    let port = tokio_serial::new(&s.path, s.baud)
        .data_bits(data_bits)
        .parity(parity)
        .stop_bits(stop_bits)
        .flow_control(flow)
        .open_native_async()
        .map_err(io::Error::from)?;
    // Whatever waits in the input is an answer to a command of an earlier connection.
    if let Err(e) = port.clear(tokio_serial::ClearBuffer::Input) {
        tracing::debug!("{}: input not discarded on opening: {e}", s.path);
    }
    Ok(Box::new(port))
}
