//! The virtual controller on a pseudo-terminal pair, so the real serial adapter can be tested
//! and a user can point a terminal or `isopach` at it (`isopach bench serve`).
//!
//! Pitfalls handled: reading the controller end while no client end is open fails with EIO,
//! so the server keeps its own client end open for as long as it serves; a client that closes
//! shows as EIO on the controller end, not as end-of-stream.

use super::clock::SimClock;
use super::controller::VirtualConfig;
use super::server::serve;
use tokio_serial::{SerialPort, SerialStream};

/// A virtual controller served on a pseudo-terminal.
pub struct PtyController {
    path: String,
    task: tokio::task::JoinHandle<std::io::Result<()>>,
}

impl PtyController {
    /// Opens a pseudo-terminal pair and serves a virtual controller on its controller end.
    /// Must be called inside a tokio runtime.
    pub fn spawn(cfg: VirtualConfig, clock: SimClock) -> std::io::Result<PtyController> {
        // The kept-open client end takes no lock (pair() sets none), so a client can open the
        // path with the exclusive lock a serial port normally takes.
        let (device, keep_open) = SerialStream::pair().map_err(std::io::Error::other)?;
        let path = keep_open
            .name()
            .ok_or_else(|| std::io::Error::other("pseudo-terminal has no path"))?;
        let task = tokio::spawn(async move {
            let r = serve(device, cfg, clock).await;
            drop(keep_open);
            r
        });
        Ok(PtyController { path, task })
    }

    /// The client end's path, to be opened like a serial port.
    pub fn path(&self) -> &str {
        &self.path
    }

    /// Waits until the controller stops (a disconnect fault, or an I/O error).
    pub async fn join(self) -> std::io::Result<()> {
        self.task.await.map_err(std::io::Error::other)?
    }

    /// Stops serving.
    pub fn abort(&self) {
        self.task.abort();
    }
}
