//! Runs the [`VirtualController`] over any byte stream, in virtual time: in-process over
//! `tokio::io::duplex`, or over a pseudo-terminal (see [`super::pty`]).

use super::clock::SimClock;
use super::controller::{VirtualConfig, VirtualController};
use crate::bench::gcode::link::Port;
use tokio::io::{AsyncReadExt, AsyncWriteExt};

/// Serves one virtual controller on `stream` until the host goes away or a disconnect fault
/// strikes. The controller powers up (prints its banner) when serving starts.
pub async fn serve<S: Port>(
    mut stream: S,
    cfg: VirtualConfig,
    clock: SimClock,
) -> std::io::Result<()> {
    let mut vc = VirtualController::new(cfg, clock.now());
    let mut buf = [0u8; 256];
    loop {
        for bytes in vc.take_output() {
            stream.write_all(&bytes).await?;
        }
        stream.flush().await?;
        if vc.is_disconnected() {
            let _ = stream.shutdown().await;
            return Ok(());
        }
        let wake = vc.next_wakeup().map(|t| clock.instant_at(t));
        tokio::select! {
            r = stream.read(&mut buf) => match r {
                Ok(0) => return Ok(()),
                Ok(n) => vc.feed(&buf[..n], clock.now()),
                // EIO: the other end of a pseudo-terminal closed.
                Err(e) if e.raw_os_error() == Some(5) => return Ok(()),
                Err(e) => return Err(e),
            },
            _ = async {
                match wake {
                    Some(w) => tokio::time::sleep_until(w).await,
                    None => std::future::pending().await,
                }
            } => vc.advance(clock.now()),
        }
    }
}

/// Starts a virtual controller in-process and returns the host end of a duplex stream to it.
pub fn spawn_duplex(cfg: VirtualConfig, clock: SimClock) -> tokio::io::DuplexStream {
    let (host, device) = tokio::io::duplex(4096);
    tokio::spawn(async move {
        if let Err(e) = serve(device, cfg, clock).await {
            tracing::warn!("virtual controller stopped: {e}");
        }
    });
    host
}
