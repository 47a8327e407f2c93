//! Serial transport: opens a port (8 data bits, no parity, one stop bit, no flow control) as
//! an async byte stream for [`super::gcode::Link`]. Nothing else: no reconnects, no retries.

use tokio_serial::{DataBits, FlowControl, Parity, SerialPortBuilderExt, SerialStream, StopBits};

/// Why a port could not be opened.
#[derive(Debug, thiserror::Error)]
#[error("cannot open serial port {port} at {baud} baud: {source} (check stage.port in the machine file, that the controller is plugged in, and that you may use the device, e.g. membership of the dialout group)")]
pub struct OpenError {
    pub port: String,
    pub baud: u32,
    pub source: tokio_serial::Error,
}

/// Opens `port` at `baud`, 8N1.
pub fn open_serial(port: &str, baud: u32) -> Result<SerialStream, OpenError> {
    tokio_serial::new(port, baud)
        .data_bits(DataBits::Eight)
        .parity(Parity::None)
        .stop_bits(StopBits::One)
        .flow_control(FlowControl::None)
        .open_native_async()
        .map_err(|source| OpenError {
            port: port.into(),
            baud,
            source,
        })
}
