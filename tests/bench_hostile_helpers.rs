//! The `command` spectrometer against hostile helper programs (issue 18): output past the cap,
//! a flooded stderr, orphaned children, timeouts, a dropped acquisition, bad lines, and
//! transient failures retried. Helpers are `#!/bin/sh` scripts the tests write; isopach runs
//! them without a shell.

mod hostile_common;
mod run_common; // hostile_common builds on it

use hostile_common::{gone, pid_in, sample_calls, script, spectrum_helper};
use isopach::bench::machine::{SpectrometerKind, SpectrometerSpec};
use isopach::bench::spectrometer::{
    acquire_retrying, output_cap, AcquireKind, CommandSpectrometer, ACQUIRE_TRIES,
};
use isopach::bench::{Spectrometer, SpectrometerError};
use std::path::Path;
use std::time::{Duration, Instant};

fn spectrometer(program: &Path, timeout_s: f64) -> CommandSpectrometer {
    CommandSpectrometer::from_spec(&SpectrometerSpec {
        kind: SpectrometerKind::Command,
        command: vec![program.to_str().unwrap().into(), "{kind}".into()],
        timeout_s,
        resolution_nm: 0.0,
    })
}

/// A helper that starts a sleeping child (its pid in `DIR/pid`) and sleeps itself.
fn hang_helper(dir: &Path) -> std::path::PathBuf {
    script(
        dir,
        "hang.sh",
        "sleep 300 &\necho $! > \"$(dirname \"$0\")/pid\"\nsleep 300",
    )
}

/// Messages that quote a helper stay short whatever it printed.
const MESSAGE_MAX: usize = 1200;

#[tokio::test]
async fn a_helper_printing_200_mb_is_killed_at_the_cap() {
    let dir = tempfile::tempdir().unwrap();
    let helper = script(
        dir.path(),
        "flood.sh",
        "echo $$ > \"$(dirname \"$0\")/pid\"\nyes 400,1 | head -c 200000000",
    );
    let mut s = spectrometer(&helper, 60.0);
    let start = Instant::now();
    let e = s.acquire(10.0, 1).await.unwrap_err();
    let text = e.to_string();
    let (cap, _) = output_cap(None);
    assert!(
        matches!(e, SpectrometerError::TooMuchOutput { cap: c, .. } if c == cap),
        "{text}"
    );
    assert!(text.contains(&format!("more than {cap} bytes")), "{text}");
    assert!(text.len() < MESSAGE_MAX, "{} chars", text.len());
    // Killed at the cap, not read to its end (that would be 200 MB through a pipe).
    assert!(
        start.elapsed() < Duration::from_secs(20),
        "{:?}",
        start.elapsed()
    );
    assert!(gone(pid_in(dir.path())), "the helper survived");
}

#[tokio::test]
async fn the_cap_follows_the_first_spectrum() {
    let dir = tempfile::tempdir().unwrap();
    // 512 pixels at first; then a sample of 100 000 rows, past twice the pixel count.
    let helper = spectrum_helper(dir.path(), "PX=100000");
    let mut s = spectrometer(&helper, 30.0);
    assert_eq!(s.dark(10.0, 1).await.unwrap().counts.len(), 512);
    let e = s.acquire(10.0, 1).await.unwrap_err();
    let (cap, rows) = output_cap(Some(512));
    assert_eq!(rows, 2 * 512 + 1024);
    assert!(
        matches!(e, SpectrometerError::TooMuchOutput { cap: c, pixels, .. } if c == cap && pixels == rows),
        "{e}"
    );
}

#[tokio::test]
async fn a_helper_flooding_stderr_does_not_block() {
    let dir = tempfile::tempdir().unwrap();
    // 50 MB on stderr before the spectrum: a pipe holds 64 KiB, so a reader that took stdout
    // first would wait forever.
    let helper = spectrum_helper(dir.path(), "head -c 50000000 /dev/zero >&2");
    let mut s = spectrometer(&helper, 60.0);
    let c = s.acquire(10.0, 1).await.unwrap();
    assert_eq!(c.counts.len(), 512);
}

#[tokio::test]
async fn a_failure_quotes_only_an_excerpt_of_stderr() {
    let dir = tempfile::tempdir().unwrap();
    let helper = spectrum_helper(
        dir.path(),
        "printf 'USB \\033[31mhiccup\\n' >&2; head -c 1000000 /dev/zero | tr '\\0' e >&2; exit 3",
    );
    let mut s = spectrometer(&helper, 30.0);
    let e = s.acquire(10.0, 1).await.unwrap_err();
    let text = e.to_string();
    assert!(matches!(e, SpectrometerError::Failed { .. }), "{text}");
    assert!(text.contains("exit status: 3"), "{text}");
    assert!(text.contains("USB \\u{1b}[31mhiccup\\neee"), "{text}");
    assert!(
        !text.contains('\u{1b}') && text.len() < MESSAGE_MAX,
        "{text}"
    );
}

#[tokio::test]
async fn a_bad_line_is_quoted_short_and_escaped() {
    let dir = tempfile::tempdir().unwrap();
    let helper = script(
        dir.path(),
        "bad.sh",
        "printf 'wavelength_nm,counts\\n400,1\\n401,\\033[2J'\nhead -c 100000 /dev/zero | tr '\\0' x",
    );
    let mut s = spectrometer(&helper, 30.0);
    let e = s.acquire(10.0, 1).await.unwrap_err();
    let text = e.to_string();
    assert!(
        matches!(e, SpectrometerError::Output { line: 3, .. }),
        "{text}"
    );
    assert!(text.contains("401,\\u{1b}[2Jxxx"), "{text}");
    assert!(
        !text.contains('\u{1b}') && text.len() < MESSAGE_MAX,
        "{text}"
    );
}

#[tokio::test]
async fn an_orphaned_child_dies_with_the_helper() {
    let dir = tempfile::tempdir().unwrap();
    // The sleeping child keeps the helper's stdout open: without the group kill the read
    // would wait for it (300 s), past the 30 s timeout.
    let helper = spectrum_helper(dir.path(), "sleep 300 &\n  echo $! > \"$DIR/pid\"");
    let mut s = spectrometer(&helper, 30.0);
    let start = Instant::now();
    assert_eq!(s.acquire(10.0, 1).await.unwrap().counts.len(), 512);
    assert!(
        start.elapsed() < Duration::from_secs(10),
        "{:?}",
        start.elapsed()
    );
    assert!(gone(pid_in(dir.path())), "the orphan survived");
}

#[tokio::test]
async fn a_timeout_kills_the_helper_and_its_children() {
    let dir = tempfile::tempdir().unwrap();
    let helper = hang_helper(dir.path());
    let mut s = spectrometer(&helper, 0.5);
    let e = s.acquire(10.0, 1).await.unwrap_err();
    assert!(matches!(e, SpectrometerError::Timeout { .. }), "{e}");
    assert!(
        gone(pid_in(dir.path())),
        "the helper's child survived the timeout"
    );
}

#[tokio::test]
async fn a_dropped_acquisition_kills_the_helper_and_its_children() {
    let dir = tempfile::tempdir().unwrap();
    let helper = hang_helper(dir.path());
    let mut s = spectrometer(&helper, 60.0);
    // A stop (Ctrl-C) drops the acquisition's future, as this timeout does.
    let r = tokio::time::timeout(Duration::from_millis(500), s.acquire(10.0, 1)).await;
    assert!(r.is_err());
    assert!(
        gone(pid_in(dir.path())),
        "the helper's child survived the drop"
    );
}

#[tokio::test]
async fn one_failure_is_retried() {
    let dir = tempfile::tempdir().unwrap();
    let helper = spectrum_helper(
        dir.path(),
        "[ $n = 1 ] && { echo 'USB hiccup' >&2; exit 1; }",
    );
    let mut s = spectrometer(&helper, 30.0);
    let c = acquire_retrying(&mut s, AcquireKind::Sample, 10.0, 1, Some(512))
        .await
        .unwrap();
    assert_eq!(c.counts.len(), 512);
    assert_eq!(sample_calls(dir.path()), 2);
}

#[tokio::test]
async fn repeated_failures_give_up_after_the_tries() {
    let dir = tempfile::tempdir().unwrap();
    // A pixel count other than the reference's counts as a failure too.
    let helper = spectrum_helper(dir.path(), "PX=500");
    let mut s = spectrometer(&helper, 30.0);
    let e = acquire_retrying(&mut s, AcquireKind::Sample, 10.0, 1, Some(512))
        .await
        .unwrap_err();
    let text = e.to_string();
    assert!(
        matches!(e, SpectrometerError::GaveUp { tries, .. } if tries == ACQUIRE_TRIES),
        "{text}"
    );
    assert!(text.contains("returned 500 pixels but 512"), "{text}");
    assert_eq!(sample_calls(dir.path()), ACQUIRE_TRIES);
}
