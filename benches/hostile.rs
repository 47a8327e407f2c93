//! Peak memory of isopach on hostile input (a bench binary, `cargo bench --bench hostile`;
//! `cargo bench --bench hostile --profile dev` skips the release build): map runs whose
//! `command` spectrometer helper prints gigabytes, and `isopach fit` on spectrum files far
//! past any spectrometer. Each row is one child process measured by the kernel (`wait4`
//! `ru_maxrss`); the table goes into docs/reliability.md. Temp files are deleted at the end.

#[path = "../tests/hostile_common/mod.rs"]
mod hostile_common;
#[path = "../tests/run_common/mod.rs"]
mod run_common;

use hostile_common::{peak_memory, script, spectrum_helper, with_spectrometer};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::Command;

fn main() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let recipe = d.join("r.toml");
    // The run tests' 9-site recipe, measured once per site (no second pass).
    std::fs::write(&recipe, format!("{}retries = 0\n", run_common::RECIPE)).unwrap();
    println!("| input | exit | peak RSS | wall time | log.txt + journal |");
    println!("|---|---|---|---|---|");
    type Make = fn(&Path) -> PathBuf;
    let helpers: [(&str, Make); 4] = [
        ("`run`, helper prints 1 GB on stdout", |d| {
            script(d, "h.sh", "yes 400,1 | head -c 1000000000")
        }),
        ("`run`, helper prints 50 MB in one line", |d| {
            script(
                d,
                "h.sh",
                "echo wavelength_nm,counts; head -c 50000000 /dev/zero | tr '\\0' 7",
            )
        }),
        (
            "`run`, helper prints 200 MB on stderr, then a spectrum (11 acquisitions)",
            |d| spectrum_helper(d, "head -c 200000000 /dev/zero >&2"),
        ),
        ("`run`, helper leaves a child holding stdout open", |d| {
            spectrum_helper(d, "sleep 300 &")
        }),
    ];
    for (i, (what, make)) in helpers.iter().enumerate() {
        let case = d.join(format!("case{i}"));
        std::fs::create_dir(&case).unwrap();
        let machine = machine_file(&case, &make(&case));
        let runs = case.join("runs");
        let args = run_common::run_args(&recipe, &machine, &format!("H{i}"), &runs);
        let m = measure(&args, &case);
        let files = run_files_bytes(&runs);
        println!(
            "| {what} | {} | {:.1} MiB | {:.1} s | {} bytes |",
            m.code, m.peak_rss_mib, m.wall_s, files
        );
        last_error_line(&case, what);
    }
    for (what, path) in spectrum_files(d) {
        let m = measure(
            &[
                "fit".into(),
                path.to_string_lossy().into(),
                "--recipe".into(),
                recipe.to_string_lossy().into(),
            ],
            d,
        );
        println!(
            "| `fit`, {what} | {} | {:.1} MiB | {:.2} s | — |",
            m.code, m.peak_rss_mib, m.wall_s
        );
        last_error_line(d, what);
        std::fs::remove_file(path).unwrap();
    }
}

/// Runs isopach with `args`, its output in files in `dir`; its peak memory.
fn measure(args: &[String], dir: &Path) -> hostile_common::Measured {
    peak_memory(Command::new(env!("CARGO_BIN_EXE_isopach")).args(args), dir)
}

/// Prints (to stderr, beside the table) the last line the child printed on stderr.
fn last_error_line(dir: &Path, what: &str) {
    let err = std::fs::read_to_string(dir.join("stderr.txt")).unwrap();
    eprintln!("  {what}: {}", err.lines().last().unwrap_or(""));
}

/// The built-in simulated stage with `helper` as the spectrometer and an on-chuck reference.
fn machine_file(dir: &Path, helper: &Path) -> PathBuf {
    let argv = [helper.to_str().unwrap().to_string(), "{kind}".into()];
    let text = with_spectrometer(isopach::bench::machine::BUILTIN_SIMULATED, "command", &argv);
    let path = dir.join("machine.toml");
    std::fs::write(
        &path,
        format!("{text}\n[reference]\nposition_mm = [20, 20]\n"),
    )
    .unwrap();
    path
}

/// Bytes of every run's log.txt and journal.jsonl under `runs`.
fn run_files_bytes(runs: &Path) -> u64 {
    let mut total = 0;
    for run in std::fs::read_dir(runs).into_iter().flatten().flatten() {
        for f in ["log.txt", "journal.jsonl"] {
            total += std::fs::metadata(run.path().join(f)).map_or(0, |m| m.len());
        }
    }
    total
}

/// Hostile spectrum files: 10 million rows (the case), 10 million comment lines under
/// the size ceiling, and one row past the pixel ceiling.
fn spectrum_files(dir: &Path) -> Vec<(&'static str, PathBuf)> {
    let write = |name: &str, header: &str, lines: usize, line: &dyn Fn(usize) -> String| {
        let path = dir.join(name);
        let mut f = std::io::BufWriter::new(std::fs::File::create(&path).unwrap());
        f.write_all(header.as_bytes()).unwrap();
        for i in 0..lines {
            f.write_all(line(i).as_bytes()).unwrap();
        }
        f.flush().unwrap();
        path
    };
    let rows = |i: usize| format!("{:.4},0.3\n", 400.0 + i as f64 * 1e-4);
    vec![
        (
            "10 million rows (over 100 MB)",
            write(
                "rows10m.csv",
                "wavelength_nm,reflectance\n",
                10_000_000,
                &rows,
            ),
        ),
        (
            "10 million comment lines (20 MB)",
            write("comments10m.csv", "", 10_000_000, &|_| "#\n".into()),
        ),
        (
            "100 001 rows",
            write(
                "rows100k.csv",
                "wavelength_nm,reflectance\n",
                100_001,
                &rows,
            ),
        ),
    ]
}
