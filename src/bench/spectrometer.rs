//! The `Spectrometer` capability trait and the `command` backend: an external program (argv,
//! no shell) that takes one acquisition and prints it as CSV on stdout.
//!
//! The program's output is `wavelength_nm,counts` (header line, `#` comments allowed). A
//! helper is untrusted: it runs in its own process group, what it prints is capped (from the
//! expected pixel count) and only a short excerpt of it reaches messages, the log and the
//! journal; it is killed with its children when it overruns the machine file's timeout.
//!
//! [`acquire_retrying`] retries a failed acquisition a couple of times: a helper that fails
//! once in a while (a USB hiccup) must not cost a whole run.

use crate::bench::helper_process::{run_capped, HelperFailure};
use crate::bench::machine::SpectrometerSpec;
use crate::error_text::{excerpt, excerpt_bytes, EXCERPT_CHARS};
use crate::optics::table::csv_record;
use crate::spectrum::{Counts, MAX_PIXELS};
use futures::future::BoxFuture;
use std::time::Duration;

/// What an acquisition is of.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AcquireKind {
    /// The sample under the probe.
    Sample,
    /// Light blocked (shutter closed or lamp off).
    Dark,
    /// The reference material.
    Reference,
}

impl AcquireKind {
    /// The word substituted for `{kind}`.
    pub fn as_str(self) -> &'static str {
        match self {
            AcquireKind::Sample => "sample",
            AcquireKind::Dark => "dark",
            AcquireKind::Reference => "reference",
        }
    }
}

/// Why an acquisition failed. Whatever a helper printed appears only as a short excerpt.
#[derive(Debug, thiserror::Error)]
pub enum SpectrometerError {
    #[error("cannot start spectrometer command `{program}`: {source} (check spectrometer.command in the machine file)")]
    Start {
        program: String,
        source: std::io::Error,
    },
    #[error("spectrometer command `{program}` did not finish within {timeout_s} s and was killed (spectrometer.timeout_s)")]
    Timeout { program: String, timeout_s: f64 },
    #[error("spectrometer command `{program}` failed ({status}); its stderr: {stderr}")]
    Failed {
        program: String,
        status: String,
        stderr: String,
    },
    #[error("spectrometer command `{program}` printed more than {cap} bytes, the most {pixels} pixels can take, and was killed with its children; it printed: {start}")]
    TooMuchOutput {
        program: String,
        cap: usize,
        pixels: usize,
        start: String,
    },
    #[error("spectrometer command `{program}` printed a bad spectrum: line {line}: {message}")]
    Output {
        program: String,
        line: usize,
        message: String,
    },
    #[error("the spectrometer returned {got} pixels but {expected} were expected (as many as the dark and reference spectra): check that the spectrometer's settings did not change")]
    Pixels { got: usize, expected: usize },
    #[error("spectrometer helper `{program}`, request {request}: {message}")]
    Helper {
        program: String,
        request: &'static str,
        message: String,
    },
    #[error("invalid acquisition settings: {0}")]
    Settings(String),
    #[error("{last} (tried {tries} times)")]
    GaveUp {
        tries: u32,
        last: Box<SpectrometerError>,
    },
}

/// A spectrometer: raw counts for an integration time (ms) and a number of averaged frames.
///
/// Object-safe (boxed futures) so the sequencer can hold a `Box<dyn Spectrometer>`.
pub trait Spectrometer: Send {
    /// Counts of the sample under the probe.
    fn acquire(
        &mut self,
        integration_ms: f64,
        averages: u32,
    ) -> BoxFuture<'_, Result<Counts, SpectrometerError>>;
    /// Dark counts (no light).
    fn dark(
        &mut self,
        integration_ms: f64,
        averages: u32,
    ) -> BoxFuture<'_, Result<Counts, SpectrometerError>>;
    /// Counts on the reference material.
    fn reference(
        &mut self,
        integration_ms: f64,
        averages: u32,
    ) -> BoxFuture<'_, Result<Counts, SpectrometerError>>;
    /// What it is, for messages and run records.
    fn describe(&self) -> String;

    /// Ends the session with the spectrometer (a long-running helper is told to close).
    fn close(&mut self) -> BoxFuture<'_, Result<(), SpectrometerError>> {
        Box::pin(async { Ok(()) })
    }

    /// One acquisition of `kind`.
    fn take(
        &mut self,
        kind: AcquireKind,
        integration_ms: f64,
        averages: u32,
    ) -> BoxFuture<'_, Result<Counts, SpectrometerError>> {
        match kind {
            AcquireKind::Sample => self.acquire(integration_ms, averages),
            AcquireKind::Dark => self.dark(integration_ms, averages),
            AcquireKind::Reference => self.reference(integration_ms, averages),
        }
    }
}

/// Tries of an acquisition before it counts as failed (common practice: transient faults
/// of a USB spectrometer clear within a second or two).
pub const ACQUIRE_TRIES: u32 = 3;
/// Pause between tries.
pub const RETRY_PAUSE: Duration = Duration::from_millis(500);

/// One acquisition of `kind`, tried up to [`ACQUIRE_TRIES`] times with [`RETRY_PAUSE`]
/// between; a spectrum of other than `pixels` pixels (when given) counts as a failure.
pub async fn acquire_retrying(
    spectrometer: &mut dyn Spectrometer,
    kind: AcquireKind,
    integration_ms: f64,
    averages: u32,
    pixels: Option<usize>,
) -> Result<Counts, SpectrometerError> {
    let mut tries = 0;
    loop {
        tries += 1;
        let result = spectrometer
            .take(kind, integration_ms, averages)
            .await
            .and_then(|c| match pixels {
                Some(expected) if c.counts.len() != expected => Err(SpectrometerError::Pixels {
                    got: c.counts.len(),
                    expected,
                }),
                _ => Ok(c),
            });
        match result {
            Ok(c) => return Ok(c),
            // Bad settings do not get better by asking again.
            Err(e @ SpectrometerError::Settings(_)) => return Err(e),
            Err(e) if tries >= ACQUIRE_TRIES => {
                return Err(SpectrometerError::GaveUp {
                    tries,
                    last: Box::new(e),
                })
            }
            Err(e) => {
                tracing::warn!(
                    kind = kind.as_str(),
                    tries,
                    "acquisition failed, trying again: {e}"
                );
                tokio::time::sleep(RETRY_PAUSE).await;
            }
        }
    }
}

/// Checks acquisition settings (the recipe validates them too; this guards direct callers).
pub fn check_settings(integration_ms: f64, averages: u32) -> Result<(), SpectrometerError> {
    if !(integration_ms > 0.0 && integration_ms <= 60_000.0) {
        return Err(SpectrometerError::Settings(format!(
            "integration time {integration_ms} ms must be in (0, 60000]"
        )));
    }
    if averages == 0 {
        return Err(SpectrometerError::Settings(
            "averages must be at least 1".into(),
        ));
    }
    Ok(())
}

/// The `command` backend.
#[derive(Debug, Clone)]
pub struct CommandSpectrometer {
    argv: Vec<String>,
    timeout: Duration,
    /// The pixel count of the first good spectrum: the output cap follows it.
    pixels: Option<usize>,
}

/// Bytes a CSV row of two numbers may take: full-precision floats are about 20 characters
/// each, so 64 leaves room for spaces and `\r\n`.
const ROW_BYTES: usize = 64;
/// Room for the header and comment lines, bytes.
const HEADER_BYTES: usize = 64 * 1024;

/// The most a helper may print for a spectrum of `pixels` pixels (unknown before the first
/// spectrum: then the [`MAX_PIXELS`] ceiling): twice the rows, generous slack for a helper
/// whose pixel count varies a little, and never past the ceiling.
pub fn output_cap(pixels: Option<usize>) -> (usize, usize) {
    let rows = pixels.map_or(MAX_PIXELS, |p| (2 * p + 1024).min(MAX_PIXELS));
    (rows * ROW_BYTES + HEADER_BYTES, rows)
}

/// Substitutes the placeholders in every argument.
pub fn expand_argv(
    argv: &[String],
    integration_ms: f64,
    averages: u32,
    kind: AcquireKind,
) -> Vec<String> {
    argv.iter()
        .map(|a| {
            a.replace("{integration_ms}", &format!("{integration_ms}"))
                .replace("{averages}", &averages.to_string())
                .replace("{kind}", kind.as_str())
        })
        .collect()
}

impl CommandSpectrometer {
    /// The backend a machine file's `[spectrometer]` describes (`command` must be non-empty).
    pub fn from_spec(spec: &SpectrometerSpec) -> CommandSpectrometer {
        CommandSpectrometer {
            argv: spec.command.clone(),
            timeout: crate::bench::duration_s(spec.timeout_s.max(0.001)),
            pixels: None,
        }
    }

    async fn run(
        &mut self,
        integration_ms: f64,
        averages: u32,
        kind: AcquireKind,
    ) -> Result<Counts, SpectrometerError> {
        check_settings(integration_ms, averages)?;
        let argv = expand_argv(&self.argv, integration_ms, averages, kind);
        let program = argv.first().cloned().unwrap_or_default();
        let (cap, rows) = output_cap(self.pixels);
        let out = run_capped(&argv, cap, self.timeout)
            .await
            .map_err(|f| match f {
                HelperFailure::Start(source) => SpectrometerError::Start {
                    program: program.clone(),
                    source,
                },
                HelperFailure::Timeout => SpectrometerError::Timeout {
                    program: program.clone(),
                    timeout_s: self.timeout.as_secs_f64(),
                },
                HelperFailure::Overflow { cap, head } => SpectrometerError::TooMuchOutput {
                    program: program.clone(),
                    cap,
                    pixels: rows,
                    start: excerpt_bytes(&head, EXCERPT_CHARS),
                },
            })?;
        let stderr = excerpt_bytes(&out.stderr_head, EXCERPT_CHARS);
        if out.stderr_len > 0 {
            tracing::info!(program = %program, kind = kind.as_str(), bytes = out.stderr_len, "spectrometer stderr: {}", stderr.trim());
        }
        if !out.status.success() {
            return Err(SpectrometerError::Failed {
                program,
                status: out.status.to_string(),
                stderr: stderr.trim().to_string(),
            });
        }
        let counts = parse_counts_csv(&String::from_utf8_lossy(&out.stdout)).map_err(
            |(line, message)| SpectrometerError::Output {
                program,
                line,
                message,
            },
        )?;
        self.pixels.get_or_insert(counts.counts.len());
        Ok(counts)
    }
}

impl Spectrometer for CommandSpectrometer {
    fn acquire(
        &mut self,
        integration_ms: f64,
        averages: u32,
    ) -> BoxFuture<'_, Result<Counts, SpectrometerError>> {
        Box::pin(self.run(integration_ms, averages, AcquireKind::Sample))
    }
    fn dark(
        &mut self,
        integration_ms: f64,
        averages: u32,
    ) -> BoxFuture<'_, Result<Counts, SpectrometerError>> {
        Box::pin(self.run(integration_ms, averages, AcquireKind::Dark))
    }
    fn reference(
        &mut self,
        integration_ms: f64,
        averages: u32,
    ) -> BoxFuture<'_, Result<Counts, SpectrometerError>> {
        Box::pin(self.run(integration_ms, averages, AcquireKind::Reference))
    }
    fn describe(&self) -> String {
        format!("command {}", excerpt(&self.argv.join(" "), EXCERPT_CHARS))
    }
}

/// Parses `wavelength_nm,counts` CSV (header first, `#` comments and blank lines skipped,
/// wavelengths strictly increasing, 3 to [`MAX_PIXELS`] rows). Errors give the 1-based line
/// and quote at most an excerpt of it.
pub fn parse_counts_csv(text: &str) -> Result<Counts, (usize, String)> {
    let mut header = false;
    let mut c = Counts::default();
    let mut last_line = 0;
    for (i, raw) in text.lines().enumerate() {
        let line = i + 1;
        last_line = line;
        let Some((t, cells)) = csv_record(raw) else {
            continue;
        };
        let quoted = || excerpt(t, EXCERPT_CHARS);
        if !header {
            if cells.len() != 2 || !cells[0].eq_ignore_ascii_case("wavelength_nm") {
                return Err((
                    line,
                    format!("header \"{}\" should be wavelength_nm,counts", quoted()),
                ));
            }
            header = true;
            continue;
        }
        if cells.len() != 2 {
            return Err((line, format!("{} fields, expected 2", cells.len())));
        }
        if c.counts.len() == MAX_PIXELS {
            return Err((
                line,
                format!("more than {MAX_PIXELS} rows: no spectrometer has this many pixels"),
            ));
        }
        let num = |s: &str| s.parse::<f64>().ok().filter(|v| v.is_finite());
        let (Some(w), Some(v)) = (num(cells[0]), num(cells[1])) else {
            return Err((line, format!("\"{}\" is not two numbers", quoted())));
        };
        if c.wavelength_nm.last().is_some_and(|&p| w <= p) {
            return Err((line, format!("wavelength {w} nm does not increase")));
        }
        c.wavelength_nm.push(w);
        c.counts.push(v);
    }
    if c.counts.len() < 3 {
        return Err((
            last_line.max(1),
            format!("{} data rows; at least 3 are needed", c.counts.len()),
        ));
    }
    Ok(c)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn placeholders_expand() {
        let argv = vec![
            "grab".into(),
            "--ms={integration_ms}".into(),
            "{averages}".into(),
            "--{kind}".into(),
        ];
        assert_eq!(
            expand_argv(&argv, 12.5, 4, AcquireKind::Dark),
            vec!["grab", "--ms=12.5", "4", "--dark"]
        );
    }

    #[test]
    fn counts_csv_errors_name_the_line() {
        let ok = parse_counts_csv("# from a test\nwavelength_nm,counts\n400,10\n401,11\n402,12\n")
            .unwrap();
        assert_eq!(ok.counts, vec![10.0, 11.0, 12.0]);
        assert_eq!(
            parse_counts_csv("wavelength_nm,counts\n400,1\n399,2\n")
                .unwrap_err()
                .0,
            3
        );
        assert_eq!(parse_counts_csv("lambda,x\n").unwrap_err().0, 1);
        assert_eq!(
            parse_counts_csv("wavelength_nm,counts\n400,abc\n")
                .unwrap_err()
                .0,
            2
        );
    }
}
