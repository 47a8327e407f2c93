//! Map runs on the simulated bench, as a user runs them: kills at random points and resume,
//! injected controller faults, remeasure of one site, refit with another window.

use isopach::run::derive;
use isopach::run::events::Event;
use isopach::run::folder::RunFolder;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

mod run_common;
use run_common::*;

#[test]
fn a_run_measures_every_site_and_fits_the_virtual_wafer() {
    let (dir, recipe, machine) = bench_dir("");
    let runs = dir.path().join("runs");
    let o = run_map(&recipe, &machine, "R1", &runs);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let run = only_run(&runs);
    assert!(run.file_name().unwrap().to_str().unwrap().ends_with("-R1"));
    let rows = sites_once(&run, 9);
    assert!(rows.iter().all(|(_, f)| f == "ok"), "{rows:?}");
    for f in [
        "run.toml",
        "journal.jsonl",
        "sites.csv",
        "summary.json",
        "map.svg",
        "map.png",
    ] {
        assert!(run.join(f).is_file(), "{f} missing");
    }
    let ev = events(&run);
    assert!(matches!(ev.last(), Some(Event::RunFinished { .. })));
    assert_eq!(
        ev.iter()
            .filter(|e| matches!(e, Event::SiteMeasured { .. }))
            .count(),
        9
    );
    // Every fitted thickness matches the virtual wafer's true thickness at that site.
    for (site, got, want) in fitted_and_true(&run) {
        // Optics target with noise: max(1 nm, 0.2 %); sites.csv keeps 1 pm.
        let tol = (1.0f64).max(0.002 * want);
        assert!((got - want).abs() <= tol, "site {site}: {got} vs {want}");
    }
}

#[test]
fn sigkill_at_random_points_then_resume_keeps_every_site_once() {
    let (dir, recipe, machine) = bench_dir("");
    let full = dir.path().join("full");
    let t0 = Instant::now();
    assert!(run_map(&recipe, &machine, "FULL", &full).status.success());
    let dur = t0.elapsed().as_secs_f64();
    // Deterministic pseudo-random kill points over the whole run (xorshift).
    let mut x: u64 = 0x9e37_79b9_7f4a_7c15;
    for k in 0..20 {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        let at = 0.05 + 0.9 * (x % 1000) as f64 / 1000.0;
        let runs = dir.path().join(format!("k{k}"));
        let mut child = Command::new(env!("CARGO_BIN_EXE_isopach"))
            .args(run_args(&recipe, &machine, "KILL", &runs))
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_secs_f64(dur * at));
        let _ = child.kill();
        let _ = child.wait();
        let Ok(entries) = std::fs::read_dir(&runs) else {
            continue;
        };
        // Killed before the run folder was renamed into place: at most a hidden staging
        // folder is left, and there is nothing to resume.
        let visible = entries
            .filter_map(|e| e.ok())
            .any(|e| !e.file_name().to_string_lossy().starts_with('.'));
        if !visible {
            continue;
        }
        let run = only_run(&runs);
        let before = if run.join("journal.jsonl").exists() {
            events(&run)
        } else {
            Vec::new()
        };
        let fitted_before: Vec<usize> = before
            .iter()
            .filter_map(|e| match e {
                Event::SiteFitted {
                    site, valid: true, ..
                } => Some(*site),
                _ => None,
            })
            .collect();
        let o = isopach(&["resume", run.to_str().unwrap()]);
        assert!(
            o.status.success(),
            "resume after a kill at {at:.2}: {}",
            String::from_utf8_lossy(&o.stderr)
        );
        let after = events(&run);
        // Append-only: everything journalled before the kill is still there, unchanged.
        assert_eq!(&after[..before.len()], &before[..]);
        // Sites fitted before the kill were not measured again.
        let remeasured: Vec<usize> = after[before.len()..]
            .iter()
            .filter_map(|e| match e {
                Event::SiteMeasured { site, .. } => Some(*site),
                _ => None,
            })
            .collect();
        assert!(
            remeasured.iter().all(|s| !fitted_before.contains(s)),
            "kill at {at:.2}: {remeasured:?} vs {fitted_before:?}"
        );
        let rows = sites_once(&run, 9);
        assert!(
            rows.iter().all(|(_, f)| f == "ok"),
            "kill at {at:.2}: {rows:?}"
        );
        // Derived files rebuild identically from the journal.
        let csv = std::fs::read(run.join("sites.csv")).unwrap();
        let summary = std::fs::read(run.join("summary.json")).unwrap();
        derive::rebuild(&RunFolder::new(&run)).unwrap();
        assert_eq!(std::fs::read(run.join("sites.csv")).unwrap(), csv);
        assert_eq!(std::fs::read(run.join("summary.json")).unwrap(), summary);
    }
}

#[test]
fn every_injected_fault_stops_with_a_clear_message_and_a_resumable_run() {
    let cases = [
        ("alarm", "ALARM"),
        ("error", "error"),
        ("drop-ok", "no reply"),
        ("garbage", ""),
        ("stall", ""),
        ("disconnect", ""),
    ];
    for (kind, words) in cases {
        let (dir, recipe, machine) = bench_dir(&format!(
            "[[simulation.faults]]\nkind = \"{kind}\"\nat_line = 14\n"
        ));
        let runs = dir.path().join("runs");
        let started = Instant::now();
        let o = run_map(&recipe, &machine, "F", &runs);
        let err = String::from_utf8_lossy(&o.stderr).to_string();
        assert!(
            started.elapsed() < Duration::from_secs(60),
            "{kind}: took too long"
        );
        if o.status.code() == Some(0) {
            // Some faults can land on a line whose loss the protocol absorbs; the run is whole.
            sites_once(&only_run(&runs), 9);
            continue;
        }
        assert_eq!(o.status.code(), Some(1), "{kind}: {err}");
        assert!(err.contains("run stopped:"), "{kind}: {err}");
        assert!(
            err.to_lowercase().contains(&words.to_lowercase()),
            "{kind}: {err}"
        );
        assert!(err.contains("isopach resume"), "{kind}: {err}");
        let run = only_run(&runs);
        assert!(
            matches!(events(&run).last(), Some(Event::RunStopped { .. })),
            "{kind}"
        );
        sites_once(&run, 9);
        // The fault was injected once; with it gone, resume finishes the map.
        strip_faults(&run);
        let o = isopach(&["resume", run.to_str().unwrap()]);
        assert!(
            o.status.success(),
            "{kind}: resume: {}",
            String::from_utf8_lossy(&o.stderr)
        );
        assert!(sites_once(&run, 9).iter().all(|(_, f)| f == "ok"));
    }
}

#[test]
fn remeasure_changes_that_site_only_and_refit_moves_nothing() {
    let (dir, recipe, machine) = bench_dir("");
    let runs = dir.path().join("runs");
    assert!(run_map(&recipe, &machine, "RM", &runs).status.success());
    let run = only_run(&runs);
    let before = std::fs::read_to_string(run.join("sites.csv")).unwrap();
    let o = isopach(&["remeasure", run.to_str().unwrap(), "--site", "4"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let after = std::fs::read_to_string(run.join("sites.csv")).unwrap();
    let changed: Vec<usize> = before
        .lines()
        .zip(after.lines())
        .enumerate()
        .filter(|(_, (a, b))| a != b)
        .map(|(i, _)| i)
        .collect();
    // Line 4 of the body is site 4 (line 0 is the header); new noise changes its value.
    assert_eq!(changed, vec![4], "{before}\n{after}");
    let ev = events(&run);
    let attempts: Vec<u32> = ev
        .iter()
        .filter_map(|e| match e {
            Event::SiteMeasured {
                site: 4, attempt, ..
            } => Some(*attempt),
            _ => None,
        })
        .collect();
    assert_eq!(attempts, vec![1, 2]);
    // The same site again: each session draws fresh noise (a session that replayed the
    // previous one's noise would give the same value twice), and the output says what changed.
    let o = isopach(&["remeasure", run.to_str().unwrap(), "--site", "4"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let again = std::fs::read_to_string(run.join("sites.csv")).unwrap();
    let site4 = |t: &str| t.lines().nth(4).unwrap().to_string();
    assert_ne!(site4(&again), site4(&after));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(
        stdout.contains("site 4: ") && stdout.contains("(attempt 3; before "),
        "{stdout}"
    );
    let after = again;
    // Refit with a narrower window: values change, no site is measured.
    let narrow = dir.path().join("narrow.toml");
    std::fs::write(&narrow, RECIPE.replace("[420, 980]", "[550, 800]")).unwrap();
    let n_before = events(&run).len();
    let o = isopach(&[
        "refit",
        run.to_str().unwrap(),
        "--recipe",
        narrow.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let ev = events(&run);
    assert!(ev[n_before..]
        .iter()
        .all(|e| !matches!(e, Event::SiteMeasured { .. } | Event::ReferenceTaken { .. })));
    assert_eq!(
        ev[n_before..]
            .iter()
            .filter(|e| matches!(e, Event::SiteFitted { .. }))
            .count(),
        11,
        "every stored spectrum: 9 sites and two more attempts of site 4"
    );
    let refit = std::fs::read_to_string(run.join("sites.csv")).unwrap();
    assert_ne!(refit, after);
    assert_eq!(sites_once(&run, 9).len(), 9);
    // A recipe for another wafer size cannot refit this run.
    let other = dir.path().join("other.toml");
    std::fs::write(
        &other,
        RECIPE.replace("diameter_mm = 150", "diameter_mm = 200"),
    )
    .unwrap();
    let o = isopach(&[
        "refit",
        run.to_str().unwrap(),
        "--recipe",
        other.to_str().unwrap(),
    ]);
    assert!(!o.status.success());
    assert!(String::from_utf8_lossy(&o.stderr).contains("[wafer] differs"));
}

#[test]
fn ctrl_c_stops_the_stage_keeps_the_data_and_resume_finishes() {
    let (dir, recipe, machine) = bench_dir("");
    let runs = dir.path().join("runs");
    let child = Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(run_args(&recipe, &machine, "INT", &runs))
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // Wait until the first site is journalled, then press Ctrl-C (SIGINT).
    let deadline = Instant::now() + Duration::from_secs(60);
    loop {
        let measured = std::fs::read_dir(&runs)
            .ok()
            .and_then(|mut d| d.next())
            .and_then(|e| std::fs::read_to_string(e.ok()?.path().join("journal.jsonl")).ok())
            .is_some_and(|j| j.contains("site-measured"));
        if measured || Instant::now() > deadline {
            break;
        }
        std::thread::sleep(Duration::from_millis(5));
    }
    let pid = child.id().to_string();
    assert!(Command::new("kill")
        .args(["-INT", &pid])
        .status()
        .unwrap()
        .success());
    let out = child.wait_with_output().unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    let run = only_run(&runs);
    let ev = events(&run);
    if out.status.code() == Some(0) {
        // The run finished before the signal arrived: nothing to stop.
        assert!(matches!(ev.last(), Some(Event::RunFinished { .. })));
        return;
    }
    assert_eq!(out.status.code(), Some(130), "{err}");
    assert!(err.contains("isopach resume"), "{err}");
    assert!(
        matches!(ev.last(), Some(Event::RunStopped { reason, .. }) if reason.contains("Ctrl-C"))
    );
    sites_once(&run, 9);
    let o = isopach(&["resume", run.to_str().unwrap()]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(sites_once(&run, 9).iter().all(|(_, f)| f == "ok"));
}

/// The printer-board machine file (strategy m400, homing `G28 X Y`, stop `M410`, no reset
/// byte) on the virtual controller in its Marlin-like dialect: the whole map runs, each wait
/// ending on M400's `ok` (a grbl-like controller would refuse the `G28` homing line).
#[test]
fn a_printer_board_with_m400_runs_the_whole_map() {
    let (dir, recipe, _) = bench_dir("");
    let fixture = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/fixtures/machines/m400.toml"
    ))
    .unwrap();
    let machine = dir.path().join("printer.toml");
    let text = fixture
        .replace("port = \"/dev/ttyUSB0\"", "port = \"simulated\"")
        .replace("startup_wait_s = 4", "startup_wait_s = 1")
        + "\n[simulation]\ntime_scale = 40\n";
    std::fs::write(&machine, text).unwrap();
    let runs = dir.path().join("runs");
    let o = run_map(&recipe, &machine, "P1", &runs);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let run = only_run(&runs);
    let rows = sites_once(&run, 9);
    assert!(rows.iter().all(|(_, f)| f == "ok"), "{rows:?}");
}

#[test]
fn faults_while_connecting_and_homing_stop_with_a_stop_event_and_resume() {
    // Lines 1–4 of a session are the unlock, the two init lines and the homing cycle. Every
    // kind of fault there ends the run within seconds (a stalled homing cycle within its
    // shortened timeout), journals the stop last, and the run resumes once the fault is gone.
    for kind in [
        "alarm",
        "error",
        "drop-ok",
        "garbage",
        "stall",
        "disconnect",
    ] {
        for line in 1..=4 {
            let (dir, recipe, machine) = bench_dir(&format!(
                "[[simulation.faults]]\nkind = \"{kind}\"\nat_line = {line}\n"
            ));
            let text = std::fs::read_to_string(&machine).unwrap();
            std::fs::write(
                &machine,
                text.replacen("home = [\"$H\"]", "home = [\"$H\"]\nhome_timeout_s = 4", 1),
            )
            .unwrap();
            let runs = dir.path().join("runs");
            let started = Instant::now();
            let o = run_map(&recipe, &machine, "H", &runs);
            let err = String::from_utf8_lossy(&o.stderr).to_string();
            let what = format!("{kind} at line {line}");
            assert!(
                started.elapsed() < Duration::from_secs(40),
                "{what}: took {:?}",
                started.elapsed()
            );
            let run = only_run(&runs);
            if o.status.code() == Some(0) {
                // A fault the protocol absorbs (a garbage line answered again): the run is whole.
                sites_once(&run, 9);
                continue;
            }
            assert_eq!(o.status.code(), Some(1), "{what}: {err}");
            assert!(err.contains("isopach resume"), "{what}: {err}");
            assert!(
                matches!(events(&run).last(), Some(Event::RunStopped { .. })),
                "{what}: the stop is not journalled last"
            );
            strip_faults(&run);
            let o = isopach(&["resume", run.to_str().unwrap()]);
            assert!(
                o.status.success(),
                "{what}: resume: {}",
                String::from_utf8_lossy(&o.stderr)
            );
            assert!(sites_once(&run, 9).iter().all(|(_, f)| f == "ok"), "{what}");
        }
    }
}
