//! Issue 14, "Progress": when stderr is not a terminal a run prints one plain line per site,
//! `[k/N] site S: value · time left`, the counter counting results and the label naming the
//! site, the time left from the plan's estimate; no bar.

mod run_common;

use run_common::*;

#[test]
fn a_run_into_a_log_prints_one_line_per_site_counting_up_to_done() {
    let (dir, recipe, machine) = bench_dir("");
    let runs = dir.path().join("runs");
    let out = run_map(&recipe, &machine, "LOG1", &runs);
    assert_eq!(out.status.code(), Some(0));
    let err = String::from_utf8_lossy(&out.stderr);
    let lines: Vec<&str> = err.lines().filter(|l| l.starts_with('[')).collect();
    assert_eq!(lines.len(), 9, "{err}");
    let mut sites = Vec::new();
    for (k, line) in lines.iter().enumerate() {
        let head = format!("[{}/9] site ", k + 1);
        assert!(line.starts_with(&head), "{line}");
        let rest = &line[head.len()..];
        let (site, tail) = rest.split_once(": ").unwrap();
        sites.push(site.parse::<usize>().unwrap());
        assert!(tail.contains(" nm · "), "{line}");
        if k + 1 < 9 {
            assert!(line.ends_with(" left"), "{line}");
        } else {
            assert!(line.ends_with("· done"), "{line}");
        }
    }
    sites.sort_unstable();
    assert_eq!(sites, (1..=9).collect::<Vec<_>>());
    // No bar, no `site 0/0`.
    assert!(
        !err.contains("0/0") && !err.contains("[=") && !err.contains("ETA"),
        "{err}"
    );
}

/// The `[k/N]` lines of a log: each counter once, in order, ending at N of N.
fn counters(err: &str) -> Vec<(usize, usize)> {
    err.lines()
        .filter_map(|l| l.strip_prefix('[')?.split_once(']'))
        .filter_map(|(c, _)| {
            let (k, n) = c.split_once('/')?;
            Some((k.parse().ok()?, n.parse().ok()?))
        })
        .collect()
}

#[test]
fn sites_fitted_again_for_lamp_drift_are_counted_once() {
    // A reference after every third site: the three before it are fitted again with the
    // interpolated reference, and those fits must not count as further sites.
    let (dir, recipe, machine) = bench_dir("[reference]\nevery_sites = 3\n");
    let runs = dir.path().join("runs");
    let out = run_map(&recipe, &machine, "LOG2", &runs);
    assert_eq!(out.status.code(), Some(0));
    let err = String::from_utf8_lossy(&out.stderr);
    let refits = events(&only_run(&runs))
        .iter()
        .filter(|e| matches!(e, isopach::run::events::Event::SiteFitted { .. }))
        .count();
    assert!(refits > 9, "the drift refits happened: {refits} fits");
    let want: Vec<(usize, usize)> = (1..=9).map(|k| (k, 9)).collect();
    assert_eq!(counters(&err), want, "{err}");
}

#[test]
fn a_gauge_study_counts_its_acquisitions() {
    let (dir, recipe, machine) = bench_dir("");
    let runs = dir.path().join("runs");
    let out = isopach(&[
        "gauge",
        recipe.to_str().unwrap(),
        "--machine",
        machine.to_str().unwrap(),
        "--sites",
        "1,2",
        "--repeats",
        "3",
        "--passes",
        "2",
        "--runs",
        runs.to_str().unwrap(),
    ]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(matches!(out.status.code(), Some(0) | Some(3)), "{err}");
    let want: Vec<(usize, usize)> = (1..=12).map(|k| (k, 12)).collect();
    assert_eq!(counters(&err), want, "{err}");
}
