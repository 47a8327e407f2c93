//! Run folders under hard stops and hostile contents: refits killed at random points (never a
//! mix of two optical models), torn journal tails (NULs, a cut UTF-8 character), leftover temp
//! files, and symbolic links planted in a run folder.

mod run_common;

use isopach::run::derive;
use isopach::run::events::{settled, Event};
use isopach::run::folder::RunFolder;
use run_common::{bench_dir, events, isopach, only_run, run_map, RECIPE};
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// Copies a (small) run folder.
fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap() {
        let e = e.unwrap();
        let dst = to.join(e.file_name());
        if e.file_type().unwrap().is_dir() {
            copy_dir(&e.path(), &dst);
        } else {
            std::fs::copy(e.path(), dst).unwrap();
        }
    }
}

/// The thickness of every site's best attempt, as the journal's fold gives it.
fn thicknesses(run: &Path) -> Vec<f64> {
    let folder = RunFolder::new(run);
    let meta = folder.read_run_toml().unwrap();
    let (_, states) = derive::read_states(&folder, &meta).unwrap();
    states
        .iter()
        .map(|s| s.best().unwrap().fit.as_ref().unwrap().layers[0].thickness_nm)
        .collect()
}

fn window(run: &Path) -> Vec<f64> {
    RunFolder::new(run)
        .read_run_toml()
        .unwrap()
        .recipe
        .film
        .wavelength_nm
        .to_vec()
}

fn refit_cmd(run: &Path, recipe: &Path) -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_isopach"));
    c.args([
        "refit",
        run.to_str().unwrap(),
        "--recipe",
        recipe.to_str().unwrap(),
    ]);
    c
}

#[test]
fn refit_killed_at_random_points_never_mixes_models() {
    let (dir, recipe, machine) = bench_dir("");
    let runs = dir.path().join("runs");
    assert!(run_map(&recipe, &machine, "RF", &runs).status.success());
    let base = only_run(&runs);
    let old = thicknesses(&base);
    let narrow = dir.path().join("narrow.toml");
    std::fs::write(&narrow, RECIPE.replace("[420, 980]", "[550, 800]")).unwrap();
    let full = dir.path().join("full");
    copy_dir(&base, &full);
    let mut child = refit_cmd(&full, &narrow)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let t0 = Instant::now();
    let started = wait_for(&full, "refit-started");
    let finished = wait_for(&full, "refit-finished");
    assert!(child.wait().unwrap().success());
    // From process start to refit-started, and from there to refit-finished (the fits).
    let (lead, span) = (started - t0, finished - started);
    let new = thicknesses(&full);
    assert!(
        old.iter().zip(&new).all(|(a, b)| a != b),
        "the two windows give different fits at every site: {old:?} {new:?}"
    );
    let (old_window, new_window) = (window(&base), window(&full));
    // Deterministic pseudo-random kill points (xorshift): one in four anywhere from the
    // start of the process, the others inside the refit itself.
    let mut x: u64 = 0x2545_f491_4f6c_dd1d;
    let (mut mid_way, mut discarded) = (0, 0);
    for k in 0..24 {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        let at = (x % 1000) as f64 / 1000.0;
        let run = dir.path().join(format!("k{k}"));
        copy_dir(&base, &run);
        let mut child = refit_cmd(&run, &narrow)
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        if k % 4 == 0 {
            std::thread::sleep((lead + span).mul_f64(1.1 * at));
        } else {
            wait_for(&run, "refit-started");
            std::thread::sleep(span.mul_f64(1.2 * at));
        }
        let _ = child.kill(); // SIGKILL
        let _ = child.wait();
        let ev = events(&run);
        let fits_in_refit = ev
            .iter()
            .skip_while(|e| !matches!(e, Event::RefitStarted { .. }))
            .filter(|e| matches!(e, Event::SiteFitted { .. }))
            .count();
        let unfinished = settled(&ev).1.is_some();
        if unfinished && fits_in_refit > 0 {
            mid_way += 1;
        }
        // Never a mix: every site has the old model's fit, or every site the new one's.
        let t = thicknesses(&run);
        assert!(
            t == old || (t == new && !unfinished),
            "kill at {at:.2} ({fits_in_refit} refit fits journalled): {t:?}"
        );
        let o = isopach(&["resume", run.to_str().unwrap()]);
        let stderr = String::from_utf8_lossy(&o.stderr);
        assert!(o.status.success(), "kill at {at:.2}: {stderr}");
        assert_eq!(
            stderr.contains("did not finish") && stderr.contains("discarded"),
            unfinished,
            "kill at {at:.2}: {stderr}"
        );
        discarded += usize::from(unfinished);
        // After resume, the recipe in run.toml and the fits agree.
        let t = thicknesses(&run);
        if window(&run) == new_window {
            assert_eq!(t, new, "kill at {at:.2}");
        } else {
            assert_eq!(window(&run), old_window);
            assert_eq!(t, old, "kill at {at:.2}");
        }
    }
    eprintln!("refit kills: {discarded} discarded unfinished, {mid_way} of them mid-way");
    // Every event boundary inside a refit is covered by events::tests; here kills must at
    // least have landed inside refits.
    assert!(discarded > 0, "no kill landed inside a refit");
}

/// Waits (up to 60 s) until the run's journal holds `event` (e.g. `refit-started`); returns
/// when.
fn wait_for(run: &Path, event: &str) -> Instant {
    let t0 = Instant::now();
    let quoted = format!("\"{event}\"");
    while t0.elapsed() < Duration::from_secs(60) {
        let text = std::fs::read(run.join("journal.jsonl")).unwrap_or_default();
        if text.windows(quoted.len()).any(|w| w == quoted.as_bytes()) {
            return Instant::now();
        }
        std::thread::sleep(Duration::from_micros(200));
    }
    panic!("no {event} in {}", run.display());
}

/// A finished 9-site run in a temp dir.
fn finished_run() -> (tempfile::TempDir, std::path::PathBuf) {
    let (dir, recipe, machine) = bench_dir("");
    let runs = dir.path().join("runs");
    assert!(run_map(&recipe, &machine, "J", &runs).status.success());
    let run = only_run(&runs);
    (dir, run)
}

#[test]
fn torn_journal_tails_are_kept_aside_and_the_run_goes_on() {
    let (_dir, run) = finished_run();
    let journal = run.join("journal.jsonl");
    let good = std::fs::read(&journal).unwrap();
    let n_good = events(&run).len();
    // A power loss (NULs where data never came), a cut inside "é", both after a cut line.
    let tails: [&[u8]; 3] = [
        &[0u8; 512],
        b"{\"event\":\"run-stopped\",\"time\":\"x\",\"reason\":\"caf\xC3",
        b"{\"event\":\"site-fi\n\0\0\0\0",
    ];
    for (k, tail) in tails.iter().enumerate() {
        std::fs::write(&journal, [good.as_slice(), tail].concat()).unwrap();
        // Readers keep every good event before the tear.
        assert_eq!(events(&run).len(), n_good, "tail {k}");
        let o = isopach(&["remeasure", run.to_str().unwrap(), "--site", "2"]);
        let stderr = String::from_utf8_lossy(&o.stderr);
        assert!(o.status.success(), "tail {k}: {stderr}");
        assert!(stderr.contains("torn write"), "tail {k}: {stderr}");
        let log = std::fs::read_to_string(run.join("log.txt")).unwrap();
        assert!(log.contains("torn write"), "tail {k}: log.txt says so");
        // The journal kept its good events and went on; the torn bytes are kept beside it.
        let after = events(&run);
        assert_eq!(
            &std::fs::read(&journal).unwrap()[..good.len()],
            good.as_slice()
        );
        assert!(after.len() > n_good, "tail {k}");
        let kept: Vec<Vec<u8>> = isopach::run::journal::kept_tails(&run)
            .iter()
            .map(|p| std::fs::read(p).unwrap())
            .collect();
        assert!(kept.iter().any(|b| b == tail), "tail {k}");
        std::fs::write(&journal, &good).unwrap();
    }
    // An unreadable line in the middle is no tear: an error that names the line.
    let mut lines: Vec<&[u8]> = good.split(|b| *b == b'\n').collect();
    lines[3] = b"\0\0\0\0";
    std::fs::write(&journal, lines.join(&b'\n')).unwrap();
    let o = isopach(&["resume", run.to_str().unwrap()]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert!(!o.status.success());
    assert!(
        stderr.contains("journal.jsonl:4: not a valid event"),
        "{stderr}"
    );
}

#[test]
fn leftover_temp_files_are_removed_when_a_session_starts() {
    let (_dir, run) = finished_run();
    // PID 4194304 is above Linux's pid_max ceiling (2^22): the writer is surely gone.
    let leftovers = [
        run.join("spectra/.site-0003-a1.csv.tmp4194304"),
        run.join(".sites.csv.tmp4194304"),
    ];
    let kept = [
        run.join("spectra/notes.tmp4194304"),
        run.join("spectra/.hidden.csv"),
    ];
    for p in leftovers.iter().chain(&kept) {
        std::fs::write(p, "partial").unwrap();
    }
    let o = isopach(&["resume", run.to_str().unwrap()]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert!(o.status.success(), "{stderr}");
    assert!(
        stderr.contains("removed 2 unfinished temp file"),
        "{stderr}"
    );
    assert!(leftovers.iter().all(|p| !p.exists()));
    assert!(kept.iter().all(|p| p.exists()));
}

#[cfg(unix)]
#[test]
fn links_planted_in_a_run_folder_are_refused_and_reach_nothing() {
    let (dir, run) = finished_run();
    let outside = dir.path().join("outside.txt");
    for name in [
        "log.txt",
        "journal.jsonl",
        "run.toml",
        "plan.json",
        "sites.csv",
        "spectra/site-0001-a1.csv",
        "spectra",
    ] {
        let copy = dir.path().join("victim");
        let _ = std::fs::remove_dir_all(&copy);
        copy_dir(&run, &copy);
        std::fs::write(&outside, "not yours").unwrap();
        let planted = copy.join(name);
        if planted.is_dir() {
            std::fs::remove_dir_all(&planted).unwrap();
        } else {
            std::fs::remove_file(&planted).unwrap();
        }
        std::os::unix::fs::symlink(&outside, &planted).unwrap();
        for args in [
            vec!["resume", copy.to_str().unwrap()],
            vec!["remeasure", copy.to_str().unwrap(), "--site", "1"],
            vec!["refit", copy.to_str().unwrap()],
        ] {
            let o = isopach(&args);
            let stderr = String::from_utf8_lossy(&o.stderr);
            assert_eq!(o.status.code(), Some(2), "{name} {args:?}: {stderr}");
            assert!(stderr.contains("is a symbolic link"), "{stderr}");
            assert_eq!(std::fs::read_to_string(&outside).unwrap(), "not yours");
        }
    }
}
