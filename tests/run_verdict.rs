//! Issue 14, "Verdict": a recipe's `[accept]` run limits judge a completed run; `run` prints
//! PASS/FAIL with the reason, `summary.json` keeps it, and a failed verdict exits 3 (a failed
//! run still exits 1, an invalid limit 2).

mod run_common;

use run_common::*;

/// A bench with the 9-site recipe given these extra `[accept]` lines.
fn bench_with_limits(limits: &str) -> (tempfile::TempDir, std::path::PathBuf, std::path::PathBuf) {
    let (dir, recipe, machine) = bench_dir("");
    std::fs::write(&recipe, format!("{RECIPE}\n[accept]\n{limits}\n")).unwrap();
    (dir, recipe, machine)
}

fn summary_of(run: &std::path::Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(run.join("summary.json")).unwrap()).unwrap()
}

/// Runs the 9-site recipe with these `[accept]` lines; checks the exit code and returns the
/// verdict line printed, the run folder and the temp dir that holds it.
fn run_judged(
    limits: &str,
    wafer: &str,
    code: i32,
) -> (String, std::path::PathBuf, tempfile::TempDir) {
    let (dir, recipe, machine) = bench_with_limits(limits);
    let runs = dir.path().join("runs");
    let out = run_map(&recipe, &machine, wafer, &runs);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(
        out.status.code(),
        Some(code),
        "{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let line = stdout
        .lines()
        .find(|l| l.contains("verdict"))
        .expect(&stdout)
        .to_string();
    (line, only_run(&runs), dir)
}

#[test]
fn a_run_inside_its_limits_passes_with_exit_0() {
    let (line, run, _dir) = run_judged(
        "mean_nm = [500, 700]\nmax_std_nm = 50\nmin_valid_pct = 50",
        "PASS1",
        0,
    );
    assert!(line.contains("verdict PASS: mean "), "{line}");
    assert!(
        line.contains("in [500, 700] nm") && line.contains("≤ 50 nm"),
        "{line}"
    );
    let s = summary_of(&run);
    assert_eq!(s["verdict"]["pass"], true);
    assert_eq!(s["verdict"]["checks"].as_array().unwrap().len(), 3);
    // The value judged is the summary's own figure.
    assert_eq!(s["verdict"]["checks"][0]["value"], s["mean_nm"]);
}

#[test]
fn a_run_outside_its_limits_fails_with_exit_3_and_keeps_every_file() {
    // The simulated wafer varies by more than a picometre: 1σ ≤ 0.001 nm cannot hold.
    let (line, run, _dir) = run_judged("max_std_nm = 0.001\nmean_nm = [500, 700]", "FAIL1", 3);
    // Only the broken limit is the reason.
    assert!(
        line.contains("verdict FAIL: 1σ ") && line.contains(" > 0.001 nm"),
        "{line}"
    );
    assert!(!line.contains("mean"), "{line}");
    for f in [
        "sites.csv",
        "summary.json",
        "map.svg",
        "map.png",
        "journal.jsonl",
    ] {
        assert!(run.join(f).is_file(), "{f} missing after a failed verdict");
    }
    let s = summary_of(&run);
    assert_eq!(s["verdict"]["pass"], false);
    assert_eq!(s["verdict"]["checks"][1]["figure"], "1σ");
    assert_eq!(s["verdict"]["checks"][1]["pass"], false);
}

#[test]
fn a_recipe_without_run_limits_has_no_verdict() {
    let (dir, recipe, machine) = bench_dir("");
    let runs = dir.path().join("runs");
    let out = run_map(&recipe, &machine, "NOLIM", &runs);
    assert_eq!(out.status.code(), Some(0));
    assert!(!String::from_utf8_lossy(&out.stdout).contains("verdict"));
    assert!(summary_of(&only_run(&runs)).get("verdict").is_none());
}

#[test]
fn limits_that_no_run_could_meet_are_invalid_input() {
    let (dir, recipe, _) = bench_with_limits(
        "mean_nm = [700, 500]\nmax_std_nm = -1\nmax_nu_pct = -0.5\nmin_valid_pct = 120",
    );
    let out = isopach(&["check", recipe.to_str().unwrap()]);
    let err =
        String::from_utf8_lossy(&out.stderr).to_string() + &String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(2), "{err}");
    for key in [
        "accept.mean_nm",
        "accept.max_std_nm",
        "accept.max_nu_pct",
        "accept.min_valid_pct",
    ] {
        assert!(err.contains(key), "{key} not reported:\n{err}");
    }
    // Each problem is located in the file.
    assert!(err.contains("rel.toml:"), "{err}");
    drop(dir);
}
