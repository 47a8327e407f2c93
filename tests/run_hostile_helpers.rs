//! Map runs with a `command` spectrometer whose helper misbehaves (issue 18): a transient
//! failure is retried, a site that keeps failing is journalled as failed and the run goes on,
//! failures on consecutive sites stop it, and a helper printing 200 MB leaves isopach small
//! in memory, log and journal.

mod hostile_common;
mod run_common;

use hostile_common::{finished_run, peak_memory, script, spectrum_helper, with_spectrometer};
use isopach::run::events::Event;
use run_common::*;
use std::path::{Path, PathBuf};
use std::process::Command;

/// A temp dir with the test recipe and a machine file: simulated stage, the
/// [`spectrum_helper`] with `fault` as the spectrometer, an on-chuck reference piece (so
/// nobody is asked to place one).
fn helper_bench(fault: &str) -> (tempfile::TempDir, PathBuf, PathBuf) {
    helper_bench_with(|dir| spectrum_helper(dir, fault))
}

/// [`helper_bench`] with the helper `make` writes into the temp dir.
fn helper_bench_with(make: impl FnOnce(&Path) -> PathBuf) -> (tempfile::TempDir, PathBuf, PathBuf) {
    let (dir, recipe, machine) = bench_dir("[reference]\nposition_mm = [20, 20]\n");
    let helper = make(dir.path());
    set_helper(&machine, &helper);
    (dir, recipe, machine)
}

fn set_helper(machine: &Path, helper: &Path) {
    let text = std::fs::read_to_string(machine).unwrap();
    let argv = [helper.to_str().unwrap().to_string(), "{kind}".into()];
    std::fs::write(machine, with_spectrometer(&text, "command", &argv)).unwrap();
}

fn failed(ev: &[Event]) -> Vec<(usize, String)> {
    ev.iter()
        .filter_map(|e| match e {
            Event::SiteFailed { site, reason, .. } => Some((*site, reason.clone())),
            _ => None,
        })
        .collect()
}

fn measured_sites(ev: &[Event]) -> Vec<usize> {
    let mut v: Vec<usize> = ev
        .iter()
        .filter_map(|e| match e {
            Event::SiteMeasured { site, .. } => Some(*site),
            _ => None,
        })
        .collect();
    v.sort();
    v.dedup();
    v
}

#[test]
fn one_failed_acquisition_is_retried_and_the_run_finishes() {
    let (dir, recipe, machine) = helper_bench("[ $n = 3 ] && { echo 'USB hiccup' >&2; exit 1; }");
    let runs = dir.path().join("runs");
    let ev = finished_run(&recipe, &machine, "T1", &runs);
    assert_eq!(measured_sites(&ev), (1..=9).collect::<Vec<_>>());
    assert!(failed(&ev).is_empty(), "{:?}", failed(&ev));
    let log = std::fs::read_to_string(only_run(&runs).join("log.txt")).unwrap();
    assert!(
        log.contains("trying again") && log.contains("USB hiccup"),
        "{log}"
    );
}

#[test]
fn a_site_that_keeps_failing_is_flagged_and_the_run_goes_on() {
    // Sample calls 3, 4 and 5 are the three tries of the third site measured.
    let (dir, recipe, machine) = helper_bench(
        "[ $n -ge 3 ] && [ $n -le 5 ] && { echo \"no light on call $n\" >&2; exit 2; }",
    );
    let runs = dir.path().join("runs");
    run_map(&recipe, &machine, "T2", &runs);
    let run = only_run(&runs);
    let ev = events(&run);
    let failed = failed(&ev);
    assert_eq!(failed.len(), 1, "{failed:?}");
    let (site, reason) = &failed[0];
    assert!(
        reason.contains("acquisition failed")
            && reason.contains("no light on call 5")
            && reason.contains("tried 3 times"),
        "{reason}"
    );
    // Every site has a spectrum in the end (the failed one from a later pass), and the run
    // went on past the failure.
    assert_eq!(measured_sites(&ev), (1..=9).collect::<Vec<_>>());
    let after = ev
        .iter()
        .skip_while(|e| !matches!(e, Event::SiteFailed { .. }))
        .filter(|e| matches!(e, Event::SiteMeasured { site: s, .. } if s != site))
        .count();
    assert!(after >= 6, "{after} sites measured after the failure");
    assert!(matches!(ev.last(), Some(Event::RunFinished { .. })));
}

#[test]
fn failures_on_consecutive_sites_stop_the_run_and_name_the_site() {
    // From the third site on, the spectrometer returns 500 pixels instead of 512.
    let (dir, recipe, machine) = helper_bench("[ $n -ge 3 ] && PX=500");
    let runs = dir.path().join("runs");
    let o = run_map(&recipe, &machine, "T3", &runs);
    assert_eq!(o.status.code(), Some(1));
    let run = only_run(&runs);
    let ev = events(&run);
    let failed = failed(&ev);
    assert_eq!(failed.len(), 3, "{failed:?}");
    assert!(failed
        .iter()
        .all(|(_, r)| r.contains("returned 500 pixels but 512")));
    let last = failed[2].0;
    let Some(Event::RunStopped { reason, .. }) = ev.last() else {
        panic!("no stop event: {:?}", ev.last());
    };
    assert!(
        reason.contains("3 sites in a row") && reason.contains(&format!("site {last}:")),
        "{reason}"
    );
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert!(stderr.contains(&format!("site {last}:")), "{stderr}");
}

/// Peak memory allowed whatever a helper prints (issue 18's target).
const PEAK_MIB: f64 = 64.0;
/// Largest log or journal a hostile helper may cause, bytes.
const FILES_MAX: u64 = 64 * 1024;

#[test]
fn a_helper_printing_200_mb_costs_little_memory_log_or_journal() {
    let (dir, recipe, machine) =
        helper_bench_with(|dir| script(dir, "flood.sh", "yes 400,1 | head -c 200000000"));
    let runs = dir.path().join("runs");
    let m = peak_memory(
        Command::new(env!("CARGO_BIN_EXE_isopach")).args(run_args(&recipe, &machine, "T4", &runs)),
        dir.path(),
    );
    let stderr = std::fs::read_to_string(dir.path().join("stderr.txt")).unwrap();
    assert_eq!(m.code, 1, "{stderr}");
    assert!(stderr.contains("printed more than"), "{stderr}");
    assert!(stderr.len() < 4096, "{} bytes on stderr", stderr.len());
    assert!(m.peak_rss_mib < PEAK_MIB, "peak {:.1} MiB", m.peak_rss_mib);
    let run = only_run(&runs);
    for f in ["log.txt", "journal.jsonl"] {
        let len = std::fs::metadata(run.join(f)).unwrap().len();
        assert!(len < FILES_MAX, "{f}: {len} bytes");
    }
}
