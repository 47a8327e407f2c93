//! The command line keeps the README's promises (issue 11): invalid input exits 2, a closed
//! stdout ends quietly with the command's own exit code, no NaN reaches the user, and a run or
//! refit with no valid site fails (exit 1) saying what to do. The real binary, in temp dirs.

mod map_common;
mod run_common;

use map_common::*;
use run_common::RECIPE;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

fn isopach<S: AsRef<std::ffi::OsStr>>(args: &[S]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(args)
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .stdin(Stdio::null())
        .output()
        .expect("binary runs")
}

/// `isopach CMD RUN FLAG VALUE`.
fn on_run(cmd: &str, run: &Path, flag: &str, value: impl AsRef<std::ffi::OsStr>) -> Output {
    isopach(&[cmd.as_ref(), run.as_os_str(), flag.as_ref(), value.as_ref()])
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

/// Asserts the exit code, with stderr in the message; no panic either way.
fn assert_exit(o: &Output, code: i32, what: &str) {
    let err = text(&o.stderr);
    assert!(!err.contains("panicked"), "{what}: {err}");
    assert_eq!(o.status.code(), Some(code), "{what}: {err}");
}

fn assert_no_nan(s: &str, what: &str) {
    assert!(!s.to_lowercase().contains("nan"), "{what} shows NaN:\n{s}");
}

fn repo(path: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(path)
}

/// A temp dir holding the test recipe (with `window` as its fitting window) and a fast
/// simulated machine file.
fn bench(window: &str) -> (tempfile::TempDir, PathBuf, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let recipe = dir.path().join("conv.toml");
    std::fs::write(
        &recipe,
        RECIPE.replace("wavelength_nm = [420, 980]", window),
    )
    .unwrap();
    let machine = dir.path().join("sim.toml");
    let fast =
        isopach::bench::machine::BUILTIN_SIMULATED.replace("time_scale = 25", "time_scale = 50");
    std::fs::write(&machine, fast).unwrap();
    (dir, recipe, machine)
}

/// Runs the map of `recipe` on `machine` into `runs`; returns the output and the run folder.
fn run_map(recipe: &Path, machine: &Path, runs: &Path) -> (Output, PathBuf) {
    let o = isopach(&[
        "run".as_ref(),
        recipe.as_os_str(),
        "--machine".as_ref(),
        machine.as_os_str(),
        "--wafer".as_ref(),
        "CONV".as_ref(),
        "--runs".as_ref(),
        runs.as_os_str(),
    ]);
    let folder = std::fs::read_dir(runs)
        .unwrap()
        .map(|e| e.unwrap().path())
        .find(|p| p.is_dir())
        .expect("a run folder");
    (o, folder)
}

/// A hand-built one-layer run folder of the shipped oxide recipe; every site valid, or none.
fn oxide_run(dir: &Path, name: &str, valid: bool) -> PathBuf {
    let loaded = recipe("oxide-150-49");
    let mut rows = analytic_rows(&loaded);
    if !valid {
        for r in &mut rows {
            r.thickness_nm = vec![f64::NAN];
            r.sigma_nm = vec![f64::NAN];
            r.gof = f64::NAN;
            r.flag = "no-fit".into();
        }
    }
    let mut meta = run_toml(&loaded, name);
    meta.run.id = format!("20261203-142205-{name}");
    make_run_folder(&dir.join(name), &meta, &rows).root
}

// ---- invalid input exits 2 -------------------------------------------------------------------

#[test]
fn remeasure_of_a_site_not_in_the_plan_exits_2() {
    let dir = tempfile::tempdir().unwrap();
    let run = oxide_run(dir.path(), "W1", true);
    let o = on_run("remeasure", &run, "--site", "999");
    assert_exit(&o, 2, "remeasure --site 999");
    assert!(text(&o.stderr).contains("site 999 is not in this run's plan, which has sites 1..49"));
    assert!(
        !run.join("journal.jsonl").exists(),
        "nothing was measured or journalled"
    );
}

#[test]
fn remeasure_with_a_bare_site_number_exits_2_with_a_tip() {
    // Needs no run: the command line is refused before anything is read.
    let o = isopach(&["remeasure", "runs/20261202-090507-W07", "12"]);
    assert_exit(&o, 2, "remeasure RUN 12");
    let err = text(&o.stderr);
    assert!(err.contains("unexpected argument '12'"), "{err}");
    assert!(
        err.contains("to measure site 12 again, write '--site 12'"),
        "{err}"
    );
    // A stray word that is no site number gets no such tip.
    let o = isopach(&["remeasure", "runs/20261202-090507-W07", "twelve"]);
    assert_exit(&o, 2, "remeasure RUN twelve");
    assert!(!text(&o.stderr).contains("to measure site"));
}

#[test]
fn render_out_with_an_unsupported_extension_exits_2_before_drawing() {
    let dir = tempfile::tempdir().unwrap();
    let run = oxide_run(dir.path(), "W1", true);
    for name in ["x.pdf", "x.doc", "noextension"] {
        let target = dir.path().join(name);
        let o = on_run("render", &run, "--out", &target);
        assert_exit(&o, 2, name);
        assert!(text(&o.stderr).contains("must end in .svg or .png"));
        assert!(!target.exists());
    }
}

#[test]
fn render_layer_2_of_a_one_layer_run_exits_2() {
    let dir = tempfile::tempdir().unwrap();
    let run = oxide_run(dir.path(), "W1", true);
    let o = on_run("render", &run, "--layer", "2");
    assert_exit(&o, 2, "render --layer 2");
    assert!(text(&o.stderr).contains("this run has 1 fitted layer(s)"));
}

#[test]
fn a_run_folder_that_does_not_exist_exits_2_for_every_command() {
    let dir = tempfile::tempdir().unwrap();
    let run = oxide_run(dir.path(), "W1", true);
    let missing = dir.path().join("no-such-run");
    let m = missing.as_os_str();
    for args in [
        vec!["render".as_ref(), m],
        vec!["resume".as_ref(), m],
        vec!["refit".as_ref(), m],
        vec!["remeasure".as_ref(), m, "--failed".as_ref()],
        vec!["compare".as_ref(), run.as_os_str(), m],
    ] {
        let o = isopach(&args);
        assert_exit(&o, 2, &format!("{args:?}"));
        assert!(text(&o.stderr).contains("no such run folder"), "{args:?}");
    }
    // A folder that is not a run folder is invalid input too.
    let o = isopach(&["render".as_ref(), dir.path().as_os_str()]);
    assert_exit(&o, 2, "render of a folder without run.toml");
    assert!(text(&o.stderr).contains("it has no run.toml"));
}

#[test]
fn a_wafer_lot_or_operator_with_a_path_separator_exits_2_and_leaves_no_folder() {
    let (dir, recipe, machine) = bench("wavelength_nm = [420, 980]");
    let runs = dir.path().join("runs");
    for (flag, value, named) in [
        ("--wafer", "A/B", "wafer id \"A/B\""),
        ("--lot", "../up", "lot \"../up\""),
        ("--operator", "a\\b", "operator \"a\\\\b\""),
    ] {
        let o = isopach(&[
            "run".as_ref(),
            recipe.as_os_str(),
            "--machine".as_ref(),
            machine.as_os_str(),
            "--runs".as_ref(),
            runs.as_os_str(),
            flag.as_ref(),
            value.as_ref(),
        ]);
        assert_exit(&o, 2, &format!("{flag} {value}"));
        assert!(text(&o.stderr).contains(named), "{}", text(&o.stderr));
        let left = std::fs::read_dir(&runs).map(|d| d.count()).unwrap_or(0);
        assert_eq!(left, 0, "{flag} {value} left a run folder");
    }
}

#[test]
fn compare_with_one_run_exits_2() {
    let dir = tempfile::tempdir().unwrap();
    let run = oxide_run(dir.path(), "W1", true);
    let o = isopach(&["compare".as_ref(), run.as_os_str()]);
    assert_exit(&o, 2, "compare with one run");
    assert!(text(&o.stderr).contains("at least two run folders"));
    let o = isopach(&[
        "compare".as_ref(),
        run.as_os_str(),
        run.as_os_str(),
        run.as_os_str(),
        "--delta".as_ref(),
    ]);
    assert_exit(&o, 2, "--delta with three runs");
}

#[test]
fn fit_with_an_unknown_reference_material_exits_2() {
    // Refused even for a reflectance file, which does not use the reference.
    let o = isopach(&[
        "fit",
        "fixtures/spectra/sio2_si_001000p0nm.csv",
        "--recipe",
        "recipes/oxide-150-49.toml",
        "--reference-material",
        "silicon",
    ]);
    assert_exit(&o, 2, "--reference-material silicon");
    let err = text(&o.stderr);
    assert!(
        err.contains("--reference-material") && err.contains("unknown material \"silicon\""),
        "{err}"
    );
}

#[test]
fn fit_of_a_spectrum_with_no_pixel_in_the_window_exits_2() {
    let dir = tempfile::tempdir().unwrap();
    let far = dir.path().join("far.toml");
    let text_in = std::fs::read_to_string(repo("recipes/oxide-150-49.toml")).unwrap();
    std::fs::write(
        &far,
        text_in.replace("wavelength_nm = [420, 980]", "wavelength_nm = [1500, 1900]"),
    )
    .unwrap();
    let o = isopach(&[
        "fit".as_ref(),
        repo("fixtures/spectra/sio2_si_001000p0nm.csv").as_os_str(),
        "--recipe".as_ref(),
        far.as_os_str(),
    ]);
    assert_exit(&o, 2, "fit outside the window");
    assert!(
        text(&o.stderr).contains("0 pixels in the fitting window"),
        "{}",
        text(&o.stderr)
    );
}

// ---- a closed stdout -------------------------------------------------------------------------

/// Runs the binary with its stdout closed before it prints anything.
fn with_stdout_closed<S: AsRef<std::ffi::OsStr>>(args: &[S]) -> Output {
    let mut child = Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(args)
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("binary runs");
    drop(child.stdout.take());
    child.wait_with_output().expect("binary ends")
}

#[test]
fn a_closed_stdout_ends_sites_dry_run_and_trend_quietly() {
    let dir = tempfile::tempdir().unwrap();
    oxide_run(dir.path(), "W1", true);
    oxide_run(dir.path(), "W2", true);
    let recipe = repo("recipes/oxide-150-49.toml");
    let (r, runs) = (recipe.to_str().unwrap(), dir.path().to_str().unwrap());
    for args in [
        vec!["sites", r],
        vec!["run", r, "--dry-run"],
        vec!["trend", "--runs", runs, "--rebuild", "--json"],
    ] {
        let o = with_stdout_closed(&args);
        assert_exit(&o, 0, &format!("{args:?} with stdout closed"));
        assert!(o.stderr.is_empty() || !text(&o.stderr).contains("Broken pipe"));
    }
}

#[test]
fn a_run_with_its_stdout_closed_still_measures_every_site() {
    let (dir, recipe, machine) = bench("wavelength_nm = [420, 980]");
    let runs = dir.path().join("runs");
    let o = with_stdout_closed(&[
        "run".as_ref(),
        recipe.as_os_str(),
        "--machine".as_ref(),
        machine.as_os_str(),
        "--runs".as_ref(),
        runs.as_os_str(),
    ]);
    assert_exit(&o, 0, "run with stdout closed");
    // The run folder: the one entry that is not hidden (the history lives beside it).
    let run = std::fs::read_dir(&runs)
        .unwrap()
        .map(|e| e.unwrap().path())
        .find(|p| p.is_dir() && !p.file_name().unwrap().to_string_lossy().starts_with('.'))
        .unwrap();
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(run.join("summary.json")).unwrap()).unwrap();
    assert_eq!(summary["sites_total"], 9);
    assert_eq!(summary["sites_valid"], 9, "{summary}");
}

// ---- no NaN, and no valid site fails the work ------------------------------------------------

#[test]
fn a_run_with_no_valid_site_exits_1_says_why_and_writes_no_nan() {
    // The fitting window lies beyond the simulated spectrometer: no site can be fitted.
    let (dir, recipe, machine) = bench("wavelength_nm = [1500, 1900]");
    let (o, run) = run_map(&recipe, &machine, &dir.path().join("runs"));
    assert_exit(&o, 1, "run with no valid site");
    let (out, err) = (text(&o.stdout), text(&o.stderr));
    assert_no_nan(&out, "run stdout");
    assert_no_nan(&err, "run stderr");
    assert!(out.contains("0 of 9 sites valid: no valid site"), "{out}");
    assert!(
        err.contains("none of the 9 sites has a valid result") && err.contains("--failed"),
        "{err}"
    );
    let summary = std::fs::read_to_string(run.join("summary.json")).unwrap();
    assert_no_nan(&summary, "summary.json");
    let v: serde_json::Value = serde_json::from_str(&summary).unwrap();
    assert_eq!(v["sites_valid"], 0);
    assert!(
        v["mean_nm"].is_null() && v["nu_1sigma_pct"].is_null(),
        "{v}"
    );
    let csv = std::fs::read_to_string(run.join("sites.csv")).unwrap();
    assert_no_nan(&csv, "sites.csv");
    assert_eq!(
        csv.lines().next().unwrap(),
        "site,x_mm,y_mm,thickness_nm,sigma_nm,gof,flag"
    );
}

#[test]
fn refit_with_no_valid_site_exits_1_and_prints_no_nan() {
    let (dir, recipe, machine) = bench("wavelength_nm = [420, 980]");
    let (o, run) = run_map(&recipe, &machine, &dir.path().join("runs"));
    assert_exit(&o, 0, "the run itself");
    let far = dir.path().join("far.toml");
    std::fs::write(
        &far,
        RECIPE.replace("wavelength_nm = [420, 980]", "wavelength_nm = [1500, 1900]"),
    )
    .unwrap();
    let o = on_run("refit", &run, "--recipe", &far);
    assert_exit(&o, 1, "refit with no valid site");
    let (out, err) = (text(&o.stdout), text(&o.stderr));
    assert_no_nan(&out, "refit stdout");
    assert_no_nan(&err, "refit stderr");
    assert!(out.contains("0 of 9 sites valid"), "{out}");
    assert!(err.contains("refit failed: none of the 9 sites"), "{err}");
}

#[test]
fn render_compare_and_trend_show_a_run_with_no_valid_site_without_nan() {
    let dir = tempfile::tempdir().unwrap();
    let good = oxide_run(dir.path(), "W1", true);
    let bad = oxide_run(dir.path(), "W2", false);
    let o = isopach(&["render".as_ref(), bad.as_os_str()]);
    assert_exit(&o, 0, "render of a run with no valid site");
    assert_no_nan(&text(&o.stdout), "render stdout");
    assert!(text(&o.stdout).contains("no valid site"));
    let svg = std::fs::read_to_string(bad.join("map.svg")).unwrap();
    assert!(!svg.contains("NaN"), "the map's panel shows NaN");
    for json in [false, true] {
        let mut args = vec!["compare".as_ref(), good.as_os_str(), bad.as_os_str()];
        if json {
            args.push("--json".as_ref());
        }
        let o = isopach(&args);
        assert_exit(&o, 0, "compare");
        let out = text(&o.stdout);
        assert_no_nan(&out, "compare");
        if json {
            let v: serde_json::Value = serde_json::from_str(&out).unwrap();
            assert!(v["wafers"][1]["mean_nm"].is_null(), "{v}");
            assert_eq!(v["wafer_to_wafer"]["wafers"], 1);
        } else {
            assert!(out.contains("no valid site"), "{out}");
        }
    }
    for json in [false, true] {
        let mut args = vec![
            "trend".as_ref(),
            "--runs".as_ref(),
            dir.path().as_os_str(),
            "--rebuild".as_ref(),
        ];
        if json {
            args.push("--json".as_ref());
        }
        let o = isopach(&args);
        assert_exit(&o, 0, "trend");
        let out = text(&o.stdout);
        assert_no_nan(&out, "trend");
        if json {
            let v: serde_json::Value = serde_json::from_str(&out).unwrap();
            assert!(v["runs"][1]["mean_nm"].is_null(), "{v}");
        } else {
            assert!(out.contains("no valid site"), "{out}");
        }
    }
}
