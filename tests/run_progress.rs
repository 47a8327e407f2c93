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
