//! Shared set-up of the hostile-helper tests and bench: spectrometer helper programs written
//! as executable `#!/bin/sh` scripts into a temp dir (the tool itself never uses a shell), a
//! liveness check for the processes they leave behind, and the peak memory of a child.
//! Builds on `run_common` (declare both modules).
#![allow(dead_code)] // each test binary uses its own subset

use std::os::unix::fs::PermissionsExt;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

/// Writes an executable shell script `name` in `dir` with `body` after the `#!` line.
pub fn script(dir: &Path, name: &str, body: &str) -> PathBuf {
    let path = dir.join(name);
    std::fs::write(&path, format!("#!/bin/sh\n{body}\n")).unwrap();
    std::fs::set_permissions(&path, std::fs::Permissions::from_mode(0o755)).unwrap();
    path
}

/// A spectrometer helper called as `HELPER {kind}`: counts its sample calls in
/// `DIR/count` (`$n`), runs `fault` (shell lines that may exit, print to stderr or set
/// `PX`, the pixel count, 512 by default), then prints a spectrum: flat dark counts, a lamp
/// curve × 0.35 for the reference, and × a fringe pattern of about 600 nm of oxide for a
/// sample.
pub fn spectrum_helper(dir: &Path, fault: &str) -> PathBuf {
    let body = format!(
        r#"DIR=$(dirname "$0")
PX=512
if [ "$1" = sample ]; then
  n=$(( $(cat "$DIR/count" 2>/dev/null || echo 0) + 1 )); echo $n > "$DIR/count"
  {fault}
fi
exec awk -v kind="$1" -v px="$PX" 'BEGIN {{
  print "wavelength_nm,counts"
  for (i = 0; i < px; i++) {{
    w = 420 + i * 560 / (px - 1); lamp = 20000 * exp(-((w - 650) / 300) ^ 2)
    if (kind == "dark") c = 100
    else if (kind == "reference") c = 100 + lamp * 0.35
    else c = 100 + lamp * (0.2 + 0.12 * cos(4 * 3.14159265 * 1.46 * 600 / w))
    printf "%.3f,%.1f\n", w, c
  }}
}}'"#
    );
    script(dir, "helper.sh", &body)
}

/// How many sample acquisitions the helper of [`spectrum_helper`] was asked for.
pub fn sample_calls(dir: &Path) -> u32 {
    std::fs::read_to_string(dir.join("count"))
        .map(|t| t.trim().parse().unwrap())
        .unwrap_or(0)
}

/// Machine-file text with the built-in `[spectrometer]` section replaced by `kind` with
/// `argv` as its program (timeout 20 s).
pub fn with_spectrometer(machine_text: &str, kind: &str, argv: &[String]) -> String {
    let quoted: Vec<String> = argv.iter().map(|a| format!("{a:?}")).collect();
    let spec = format!(
        "[spectrometer]\nkind = \"{kind}\"\ncommand = [{}]\ntimeout_s = 20",
        quoted.join(", ")
    );
    let text = machine_text.replace("[spectrometer]\nkind = \"simulated\"", &spec);
    assert!(
        text.contains(&spec),
        "no simulated [spectrometer] section to replace"
    );
    text
}

/// Runs `isopach run` (see `run_common::run_args`) expecting it to finish; the run's
/// journal events (else the run's stderr in the panic).
pub fn finished_run(
    recipe: &Path,
    machine: &Path,
    wafer: &str,
    runs: &Path,
) -> Vec<isopach::run::events::Event> {
    let o = super::run_common::run_map(recipe, machine, wafer, runs);
    let ev = super::run_common::events(&super::run_common::only_run(runs));
    assert!(
        matches!(
            ev.last(),
            Some(isopach::run::events::Event::RunFinished { .. })
        ),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    ev
}

/// Whether process `pid` still runs (a zombie waiting for its reaper does not).
pub fn alive(pid: u32) -> bool {
    match std::fs::read_to_string(format!("/proc/{pid}/stat")) {
        Err(_) => false,
        // Field 3, after the parenthesised command name, is the state.
        Ok(stat) => !stat
            .rsplit_once(") ")
            .is_some_and(|(_, rest)| rest.starts_with('Z') || rest.starts_with('X')),
    }
}

/// Waits up to 3 s for `pid` to be gone (SIGKILL takes effect asynchronously).
pub fn gone(pid: u32) -> bool {
    let start = Instant::now();
    while start.elapsed() < Duration::from_secs(3) {
        if !alive(pid) {
            return true;
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    false
}

/// The pid a helper wrote into `DIR/pid` (waiting up to 3 s for it).
pub fn pid_in(dir: &Path) -> u32 {
    let start = Instant::now();
    loop {
        if let Some(pid) = std::fs::read_to_string(dir.join("pid"))
            .ok()
            .and_then(|t| t.trim().parse().ok())
        {
            return pid;
        }
        assert!(
            start.elapsed() < Duration::from_secs(3),
            "the helper wrote no pid"
        );
        std::thread::sleep(Duration::from_millis(20));
    }
}

/// What a child left: exit code, peak resident memory and its stderr.
pub struct Measured {
    pub code: i32,
    pub peak_rss_mib: f64,
    pub wall_s: f64,
}

/// Runs `cmd` (stdout and stderr to files in `dir`) and measures its peak resident set size
/// as the kernel reports it to `wait4` (`ru_maxrss`, KiB on Linux: getrusage(2)).
pub fn peak_memory(cmd: &mut Command, dir: &Path) -> Measured {
    let start = Instant::now();
    let child = cmd
        .stdout(std::fs::File::create(dir.join("stdout.txt")).unwrap())
        .stderr(std::fs::File::create(dir.join("stderr.txt")).unwrap())
        .spawn()
        .unwrap();
    let pid = child.id() as libc::pid_t;
    let mut status = 0;
    // SAFETY: rusage is plain data the kernel fills; the pid is our own unreaped child.
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    let r = unsafe { libc::wait4(pid, &mut status, 0, &mut usage) };
    assert_eq!(r, pid, "wait4 failed");
    std::mem::forget(child); // already reaped
    Measured {
        code: if libc::WIFEXITED(status) {
            libc::WEXITSTATUS(status)
        } else {
            -1
        },
        peak_rss_mib: usage.ru_maxrss as f64 / 1024.0,
        wall_s: start.elapsed().as_secs_f64(),
    }
}
