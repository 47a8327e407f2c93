//! The line protocol of a `helper` spectrometer: one long-running program, one request per
//! line on its stdin, one reply per line on its stdout (UTF-8, `\n`). Pure: requests to
//! text, replies to values, every reply checked. docs/bench.md documents it for labs.
//!
//! ```text
//! hello 1                      → ok pixels=N calibration=C0,C1[,C2[,C3]]
//! dark MS AVERAGES             → ok counts=V1,…,VN
//! acquire MS AVERAGES KIND     → ok counts=V1,…,VN      (KIND: sample | reference)
//! close                        → ok bye
//! any request                  → error TEXT             (the request failed; say why)
//! ```
//!
//! The calibration gives pixel `i` (from 0) the wavelength `C0 + C1·i + C2·i² + C3·i³` nm,
//! the polynomial form spectrometer makers store their calibration in (common practice).

use super::spectrometer::AcquireKind;
use crate::error_text::{excerpt, EXCERPT_CHARS};
use crate::spectrum::MAX_PIXELS;

/// The protocol version isopach speaks.
pub const VERSION: u32 = 1;

/// A request to the helper.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Request {
    Hello,
    Dark {
        integration_ms: f64,
        averages: u32,
    },
    Acquire {
        integration_ms: f64,
        averages: u32,
        kind: AcquireKind,
    },
    Close,
}

impl Request {
    /// The request for one acquisition of `kind`.
    pub fn take(kind: AcquireKind, integration_ms: f64, averages: u32) -> Request {
        match kind {
            AcquireKind::Dark => Request::Dark {
                integration_ms,
                averages,
            },
            _ => Request::Acquire {
                integration_ms,
                averages,
                kind,
            },
        }
    }

    /// The request's line, with its `\n`.
    pub fn line(&self) -> String {
        match self {
            Request::Hello => format!("hello {VERSION}\n"),
            Request::Dark {
                integration_ms,
                averages,
            } => format!("dark {integration_ms} {averages}\n"),
            Request::Acquire {
                integration_ms,
                averages,
                kind,
            } => format!("acquire {integration_ms} {averages} {}\n", kind.as_str()),
            Request::Close => "close\n".into(),
        }
    }

    /// The request's first word, for messages.
    pub fn name(&self) -> &'static str {
        match self {
            Request::Hello => "hello",
            Request::Dark { .. } => "dark",
            Request::Acquire { .. } => "acquire",
            Request::Close => "close",
        }
    }
}

/// What the helper said in reply to `hello`.
#[derive(Debug, Clone, PartialEq)]
pub struct Hello {
    /// The wavelength of every pixel, nm, strictly increasing.
    pub wavelength_nm: Vec<f64>,
}

/// The fields of an `ok` reply, or why the reply is not one (an `error` reply's text, or
/// what is wrong with it), quoting at most an excerpt.
fn ok_fields(reply: &str) -> Result<Vec<(&str, &str)>, String> {
    let reply = reply.trim_end_matches(['\n', '\r']);
    if let Some(text) = reply.strip_prefix("error") {
        return Err(format!(
            "the helper says: {}",
            excerpt(text.trim(), EXCERPT_CHARS)
        ));
    }
    let Some(rest) = reply.strip_prefix("ok") else {
        return Err(format!(
            "reply \"{}\" should start with ok or error",
            excerpt(reply, EXCERPT_CHARS)
        ));
    };
    rest.split_whitespace()
        .map(|f| {
            f.split_once('=')
                .ok_or_else(|| format!("field \"{}\" is not key=value", excerpt(f, 40)))
        })
        .collect()
}

fn field<'a>(fields: &[(&str, &'a str)], key: &str) -> Result<&'a str, String> {
    fields
        .iter()
        .find(|(k, _)| *k == key)
        .map(|(_, v)| *v)
        .ok_or_else(|| format!("the reply has no {key}="))
}

fn numbers(text: &str, what: &str) -> Result<Vec<f64>, String> {
    text.split(',')
        .enumerate()
        .map(|(i, v)| {
            v.parse::<f64>()
                .ok()
                .filter(|v| v.is_finite())
                .ok_or_else(|| {
                    format!(
                        "{what} {}: \"{}\" is not a finite number",
                        i + 1,
                        excerpt(v, 40)
                    )
                })
        })
        .collect()
}

/// Checks the reply to `hello`: a pixel count in 3..=[`MAX_PIXELS`] and a calibration of 2
/// to 4 coefficients that gives strictly increasing, positive wavelengths.
pub fn parse_hello(reply: &str) -> Result<Hello, String> {
    let fields = ok_fields(reply)?;
    let pixels: usize = field(&fields, "pixels")?
        .parse()
        .map_err(|_| "pixels= is not a whole number".to_string())?;
    if !(3..=MAX_PIXELS).contains(&pixels) {
        return Err(format!("pixels={pixels} must be 3 to {MAX_PIXELS}"));
    }
    let c = numbers(field(&fields, "calibration")?, "calibration coefficient")?;
    if !(2..=4).contains(&c.len()) {
        return Err(format!(
            "calibration= has {} coefficients; give 2 to 4 (C0,C1[,C2[,C3]])",
            c.len()
        ));
    }
    let wavelength_nm: Vec<f64> = (0..pixels)
        .map(|i| {
            let x = i as f64;
            c.iter().rev().fold(0.0, |acc, k| acc * x + k)
        })
        .collect();
    if let Some(i) = (1..pixels).find(|&i| !(wavelength_nm[i] > wavelength_nm[i - 1])) {
        return Err(format!(
            "the calibration does not increase at pixel {i} ({} nm after {} nm)",
            wavelength_nm[i],
            wavelength_nm[i - 1]
        ));
    }
    if !(wavelength_nm[0] > 0.0) || !wavelength_nm[pixels - 1].is_finite() {
        return Err("the calibration gives wavelengths that are not positive and finite".into());
    }
    Ok(Hello { wavelength_nm })
}

/// Checks the reply to `dark` or `acquire`: exactly `pixels` finite counts.
pub fn parse_counts(reply: &str, pixels: usize) -> Result<Vec<f64>, String> {
    let fields = ok_fields(reply)?;
    let counts = numbers(field(&fields, "counts")?, "count")?;
    if counts.len() != pixels {
        return Err(format!(
            "{} counts, but hello said pixels={pixels}",
            counts.len()
        ));
    }
    Ok(counts)
}

/// Checks the reply to `close`.
pub fn parse_bye(reply: &str) -> Result<(), String> {
    let reply = reply.trim_end();
    if reply == "ok bye" {
        return Ok(());
    }
    ok_fields(reply)?;
    Err(format!(
        "reply \"{}\" to close should be ok bye",
        excerpt(reply, EXCERPT_CHARS)
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn requests_are_lines() {
        assert_eq!(Request::Hello.line(), "hello 1\n");
        assert_eq!(
            Request::take(AcquireKind::Dark, 12.5, 4).line(),
            "dark 12.5 4\n"
        );
        assert_eq!(
            Request::take(AcquireKind::Reference, 10.0, 2).line(),
            "acquire 10 2 reference\n"
        );
        assert_eq!(Request::Close.line(), "close\n");
    }

    #[test]
    fn hello_gives_the_wavelength_of_every_pixel() {
        let h = parse_hello("ok pixels=4 calibration=400,2,0.5\n").unwrap();
        assert_eq!(h.wavelength_nm, vec![400.0, 402.5, 406.0, 410.5]);
        for (bad, why) in [
            ("ok pixels=2 calibration=400,1", "must be 3"),
            ("ok pixels=5 calibration=400", "2 to 4"),
            (
                "ok pixels=5 calibration=400,-1",
                "does not increase at pixel 1",
            ),
            ("ok pixels=5", "no calibration="),
            ("ok pixels=x calibration=1,1", "whole number"),
            ("ready", "should start with ok"),
            (
                "error no device on USB",
                "the helper says: no device on USB",
            ),
        ] {
            let e = parse_hello(bad).unwrap_err();
            assert!(e.contains(why), "{bad}: {e}");
        }
    }

    #[test]
    fn counts_are_checked() {
        assert_eq!(
            parse_counts("ok counts=1,2.5,3\n", 3).unwrap(),
            [1.0, 2.5, 3.0]
        );
        assert!(parse_counts("ok counts=1,2\n", 3)
            .unwrap_err()
            .contains("2 counts, but hello said pixels=3"));
        assert!(parse_counts("ok counts=1,nan,3", 3)
            .unwrap_err()
            .contains("count 2"));
        let long = format!("error {}\u{1b}", "x".repeat(10_000));
        let e = parse_counts(&long, 3).unwrap_err();
        assert!(e.len() < 400 && !e.contains('\u{1b}'), "{e}");
        assert!(parse_bye("ok bye\n").is_ok());
        assert!(parse_bye("ok").is_err());
    }
}
