//! The README's examples, run in order as a newcomer would type them, on the simulated bench:
//! every file and folder an example names exists in the repository or is made by an earlier
//! example, and every command succeeds.

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

fn repo(path: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(path)
}

/// The shell lines of the README's code blocks from "Daily use" on (the set-up block builds
/// and tests the project itself), with their trailing comments removed.
fn daily_use_examples(readme: &str) -> Vec<String> {
    let from = readme
        .find("## Daily use")
        .expect("the README has a Daily use section");
    let mut in_block = false;
    let mut out = Vec::new();
    for line in readme[from..].lines() {
        if line.starts_with("## ") && !line.starts_with("## Daily use") {
            break;
        }
        if line.trim_start().starts_with("```") {
            in_block = !in_block && line.trim() == "```sh";
            continue;
        }
        if in_block && !line.trim().is_empty() {
            let command = match line.find("  #") {
                Some(i) => &line[..i],
                None => line,
            };
            out.push(command.trim().to_string());
        }
    }
    out
}

/// A folder laid out like the repository root: the recipes and machine files the examples
/// name, and nothing else.
fn checkout() -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    for sub in ["recipes", "machines"] {
        std::fs::create_dir(dir.path().join(sub)).unwrap();
        for entry in std::fs::read_dir(repo(sub)).unwrap() {
            let entry = entry.unwrap();
            std::fs::copy(entry.path(), dir.path().join(sub).join(entry.file_name())).unwrap();
        }
    }
    dir
}

fn shell(line: &str, cwd: &Path) -> Command {
    let bin = Path::new(env!("CARGO_BIN_EXE_isopach")).parent().unwrap();
    let path = format!(
        "{}:{}",
        bin.display(),
        std::env::var("PATH").unwrap_or_default()
    );
    let mut c = Command::new("sh");
    c.args(["-c", line])
        .current_dir(cwd)
        .env("PATH", path)
        .env_remove("ISOPACH_HISTORY");
    c
}

/// A `--watch` run serves its page until Ctrl-C: wait for the run to end, check the page
/// answered meanwhile, then stop it as a user would.
fn run_watched(line: &str, cwd: &Path) -> (Option<i32>, String) {
    // `exec`: the shell becomes isopach, so Ctrl-C reaches it.
    let mut child = shell(&format!("exec {line}"), cwd)
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut err = BufReader::new(child.stderr.take().unwrap());
    let mut seen = String::new();
    let started = Instant::now();
    let mut line_buf = String::new();
    while started.elapsed() < Duration::from_secs(300) {
        line_buf.clear();
        if err.read_line(&mut line_buf).unwrap_or(0) == 0 {
            break;
        }
        seen.push_str(&line_buf);
        if line_buf.contains("the live page stays at") {
            let url = line_buf
                .split("stays at ")
                .nth(1)
                .unwrap()
                .split(' ')
                .next()
                .unwrap();
            let state = fetch(&format!("{url}state"));
            assert!(state.contains("\"finished\":true"), "{url}state: {state}");
            Command::new("kill")
                .args(["-INT", &child.id().to_string()])
                .status()
                .unwrap();
        }
    }
    let status = child.wait().unwrap();
    (status.code(), seen)
}

/// One HTTP GET on the loopback interface (the page's JSON snapshot).
fn fetch(url: &str) -> String {
    use std::io::{Read, Write};
    let rest = url.trim_start_matches("http://");
    let (host, path) = rest.split_at(rest.find('/').unwrap());
    let mut s = std::net::TcpStream::connect(host).unwrap();
    write!(s, "GET {path} HTTP/1.0\r\nHost: {host}\r\n\r\n").unwrap();
    let mut body = String::new();
    s.read_to_string(&mut body).unwrap();
    body
}

#[test]
fn the_readme_examples_run_in_order_on_the_simulated_bench() {
    let readme = std::fs::read_to_string(repo("README.md")).unwrap();
    let examples = daily_use_examples(&readme);
    assert!(examples.len() >= 12, "{examples:?}");
    let dir = checkout();
    for line in &examples {
        assert!(
            line.starts_with("isopach "),
            "not an isopach command: {line}"
        );
        let (code, err) = if line.contains("--watch") {
            run_watched(line, dir.path())
        } else {
            let o = shell(line, dir.path()).output().unwrap();
            (
                o.status.code(),
                String::from_utf8_lossy(&o.stderr).to_string(),
            )
        };
        assert_eq!(code, Some(0), "`{line}` failed:\n{err}");
    }
    // What the examples promise to leave behind.
    for made in [
        "W07.pdf",
        "lot-L2612.csv",
        "etch-rate.svg",
        "trend.svg",
        "runs/.history.sqlite",
    ] {
        assert!(dir.path().join(made).is_file(), "{made} was not made");
    }
    let csv = std::fs::read_to_string(dir.path().join("lot-L2612.csv")).unwrap();
    assert_eq!(csv.lines().count(), 4, "a header and three wafers: {csv}");
}

#[test]
fn examples_are_found_with_their_comments_removed() {
    let text = "## Set-up\n```sh\ncargo test\n```\n## Daily use\ntext\n```sh\nisopach a b   # note\n\nisopach c\n```\n```text\nnot this\n```\n## Safety\n```sh\nisopach no\n```\n";
    assert_eq!(daily_use_examples(text), ["isopach a b", "isopach c"]);
}
