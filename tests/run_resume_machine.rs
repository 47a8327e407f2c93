//! `resume --machine`: a corrected machine file is taken, journalled and frozen; a change of
//! the chuck geometry, or one that puts the plan outside the new soft limits, is refused
//! before anything is touched.

use isopach::run::events::Event;
use std::path::Path;

mod run_common;
use run_common::*;

/// A run on the test bench stopped by an injected controller fault (exit 1).
fn stopped_run(dir: &Path) -> (std::path::PathBuf, String) {
    let text =
        isopach::bench::machine::BUILTIN_SIMULATED.replace("time_scale = 25", "time_scale = 50");
    let faulty = format!("{text}\n[[simulation.faults]]\nkind = \"disconnect\"\nat_line = 14\n");
    let recipe = dir.join("rel.toml");
    std::fs::write(&recipe, RECIPE).unwrap();
    let machine = dir.join("faulty.toml");
    std::fs::write(&machine, &faulty).unwrap();
    let runs = dir.join("runs");
    let o = run_map(&recipe, &machine, "RM", &runs);
    assert_eq!(
        o.status.code(),
        Some(1),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    (only_run(&runs), text)
}

fn resume_with(run: &Path, machine: &Path) -> std::process::Output {
    isopach(&[
        "resume",
        run.to_str().unwrap(),
        "--machine",
        machine.to_str().unwrap(),
    ])
}

#[test]
fn a_corrected_machine_file_is_journalled_frozen_and_used() {
    let dir = tempfile::tempdir().unwrap();
    let (run, text) = stopped_run(dir.path());
    // The fix: no fault, a longer line timeout, another name.
    let fixed = dir.path().join("fixed.toml");
    let fixed_text = text
        .replace("built-in simulated bench", "bench A fixed")
        .replace("[stage]\n", "[stage]\nline_timeout_s = 8\n");
    std::fs::write(&fixed, &fixed_text).unwrap();
    let o = resume_with(&run, &fixed);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let ev = events(&run);
    let changed: Vec<_> = ev
        .iter()
        .filter_map(|e| match e {
            Event::MachineChanged { old, new, keys, .. } => Some((old, new, keys)),
            _ => None,
        })
        .collect();
    assert_eq!(changed.len(), 1, "{ev:?}");
    let (old, new, keys) = changed[0];
    assert_eq!(old, "built-in simulated bench");
    assert_eq!(new, "bench A fixed");
    assert_eq!(keys, &["name", "simulation.faults", "stage.line_timeout_s"]);
    // Frozen in run.toml; the previous run.toml is kept.
    let meta = isopach::run::folder::RunFolder::new(&run)
        .read_run_toml()
        .unwrap();
    let m = isopach::run::measure::machine_of(&meta).unwrap().unwrap();
    assert_eq!(m.name, "bench A fixed");
    assert_eq!(m.stage.line_timeout_s, 8.0);
    assert!(m.simulation.faults.is_empty());
    assert!(std::fs::read_dir(&run).unwrap().any(|e| e
        .unwrap()
        .file_name()
        .to_string_lossy()
        .starts_with("run-before-resume-")));
    // The change is journalled before the session that uses it, and the run completes.
    let at = |f: &dyn Fn(&Event) -> bool| ev.iter().position(f).unwrap();
    assert!(
        at(&|e| matches!(e, Event::MachineChanged { .. }))
            < at(&|e| matches!(e, Event::RunStarted { command, .. } if command == "resume"))
    );
    let rows = sites_once(&run, 9);
    assert!(rows.iter().all(|(_, f)| f == "ok"), "{rows:?}");
}

#[test]
fn a_chuck_change_or_a_plan_outside_the_new_limits_is_refused_untouched() {
    let dir = tempfile::tempdir().unwrap();
    let (run, text) = stopped_run(dir.path());
    let journal = std::fs::read(run.join("journal.jsonl")).unwrap();
    let run_toml = std::fs::read(run.join("run.toml")).unwrap();
    let moved = dir.path().join("moved.toml");
    std::fs::write(
        &moved,
        text.replace(
            "center_mm = [240, 240]",
            "center_mm = [241, 240]\nflip_y = true",
        ),
    )
    .unwrap();
    let o = resume_with(&run, &moved);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("chuck.center_mm, chuck.flip_y") && err.contains("[chuck]"),
        "{err}"
    );
    // Soft limits: a travel too small for the 150 mm wafer's sites.
    let small = dir.path().join("small.toml");
    std::fs::write(
        &small,
        text.replace("travel_x_mm = [0, 480]", "travel_x_mm = [200, 480]"),
    )
    .unwrap();
    let o = resume_with(&run, &small);
    assert_eq!(
        o.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    assert!(String::from_utf8_lossy(&o.stderr).contains("site"));
    // Nothing was touched.
    assert_eq!(std::fs::read(run.join("journal.jsonl")).unwrap(), journal);
    assert_eq!(std::fs::read(run.join("run.toml")).unwrap(), run_toml);
}
