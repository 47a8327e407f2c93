//! The binary: `isopach check --machine`, `isopach stage`, and `isopach bench serve` driven by
//! `isopach stage` over a real pseudo-terminal.

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_isopach"))
}

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, text).unwrap();
    p
}

const SMALL: &str = "name = \"small\"\n[stage]\nport = \"/dev/isopach-none\"\nfeed_hold = \"!\"\ntravel_x_mm = [0, 120]\ntravel_y_mm = [0, 120]\n[chuck]\ncenter_mm = [60, 60]\n";

/// Runs `isopach check` on the 49-site oxide recipe with a machine file of this text.
fn check_with(machine: &str) -> (Option<i32>, String) {
    let dir = tempfile::tempdir().unwrap();
    let m = write(dir.path(), "m.toml", machine);
    let out = bin()
        .arg("check")
        .arg(root().join("recipes/oxide-150-49.toml"))
        .arg("--machine")
        .arg(&m)
        .output()
        .unwrap();
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
    )
}

#[test]
fn check_names_sites_outside_the_soft_limits() {
    let (code, text) = check_with(SMALL);
    assert_eq!(code, Some(2), "{text}");
    // 150 mm wafer, 5 mm exclusion: outer ring at r = 70 mm; centre 60 → x = 130 > 119.
    assert!(
        text.contains("site 26 at wafer (70.000, 0.000) mm"),
        "{text}"
    );
    assert!(
        text.contains("travel_x_mm = [0, 120], margin_mm = 1"),
        "{text}"
    );
}

#[test]
fn check_reports_machine_file_errors_with_lines() {
    let (code, text) = check_with("name = \"x\"\n[stage]\nport = \"/dev/x\"\ntravel_x_mm = [0, 100]\ntravel_y_mm = [0, 100]\nmotion_complete = \"wait\"\n");
    assert_eq!(code, Some(2));
    assert!(text.contains("m.toml:6:"), "{text}");
}

#[test]
fn stage_refuses_real_motion_without_confirmation() {
    let dir = tempfile::tempdir().unwrap();
    let m = write(dir.path(), "m.toml", SMALL);
    let out = bin()
        .args(["stage", "move", "10", "10", "--machine"])
        .arg(&m)
        .stdin(Stdio::null())
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--yes"));
}

#[test]
fn bench_serve_and_stage_over_a_pty() {
    let mut serve = bin()
        .args(["bench", "serve", "--time-scale", "50"])
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let mut path = String::new();
    BufReader::new(serve.stdout.take().unwrap())
        .read_line(&mut path)
        .unwrap();
    let path = path.trim().to_string();
    assert!(path.starts_with("/dev/"), "{path}");
    let dir = tempfile::tempdir().unwrap();
    let machine = builtin_like(&path);
    let m = write(dir.path(), "m.toml", &machine);
    let out = bin()
        .args(["stage", "move", "0", "0", "--wafer", "--yes", "--machine"])
        .arg(&m)
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    let _ = serve.kill();
    let _ = serve.wait();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{text}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(
        text.contains("stage (240.000, 240.000) mm, wafer (0.000, 0.000) mm"),
        "{text}"
    );
}

/// A machine file for the served controller (same travel as the built-in bench).
fn builtin_like(port: &str) -> String {
    format!(
        "name = \"pty\"\n[stage]\nport = \"{port}\"\nunlock = [\"$X\"]\nhome = [\"$H\"]\nmotion_complete = \"poll\"\npoll_interval_ms = 20\nreset = \"\\u0018\"\nstartup_wait_s = 0.3\ntravel_x_mm = [0, 480]\ntravel_y_mm = [0, 480]\n[chuck]\ncenter_mm = [240, 240]\n"
    )
}

/// `isopach stage` on the built-in simulated bench, its session's memory kept in `state`.
fn stage_in(state: &Path, args: &[&str]) -> String {
    let out = bin()
        .arg("stage")
        .args(args)
        .env("ISOPACH_SIM_STATE_DIR", state)
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout).into_owned();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{text}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    text
}

#[test]
fn the_virtual_stage_remembers_its_position_across_stage_commands() {
    let state = tempfile::tempdir().unwrap();
    // A fresh bench session powers up at the home corner.
    assert!(stage_in(state.path(), &["where"]).contains("stage (0.000, 0.000) mm"));
    stage_in(state.path(), &["move", "123.5", "77.25"]);
    let text = stage_in(state.path(), &["where"]);
    assert!(text.contains("stage (123.500, 77.250) mm"), "{text}");
    stage_in(state.path(), &["move", "10", "-20", "--wafer"]);
    let text = stage_in(state.path(), &["where"]);
    assert!(text.contains("wafer (10.000, -20.000) mm"), "{text}");
    stage_in(state.path(), &["home"]);
    let text = stage_in(state.path(), &["where"]);
    assert!(text.contains("stage (0.000, 0.000) mm"), "{text}");
    // Another session (another runtime folder) knows nothing of this one.
    stage_in(state.path(), &["move", "50", "60"]);
    let other = tempfile::tempdir().unwrap();
    assert!(stage_in(other.path(), &["where"]).contains("stage (0.000, 0.000) mm"));
}
