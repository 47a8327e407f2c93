//! The `Spectrometer` capability trait and the `command` backend: an external program (argv,
//! no shell) that takes one acquisition and prints it as CSV on stdout.
//!
//! The program's output is `wavelength_nm,counts` (header line, `#` comments allowed); its
//! stderr is kept in the log; it is killed when it overruns the machine file's timeout.

use crate::bench::machine::SpectrometerSpec;
use crate::spectrum::Counts;
use futures::future::BoxFuture;
use std::process::Stdio;
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

/// Why an acquisition failed.
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
    #[error("spectrometer command `{program}` printed a bad spectrum: line {line}: {message}")]
    Output {
        program: String,
        line: usize,
        message: String,
    },
    #[error("invalid acquisition settings: {0}")]
    Settings(String),
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
        }
    }

    async fn run(
        &self,
        integration_ms: f64,
        averages: u32,
        kind: AcquireKind,
    ) -> Result<Counts, SpectrometerError> {
        check_settings(integration_ms, averages)?;
        let argv = expand_argv(&self.argv, integration_ms, averages, kind);
        let program = argv.first().cloned().unwrap_or_default();
        let child = tokio::process::Command::new(&program)
            .args(&argv[1..])
            .stdin(Stdio::null())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .kill_on_drop(true)
            .spawn()
            .map_err(|source| SpectrometerError::Start {
                program: program.clone(),
                source,
            })?;
        let out = match tokio::time::timeout(self.timeout, child.wait_with_output()).await {
            Ok(r) => r.map_err(|source| SpectrometerError::Start {
                program: program.clone(),
                source,
            })?,
            Err(_) => {
                return Err(SpectrometerError::Timeout {
                    program,
                    timeout_s: self.timeout.as_secs_f64(),
                });
            }
        };
        let stderr = String::from_utf8_lossy(&out.stderr).trim().to_string();
        if !stderr.is_empty() {
            tracing::info!(program = %program, kind = kind.as_str(), "spectrometer stderr: {stderr}");
        }
        if !out.status.success() {
            return Err(SpectrometerError::Failed {
                program,
                status: out.status.to_string(),
                stderr,
            });
        }
        parse_counts_csv(&String::from_utf8_lossy(&out.stdout)).map_err(|(line, message)| {
            SpectrometerError::Output {
                program,
                line,
                message,
            }
        })
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
        format!("command {}", self.argv.join(" "))
    }
}

/// Parses `wavelength_nm,counts` CSV (header first, `#` comments and blank lines skipped,
/// wavelengths strictly increasing, at least 3 rows). Errors give the 1-based line.
pub fn parse_counts_csv(text: &str) -> Result<Counts, (usize, String)> {
    let mut header = false;
    let mut c = Counts::default();
    let mut last_line = 0;
    for (i, raw) in text.lines().enumerate() {
        let line = i + 1;
        last_line = line;
        let t = raw.trim().trim_start_matches('\u{feff}');
        if t.is_empty() || t.starts_with('#') {
            continue;
        }
        let cells: Vec<&str> = t.split(',').map(str::trim).collect();
        if !header {
            if cells.len() != 2 || !cells[0].eq_ignore_ascii_case("wavelength_nm") {
                return Err((line, format!("header {t:?} should be wavelength_nm,counts")));
            }
            header = true;
            continue;
        }
        if cells.len() != 2 {
            return Err((line, format!("{} fields, expected 2", cells.len())));
        }
        let num = |s: &str| s.parse::<f64>().ok().filter(|v| v.is_finite());
        let (Some(w), Some(v)) = (num(cells[0]), num(cells[1])) else {
            return Err((line, format!("{t:?} is not two numbers")));
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
