//! The `helper` backend: one long-running spectrometer program spoken to over its stdin and
//! stdout with the line protocol of [`super::helper_protocol`]. It is started (in its own
//! process group, no shell) and greeted on first use; a helper that dies or stops answering
//! is restarted once per request; a reply past the size cap or malformed is an error, and the
//! helper is killed (the next request starts a fresh one). Its stderr is drained all along
//! and logged as excerpts.

use super::helper_process::{spawn_in_group, ProcessGroup};
use super::helper_protocol::{parse_bye, parse_counts, parse_hello, Hello, Request};
use super::machine::SpectrometerSpec;
use super::spectrometer::{
    check_settings, output_cap, AcquireKind, Spectrometer, SpectrometerError,
};
use crate::error_text::{excerpt_bytes, EXCERPT_CHARS};
use crate::spectrum::Counts;
use futures::future::BoxFuture;
use std::process::Stdio;
use std::time::Duration;
use tokio::io::{AsyncBufReadExt, AsyncRead, AsyncReadExt, AsyncWriteExt, BufReader};
use tokio::process::{Child, ChildStdin, ChildStdout};

/// Stderr chunks of one helper quoted in the log; later ones are read and dropped.
const STDERR_LOG_CHUNKS: usize = 20;
/// Longest reply to `hello` or `close`, bytes.
const SHORT_REPLY_BYTES: usize = 64 * 1024;

/// The `helper` backend.
pub struct HelperSpectrometer {
    argv: Vec<String>,
    timeout: Duration,
    running: Option<Running>,
}

/// A started and greeted helper.
struct Running {
    // Field order is drop order: the group is killed before the pipes close.
    group: ProcessGroup,
    _child: Child,
    stdin: ChildStdin,
    stdout: BufReader<ChildStdout>,
    hello: Hello,
}

/// Why one exchange with a running helper failed.
enum Fault {
    /// It died or did not answer in time: worth one restart.
    Gone(String),
    /// It answered wrongly (too long, malformed, `error`): not restarted.
    Reply(String),
}

impl HelperSpectrometer {
    /// The backend a machine file's `[spectrometer]` describes (`command` must be non-empty).
    pub fn from_spec(spec: &SpectrometerSpec) -> HelperSpectrometer {
        HelperSpectrometer {
            argv: spec.command.clone(),
            timeout: crate::bench::duration_s(spec.timeout_s.max(0.001)),
            running: None,
        }
    }

    fn program(&self) -> String {
        self.argv.first().cloned().unwrap_or_default()
    }

    fn error(&self, request: &Request, message: String) -> SpectrometerError {
        SpectrometerError::Helper {
            program: self.program(),
            request: request.name(),
            message,
        }
    }

    /// Starts the helper and greets it.
    async fn start(&self) -> Result<Running, SpectrometerError> {
        let (mut child, group) = spawn_in_group(&self.argv, Stdio::piped()).map_err(|source| {
            SpectrometerError::Start {
                program: self.program(),
                source,
            }
        })?;
        let stdin = child.stdin.take().expect("stdin is piped");
        let stdout = BufReader::new(child.stdout.take().expect("stdout is piped"));
        let stderr = child.stderr.take().expect("stderr is piped");
        tokio::spawn(log_stderr(stderr, self.program()));
        let mut running = Running {
            group,
            _child: child,
            stdin,
            stdout,
            hello: Hello {
                wavelength_nm: Vec::new(),
            },
        };
        let reply = exchange(
            &mut running,
            &Request::Hello,
            SHORT_REPLY_BYTES,
            self.timeout,
        )
        .await
        .map_err(|f| self.error(&Request::Hello, fault_text(f)))?;
        running.hello = parse_hello(&reply).map_err(|m| self.error(&Request::Hello, m))?;
        Ok(running)
    }

    /// Sends `request` and returns the reply line, starting the helper when none runs and
    /// restarting it once if it dies or stops answering.
    async fn request(
        &mut self,
        request: Request,
        cap: impl Fn(&Hello) -> usize,
    ) -> Result<(String, &Hello), SpectrometerError> {
        let mut restarted = false;
        loop {
            let mut running = match self.running.take() {
                Some(r) => r,
                None => self.start().await?,
            };
            let cap = cap(&running.hello);
            match exchange(&mut running, &request, cap, self.timeout).await {
                Ok(reply) => {
                    let hello = &self.running.insert(running).hello;
                    return Ok((reply, hello));
                }
                Err(Fault::Gone(why)) if !restarted => {
                    tracing::warn!(program = %self.program(), "spectrometer helper {why}; restarting it");
                    restarted = true;
                }
                // Dropping `running` kills the helper and its group.
                Err(f) => return Err(self.error(&request, fault_text(f))),
            }
        }
    }

    async fn take(
        &mut self,
        kind: AcquireKind,
        integration_ms: f64,
        averages: u32,
    ) -> Result<Counts, SpectrometerError> {
        check_settings(integration_ms, averages)?;
        let request = Request::take(kind, integration_ms, averages);
        let (reply, hello) = self
            .request(request, |h| output_cap(Some(h.wavelength_nm.len())).0)
            .await?;
        let wavelength_nm = hello.wavelength_nm.clone();
        match parse_counts(&reply, wavelength_nm.len()) {
            Ok(counts) => Ok(Counts {
                wavelength_nm,
                counts,
            }),
            Err(m) => {
                self.running = None;
                Err(self.error(&request, m))
            }
        }
    }

    /// Says `close` and waits for `ok bye`; the helper is killed either way.
    pub async fn close_helper(&mut self) -> Result<(), SpectrometerError> {
        let Some(mut running) = self.running.take() else {
            return Ok(());
        };
        let reply = exchange(
            &mut running,
            &Request::Close,
            SHORT_REPLY_BYTES,
            self.timeout,
        )
        .await
        .map_err(|f| self.error(&Request::Close, fault_text(f)))?;
        parse_bye(&reply).map_err(|m| self.error(&Request::Close, m))
    }
}

fn fault_text(f: Fault) -> String {
    match f {
        Fault::Gone(m) | Fault::Reply(m) => m,
    }
}

/// One request and its reply line (at most `cap` bytes), within `timeout`.
async fn exchange(
    running: &mut Running,
    request: &Request,
    cap: usize,
    timeout: Duration,
) -> Result<String, Fault> {
    let work = async {
        running
            .stdin
            .write_all(request.line().as_bytes())
            .await
            .map_err(|e| Fault::Gone(format!("cannot be written to ({e})")))?;
        running
            .stdin
            .flush()
            .await
            .map_err(|e| Fault::Gone(format!("cannot be written to ({e})")))?;
        let mut line = Vec::new();
        (&mut running.stdout)
            .take(cap as u64 + 1)
            .read_until(b'\n', &mut line)
            .await
            .map_err(|e| Fault::Gone(format!("cannot be read ({e})")))?;
        if line.is_empty() {
            return Err(Fault::Gone("exited".into()));
        }
        if !line.ends_with(b"\n") {
            running.group.kill();
            return Err(if line.len() > cap {
                Fault::Reply(format!(
                    "replied more than {cap} bytes in one line and was killed; it began: {}",
                    excerpt_bytes(&line, EXCERPT_CHARS)
                ))
            } else {
                Fault::Gone("exited in the middle of a reply".into())
            });
        }
        Ok(String::from_utf8_lossy(&line).into_owned())
    };
    match tokio::time::timeout(timeout, work).await {
        Ok(r) => r,
        Err(_) => {
            running.group.kill();
            Err(Fault::Gone(format!(
                "did not answer within {} s (spectrometer.timeout_s)",
                timeout.as_secs_f64()
            )))
        }
    }
}

/// Drains a helper's stderr, logging excerpts of its first chunks.
async fn log_stderr(mut stderr: impl AsyncRead + Unpin, program: String) {
    let mut buf = vec![0u8; 4096];
    let mut logged = 0;
    while let Ok(n) = stderr.read(&mut buf).await {
        if n == 0 {
            break;
        }
        if logged < STDERR_LOG_CHUNKS {
            logged += 1;
            let text = excerpt_bytes(&buf[..n], EXCERPT_CHARS);
            tracing::info!(program = %program, "spectrometer helper stderr: {}", text.trim());
        }
    }
}

impl Spectrometer for HelperSpectrometer {
    fn acquire(
        &mut self,
        integration_ms: f64,
        averages: u32,
    ) -> BoxFuture<'_, Result<Counts, SpectrometerError>> {
        Box::pin(self.take(AcquireKind::Sample, integration_ms, averages))
    }
    fn dark(
        &mut self,
        integration_ms: f64,
        averages: u32,
    ) -> BoxFuture<'_, Result<Counts, SpectrometerError>> {
        Box::pin(self.take(AcquireKind::Dark, integration_ms, averages))
    }
    fn reference(
        &mut self,
        integration_ms: f64,
        averages: u32,
    ) -> BoxFuture<'_, Result<Counts, SpectrometerError>> {
        Box::pin(self.take(AcquireKind::Reference, integration_ms, averages))
    }
    fn describe(&self) -> String {
        format!(
            "helper {}",
            crate::error_text::excerpt(&self.argv.join(" "), EXCERPT_CHARS)
        )
    }
    fn close(&mut self) -> BoxFuture<'_, Result<(), SpectrometerError>> {
        Box::pin(self.close_helper())
    }
}
