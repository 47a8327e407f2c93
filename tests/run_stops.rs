//! Issue "One plan, one event stream": nothing touches the world before the plan is valid, and
//! a stop at any step (homing, the reference move) stops the stage, is journalled and leaves a
//! resumable run. Each test runs the real binary as a user would.

mod run_common;

use isopach::run::events::Event;
use run_common::*;
use std::io::{BufRead, BufReader};
use std::path::Path;
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

/// Bytes that reach the controller side of a pseudo-terminal within `wait`.
fn bytes_received(
    rt: &tokio::runtime::Runtime,
    master: &mut tokio_serial::SerialStream,
    wait: Duration,
) -> Vec<u8> {
    use tokio::io::AsyncReadExt;
    rt.block_on(async {
        let mut got = Vec::new();
        let mut buf = [0u8; 256];
        let deadline = tokio::time::Instant::now() + wait;
        while let Ok(Ok(n)) =
            tokio::time::timeout_at(deadline, AsyncReadExt::read(master, &mut buf)).await
        {
            if n == 0 {
                break;
            }
            got.extend_from_slice(&buf[..n]);
        }
        got
    })
}

/// A machine file on the pseudo-terminal `port` (nobody answers there), with `extra` lines
/// added to its `[stage]` section.
fn pty_machine(
    dir: &Path,
    name: &str,
    port: &str,
    stage_extra: &str,
    chuck: [f64; 2],
) -> std::path::PathBuf {
    let text = format!(
        "name = \"pty-bench\"\n[stage]\nport = \"{port}\"\nfeed_hold = \"!\"\nline_timeout_s = 0.5\nstartup_wait_s = 0.2\n\
         travel_x_mm = [0, 200]\ntravel_y_mm = [0, 200]\n{stage_extra}\n\
         [chuck]\ncenter_mm = [{}, {}]\n[spectrometer]\nkind = \"simulated\"\n\
         [reference]\nmaterial = \"si\"\n",
        chuck[0], chuck[1]
    );
    let path = dir.join(format!("{name}.toml"));
    std::fs::write(&path, text).unwrap();
    path
}

#[test]
fn an_invalid_recipe_machine_or_plan_leaves_no_folder_and_sends_no_byte() {
    use tokio_serial::SerialPort;
    let rt = tokio::runtime::Runtime::new().unwrap();
    let (mut master, slave) = {
        let _in_runtime = rt.enter();
        tokio_serial::SerialStream::pair().expect("a pseudo-terminal pair for this test")
    };
    let port = slave.name().expect("the pty has a path");
    let (dir, recipe, _) = bench_dir("");
    let bad_recipe = dir.path().join("bad.toml");
    std::fs::write(
        &bad_recipe,
        RECIPE.replace("diameter_mm = 150", "diameter_mm = \"150\""),
    )
    .unwrap();
    let cases: Vec<(&str, std::path::PathBuf, std::path::PathBuf)> = vec![
        (
            "a chuck centre that puts the wafer outside the travel",
            recipe.clone(),
            pty_machine(dir.path(), "m1", &port, "", [190.0, 100.0]),
        ),
        (
            "relative mode in the init lines",
            recipe.clone(),
            pty_machine(
                dir.path(),
                "m-relative",
                &port,
                "init = [\"G21\", \"G91\"]",
                [100.0, 100.0],
            ),
        ),
        (
            "a type error in the recipe",
            bad_recipe.clone(),
            pty_machine(dir.path(), "m2", &port, "", [100.0, 100.0]),
        ),
    ];
    for (what, recipe, machine) in cases {
        let runs = dir.path().join("runs");
        let mut args = run_args(&recipe, &machine, "W1", &runs);
        args.push("--yes".into());
        let o = Command::new(env!("CARGO_BIN_EXE_isopach"))
            .args(&args)
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&o.stderr).to_string();
        assert_eq!(o.status.code(), Some(2), "{what}: {err}");
        let left: Vec<_> = std::fs::read_dir(&runs)
            .map(|d| d.filter_map(|e| e.ok()).map(|e| e.path()).collect())
            .unwrap_or_default();
        assert!(left.is_empty(), "{what}: left {left:?}");
        let sent = bytes_received(&rt, &mut master, Duration::from_millis(300));
        assert!(
            sent.is_empty(),
            "{what}: sent {:?}",
            String::from_utf8_lossy(&sent)
        );
    }
    // The same port with a valid plan is opened and spoken to: the check above can see bytes.
    let machine = pty_machine(dir.path(), "m3", &port, "", [100.0, 100.0]);
    let runs = dir.path().join("runs-valid");
    let mut args = run_args(&recipe, &machine, "W2", &runs);
    args.push("--yes".into());
    let o = Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(&args)
        .output()
        .unwrap();
    assert_eq!(
        o.status.code(),
        Some(1),
        "nobody answers on the pty: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    let sent = bytes_received(&rt, &mut master, Duration::from_millis(500));
    assert!(!sent.is_empty(), "a valid plan opens the port and sends");
    drop(slave);
}

/// Starts `isopach run` on the test recipe and `machine`, stderr piped.
fn start_run(recipe: &Path, machine: &Path, runs: &Path) -> Child {
    Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(run_args(recipe, machine, "STOP", runs))
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap()
}

/// Reads the child's stderr until a line contains `needle`; the lines read so far.
fn read_until(child: &mut Child, needle: &str) -> (BufReader<std::process::ChildStderr>, String) {
    let mut err = BufReader::new(child.stderr.take().unwrap());
    let mut seen = String::new();
    let deadline = Instant::now() + Duration::from_secs(60);
    while Instant::now() < deadline {
        let mut line = String::new();
        if err.read_line(&mut line).unwrap_or(0) == 0 {
            break;
        }
        seen.push_str(&line);
        if line.contains(needle) {
            break;
        }
    }
    assert!(seen.contains(needle), "never saw {needle:?}: {seen}");
    (err, seen)
}

/// Sends SIGINT (Ctrl-C) and waits; exit code, time to exit, all of stderr.
fn interrupt(mut child: Child, mut err: BufReader<std::process::ChildStderr>) -> (i32, Duration) {
    let sent = Instant::now();
    assert!(Command::new("kill")
        .args(["-INT", &child.id().to_string()])
        .status()
        .unwrap()
        .success());
    let mut rest = String::new();
    let _ = std::io::Read::read_to_string(&mut err, &mut rest);
    let status = child.wait().unwrap();
    (status.code().unwrap_or(-1), sent.elapsed())
}

/// The stop is journalled last, and the log holds the stop sent to the controller.
fn assert_stopped_and_journalled(run: &Path) {
    let ev = events(run);
    assert!(
        matches!(ev.last(), Some(Event::RunStopped { reason, .. }) if reason.contains("Ctrl-C")),
        "{ev:?}"
    );
    assert!(
        !ev.iter().any(|e| matches!(e, Event::ReferenceTaken { .. })),
        "no reference was taken: {ev:?}"
    );
    let log = std::fs::read_to_string(run.join("log.txt")).unwrap();
    // The built-in bench stops with its reset byte (Ctrl-X), sent after the interrupted step.
    let convo = &log[log
        .rfind("recent G-code conversation")
        .expect("transcript logged")..];
    assert!(
        convo.contains("\\u{18}") || convo.contains('\u{18}'),
        "{convo}"
    );
}

#[test]
fn ctrl_c_during_homing_stops_the_stage_and_leaves_a_resumable_run() {
    // The controller freezes on the homing line ($H, the 4th line after $X, G21, G90), so
    // homing would wait out its whole timeout; Ctrl-C must not.
    let (dir, recipe, machine) =
        bench_dir("[[simulation.faults]]\nkind = \"stall\"\nat_line = 4\n");
    let runs = dir.path().join("runs");
    let mut child = start_run(&recipe, &machine, &runs);
    let (err, _) = read_until(&mut child, "homing the stage");
    std::thread::sleep(Duration::from_millis(300));
    let (code, took) = interrupt(child, err);
    assert_eq!(code, 130);
    assert!(took < Duration::from_secs(10), "took {took:?}");
    let run = only_run(&runs);
    assert_stopped_and_journalled(&run);
    // Without the fault, resume homes, takes the reference and measures every site.
    strip_faults(&run);
    let o = isopach(&["resume", run.to_str().unwrap()]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(sites_once(&run, 9).iter().all(|(_, f)| f == "ok"));
}

#[test]
fn ctrl_c_during_the_reference_move_stops_the_stage_and_leaves_a_resumable_run() {
    // A slow stage and a reference piece far from home: the move takes seconds.
    let (dir, recipe, machine) =
        bench_dir("[reference]\nmaterial = \"si\"\nposition_mm = [300, 300]\n");
    let text = std::fs::read_to_string(&machine)
        .unwrap()
        .replace("time_scale = 50", "time_scale = 4")
        .replace("feed_mm_min = 6000", "feed_mm_min = 1200");
    std::fs::write(&machine, text).unwrap();
    let runs = dir.path().join("runs");
    let mut child = start_run(&recipe, &machine, &runs);
    let (err, _) = read_until(&mut child, "moving to the reference piece");
    std::thread::sleep(Duration::from_millis(200));
    let (code, took) = interrupt(child, err);
    assert_eq!(code, 130);
    // The move alone takes 424 mm / 20 mm/s / 4 ≈ 5.3 s: the stop did not wait for it.
    assert!(took < Duration::from_secs(3), "took {took:?}");
    let run = only_run(&runs);
    assert_stopped_and_journalled(&run);
    let o = isopach(&["resume", run.to_str().unwrap()]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(sites_once(&run, 9).iter().all(|(_, f)| f == "ok"));
}

/// Issue 18: SIGTERM and SIGHUP (a closed SSH session) stop a run like Ctrl-C: the stage is
/// stopped, the stop journalled, exit 130, and the run resumes.
#[test]
fn sigterm_and_sighup_stop_like_ctrl_c() {
    for signal in ["TERM", "HUP"] {
        let (dir, recipe, machine) = bench_dir("");
        let text = std::fs::read_to_string(&machine)
            .unwrap()
            .replace("time_scale = 50", "time_scale = 5");
        std::fs::write(&machine, text).unwrap();
        let runs = dir.path().join("runs");
        let mut child = start_run(&recipe, &machine, &runs);
        let (mut err, _) = read_until(&mut child, "reference taken");
        std::thread::sleep(Duration::from_millis(300));
        assert!(Command::new("kill")
            .args([&format!("-{signal}"), &child.id().to_string()])
            .status()
            .unwrap()
            .success());
        let mut rest = String::new();
        let _ = std::io::Read::read_to_string(&mut err, &mut rest);
        let code = child.wait().unwrap().code();
        let run = only_run(&runs);
        let ev = events(&run);
        if code == Some(0) {
            // Finished before the signal landed: nothing to stop.
            assert!(matches!(ev.last(), Some(Event::RunFinished { .. })));
            continue;
        }
        assert_eq!(code, Some(130), "SIG{signal}: {rest}");
        assert!(rest.contains(&format!("SIG{signal}")), "{rest}");
        assert!(
            matches!(ev.last(), Some(Event::RunStopped { .. })),
            "SIG{signal}: {ev:?}"
        );
        let o = isopach(&["resume", run.to_str().unwrap()]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        assert!(sites_once(&run, 9).iter().all(|(_, f)| f == "ok"));
    }
}

/// Issue 18: a signal in the first milliseconds leaves either no run folder or a complete,
/// resumable one (the folder is created whole, then renamed into place).
#[test]
fn an_early_signal_leaves_no_folder_or_a_resumable_one() {
    let (dir, recipe, machine) = bench_dir("");
    for (k, delay_ms) in [0u64, 2, 5, 10, 20, 40].into_iter().enumerate() {
        let runs = dir.path().join(format!("runs-{k}"));
        let child = Command::new(env!("CARGO_BIN_EXE_isopach"))
            .args(run_args(&recipe, &machine, "EARLY", &runs))
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_millis(delay_ms));
        let _ = Command::new("kill")
            .args(["-INT", &child.id().to_string()])
            .status();
        let mut child = child;
        let _ = child.wait();
        let visible: Vec<_> = std::fs::read_dir(&runs)
            .map(|d| {
                d.filter_map(|e| e.ok())
                    .map(|e| e.path())
                    .filter(|p| !p.file_name().unwrap().to_string_lossy().starts_with('.'))
                    .filter(|p| p.is_dir())
                    .collect()
            })
            .unwrap_or_default();
        if visible.is_empty() {
            continue;
        }
        let run = only_run(&runs);
        assert!(run.join("run.toml").is_file(), "{}", run.display());
        assert!(run.join("plan.json").is_file(), "{}", run.display());
        let o = isopach(&["resume", run.to_str().unwrap()]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        sites_once(&run, 9);
    }
}

/// Issue 13: Ctrl-C during centring stops the stage at once and journals the stop; nothing
/// is centred, and `resume` centres again before measuring.
#[test]
fn ctrl_c_during_centring_stops_the_stage_and_resume_centres_again() {
    let (dir, recipe, machine) = bench_dir("");
    // Slow virtual time: centring takes some 300 readings, seconds of wall time.
    let text = std::fs::read_to_string(&machine)
        .unwrap()
        .replace("time_scale = 50", "time_scale = 2");
    std::fs::write(&machine, text).unwrap();
    let runs = dir.path().join("runs");
    let mut child = Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(run_args(&recipe, &machine, "CENTRE", &runs))
        .arg("--centre")
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let (err, _) = read_until(&mut child, "centring the wafer");
    std::thread::sleep(Duration::from_millis(300));
    let (code, took) = interrupt(child, err);
    assert_eq!(code, 130);
    assert!(took < Duration::from_secs(3), "took {took:?}");
    let run = only_run(&runs);
    assert_stopped_and_journalled(&run);
    let centred = |run: &Path| {
        events(run)
            .iter()
            .filter(|e| matches!(e, Event::WaferCentred { .. }))
            .count()
    };
    assert_eq!(centred(&run), 0);
    let o = isopach(&["resume", run.to_str().unwrap()]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(centred(&run), 1, "resume centres before measuring");
    assert!(sites_once(&run, 9).iter().all(|(_, f)| f == "ok"));
}
