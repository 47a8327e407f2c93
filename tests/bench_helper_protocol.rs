//! The `helper` spectrometer (issue 13 item 3): the example helper
//! (scripts/spectrometer_helper.py, simulated mode) driven over the line protocol, a helper
//! that dies restarted once, and hostile helpers (a flooding reply, silence) bounded by the
//! same caps and timeouts as the `command` kind.

mod hostile_common;
mod run_common;

use hostile_common::{finished_run, gone, pid_in, script, with_spectrometer};
use isopach::bench::helper_spectrometer::HelperSpectrometer;
use isopach::bench::machine::{SpectrometerKind, SpectrometerSpec};
use isopach::bench::Spectrometer;
use isopach::run::events::Event;
use run_common::*;
use std::time::{Duration, Instant};

fn example(extra: &[&str]) -> Vec<String> {
    let script = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/scripts/spectrometer_helper.py"
    );
    let mut argv = vec!["python3".to_string(), script.into(), "--simulate".into()];
    argv.extend(extra.iter().map(|s| s.to_string()));
    argv
}

fn helper(argv: Vec<String>, timeout_s: f64) -> HelperSpectrometer {
    HelperSpectrometer::from_spec(&SpectrometerSpec {
        kind: SpectrometerKind::Helper,
        command: argv,
        timeout_s,
        resolution_nm: 0.0,
    })
}

#[tokio::test]
async fn the_example_helper_speaks_the_protocol() {
    let mut s = helper(example(&[]), 20.0);
    let dark = s.dark(10.0, 2).await.unwrap();
    let reference = s.reference(10.0, 2).await.unwrap();
    let sample = s.acquire(10.0, 2).await.unwrap();
    // The simulated calibration: 512 pixels from 420 to 980 nm.
    assert_eq!(sample.counts.len(), 512);
    assert_eq!(sample.wavelength_nm, dark.wavelength_nm);
    assert!((sample.wavelength_nm[0] - 420.0).abs() < 1e-9);
    assert!((sample.wavelength_nm[511] - 980.0).abs() < 1e-6);
    assert!(dark.counts.iter().all(|c| *c == 100.0));
    // Reference counts above the dark; the sample's fringes move around a lower level.
    assert!(reference
        .counts
        .iter()
        .zip(&dark.counts)
        .all(|(r, d)| r > d));
    assert!(sample
        .counts
        .iter()
        .zip(&reference.counts)
        .any(|(s, r)| s < r));
    s.close().await.unwrap();
}

#[tokio::test]
async fn a_helper_that_dies_is_restarted_once() {
    // The example exits after every second acquisition.
    let mut s = helper(example(&["--die-after", "2"]), 20.0);
    for _ in 0..5 {
        assert_eq!(s.acquire(10.0, 1).await.unwrap().counts.len(), 512);
    }
    s.close().await.unwrap();
}

#[tokio::test]
async fn a_helper_error_reply_is_reported() {
    let mut s = helper(example(&[]), 20.0);
    // Zero averages never reach the helper; a failing driver answers `error`.
    assert!(s.acquire(10.0, 0).await.is_err());
    let dir = tempfile::tempdir().unwrap();
    let h = script(
        dir.path(),
        "err.sh",
        "read l; echo 'ok pixels=3 calibration=400,1'\nread l; echo 'error lamp is off'",
    );
    let mut s = helper(vec![h.to_str().unwrap().into()], 5.0);
    let e = s.dark(10.0, 1).await.unwrap_err().to_string();
    assert!(
        e.contains("request dark: the helper says: lamp is off"),
        "{e}"
    );
}

#[tokio::test]
async fn a_flooding_reply_is_cut_at_the_cap_and_the_helper_killed() {
    let dir = tempfile::tempdir().unwrap();
    let h = script(
        dir.path(),
        "flood.sh",
        "echo $$ > \"$(dirname \"$0\")/pid\"\nread l; echo 'ok pixels=512 calibration=420,1'\nread l; printf 'ok counts='; head -c 200000000 /dev/zero | tr '\\0' 7",
    );
    let mut s = helper(vec![h.to_str().unwrap().into()], 30.0);
    let start = Instant::now();
    let e = s.acquire(10.0, 1).await.unwrap_err().to_string();
    assert!(e.contains("replied more than"), "{e}");
    assert!(e.len() < 1200, "{} chars", e.len());
    assert!(start.elapsed() < Duration::from_secs(20));
    assert!(gone(pid_in(dir.path())), "the helper survived");
}

#[tokio::test]
async fn a_silent_helper_times_out_after_one_restart() {
    let dir = tempfile::tempdir().unwrap();
    let h = script(
        dir.path(),
        "mute.sh",
        "echo $$ >> \"$(dirname \"$0\")/starts\"\nread l; echo 'ok pixels=3 calibration=400,1'\nsleep 300",
    );
    let mut s = helper(vec![h.to_str().unwrap().into()], 0.5);
    let e = s.acquire(10.0, 1).await.unwrap_err().to_string();
    assert!(e.contains("did not answer within 0.5 s"), "{e}");
    let starts = std::fs::read_to_string(dir.path().join("starts")).unwrap();
    let pids: Vec<u32> = starts.lines().map(|l| l.parse().unwrap()).collect();
    assert_eq!(pids.len(), 2, "started {} times", pids.len());
    assert!(pids.iter().all(|p| gone(*p)), "a silent helper survived");
}

#[test]
fn a_map_run_with_the_example_helper_measures_every_site() {
    let (dir, recipe, machine) = bench_dir("[reference]\nposition_mm = [20, 20]\n");
    let text = std::fs::read_to_string(&machine).unwrap();
    let argv = example(&["--die-after", "4"]);
    std::fs::write(&machine, with_spectrometer(&text, "helper", &argv)).unwrap();
    let runs = dir.path().join("runs");
    let ev = finished_run(&recipe, &machine, "P1", &runs);
    let measured = ev
        .iter()
        .filter(|e| matches!(e, Event::SiteMeasured { .. }))
        .count();
    assert!(measured >= 9, "{measured}");
    assert!(!ev
        .iter()
        .any(|e| matches!(e, Event::SiteFailed { reason, .. } if reason.contains("acquisition"))));
}

#[test]
fn a_helper_kind_without_a_program_is_refused() {
    let text = isopach::bench::machine::BUILTIN_SIMULATED.replace(
        "[spectrometer]\nkind = \"simulated\"",
        "[spectrometer]\nkind = \"helper\"",
    );
    let e = isopach::bench::machine::parse(&text, std::path::Path::new("m.toml"))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("spectrometer.command") && e.contains("needs the helper program"),
        "{e}"
    );
}
