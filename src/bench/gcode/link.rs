//! The thin async adapter: runs the [`Controller`] state machine over any
//! `AsyncRead + AsyncWrite` byte stream (a serial port, a pseudo-terminal, `tokio::io::duplex`).
//!
//! It only moves bytes and time: writes what the state machine gives, splits what arrives into
//! lines (LF or CR ends a line), and wakes the state machine at its deadlines. End of stream
//! and EIO (how a pseudo-terminal reports a closed peer) both mean the controller is gone.

use super::controller::{Command, Completion, Controller, ControllerError, LogEntry};
use tokio::io::{AsyncRead, AsyncReadExt, AsyncWrite, AsyncWriteExt};
use tokio::time::Instant;

/// A byte stream a controller can be reached over.
pub trait Port: AsyncRead + AsyncWrite + Unpin + Send {}
impl<T: AsyncRead + AsyncWrite + Unpin + Send> Port for T {}

/// Why a command over the link failed.
#[derive(Debug, thiserror::Error)]
pub enum LinkError {
    #[error(transparent)]
    Controller(#[from] ControllerError),
    #[error("i/o error on {port}: {source}; the run stops and does not reconnect by itself")]
    Io {
        port: String,
        source: std::io::Error,
    },
}

/// Entries kept in the transcript (older ones are dropped).
const TRANSCRIPT_MAX: usize = 2000;

/// A controller reached over a byte stream.
pub struct Link<S> {
    stream: S,
    port: String,
    ctrl: Controller,
    epoch: Instant,
    buf: Vec<u8>,
    transcript: Vec<(f64, LogEntry)>,
}

enum Wake {
    Read(std::io::Result<usize>),
    Deadline,
}

impl<S: Port> Link<S> {
    /// A link over `stream`; `port` names it in messages.
    pub fn new(stream: S, ctrl: Controller, port: impl Into<String>) -> Link<S> {
        Link {
            stream,
            port: port.into(),
            ctrl,
            epoch: Instant::now(),
            buf: Vec::new(),
            transcript: Vec::new(),
        }
    }

    /// The state machine (position, latched alarm, configuration).
    pub fn controller(&self) -> &Controller {
        &self.ctrl
    }

    /// The port name.
    pub fn port(&self) -> &str {
        &self.port
    }

    /// The conversation so far: seconds since the link opened, and the entry.
    pub fn transcript(&self) -> &[(f64, LogEntry)] {
        &self.transcript
    }

    fn now(&self) -> std::time::Duration {
        self.epoch.elapsed()
    }

    /// Runs one command to its end (success, fault or timeout). A command left unfinished by
    /// a dropped future is first driven to its end (its outcome discarded), so a stale reply
    /// is never taken for the new command's.
    pub async fn run(&mut self, cmd: Command) -> Result<Completion, LinkError> {
        if self.ctrl.is_busy() {
            let r = self.drive().await;
            tracing::info!(port = %self.port, "finished an abandoned command first: {r:?}");
        }
        let now = self.now();
        self.ctrl.start(cmd, now)?;
        self.drive().await
    }

    /// Feeds the state machine until the command in progress has a result.
    async fn drive(&mut self) -> Result<Completion, LinkError> {
        loop {
            self.flush().await?;
            if let Some(r) = self.ctrl.poll_result() {
                self.drain_log();
                return r.map_err(LinkError::from);
            }
            if let Some(line) = self.take_line() {
                let now = self.now();
                self.ctrl.handle_line(&line, now);
                continue;
            }
            let deadline = self.ctrl.next_deadline().map(|d| self.epoch + d);
            let mut tmp = [0u8; 256];
            let wake = tokio::select! {
                r = self.stream.read(&mut tmp) => Wake::Read(r),
                _ = sleep_until(deadline), if deadline.is_some() => Wake::Deadline,
            };
            match wake {
                Wake::Read(Ok(0)) => self.ctrl.handle_closed(),
                Wake::Read(Ok(n)) => self.buf.extend_from_slice(&tmp[..n]),
                Wake::Read(Err(e)) if is_closed(&e) => self.ctrl.handle_closed(),
                Wake::Read(Err(source)) => {
                    return Err(LinkError::Io {
                        port: self.port.clone(),
                        source,
                    });
                }
                Wake::Deadline => {
                    let now = self.now();
                    self.ctrl.handle_time(now);
                }
            }
        }
    }

    /// Stops at once: the reset bytes (or stop lines) go out and any command is abandoned;
    /// after a reset, the controller's start-up lines are absorbed before this returns.
    pub async fn stop(&mut self) -> Result<(), LinkError> {
        let now = self.now();
        self.ctrl.stop(now);
        while self.ctrl.poll_result().is_some() {}
        if self.ctrl.is_busy() {
            self.drive().await?;
        }
        self.flush().await
    }

    async fn flush(&mut self) -> Result<(), LinkError> {
        self.drain_log();
        while let Some(bytes) = self.ctrl.poll_transmit() {
            let r = async {
                self.stream.write_all(&bytes).await?;
                self.stream.flush().await
            }
            .await;
            if let Err(e) = r {
                if is_closed(&e) {
                    self.ctrl.handle_closed();
                    return Ok(());
                }
                return Err(LinkError::Io {
                    port: self.port.clone(),
                    source: e,
                });
            }
        }
        Ok(())
    }

    fn drain_log(&mut self) {
        while let Some(e) = self.ctrl.poll_log() {
            match &e {
                LogEntry::Sent(s) => tracing::debug!(port = %self.port, "→ {s}"),
                LogEntry::Received(s) => tracing::debug!(port = %self.port, "← {s}"),
                LogEntry::Note(s) => tracing::info!(port = %self.port, "{s}"),
            }
            if self.transcript.len() >= TRANSCRIPT_MAX {
                self.transcript.drain(..TRANSCRIPT_MAX / 2);
            }
            self.transcript
                .push((self.epoch.elapsed().as_secs_f64(), e));
        }
    }

    /// The next complete line in the buffer (LF or CR ends it), lossily decoded.
    fn take_line(&mut self) -> Option<String> {
        let i = self.buf.iter().position(|&b| b == b'\n' || b == b'\r')?;
        let line: Vec<u8> = self.buf.drain(..=i).collect();
        Some(String::from_utf8_lossy(&line[..i]).into_owned())
    }
}

async fn sleep_until(deadline: Option<Instant>) {
    match deadline {
        Some(d) => tokio::time::sleep_until(d).await,
        None => std::future::pending().await,
    }
}

/// End of stream in disguise: EIO from a pseudo-terminal whose other end closed, or a broken pipe.
fn is_closed(e: &std::io::Error) -> bool {
    e.raw_os_error() == Some(5)
        || matches!(
            e.kind(),
            std::io::ErrorKind::BrokenPipe
                | std::io::ErrorKind::UnexpectedEof
                | std::io::ErrorKind::ConnectionReset
                | std::io::ErrorKind::ConnectionAborted
        )
}
