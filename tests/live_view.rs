//! Issue 14, "Live view": `isopach run … --watch` serves the run's page on 127.0.0.1; headless
//! Chromium opens it and the DOM shows every site and the figures of summary.json. A
//! screenshot is kept in the test's temp folder (its path is printed). `.ci/run` installs
//! chromium when it is missing; without it this test fails and says why.

mod run_common;

use run_common::*;
use std::io::{BufRead, BufReader};
use std::path::Path;
use std::process::{Command, Stdio};

const CHROMIUM: &str = "/usr/bin/chromium";

/// Runs headless Chromium on `url` with `extra` arguments and its own profile in `dir`.
fn chromium(dir: &Path, url: &str, extra: &[&str]) -> std::process::Output {
    assert!(
        Path::new(CHROMIUM).exists(),
        "{CHROMIUM} is missing: install chromium (apt-get install chromium; .ci/run does)"
    );
    let profile = dir.join("chromium-profile");
    let mut cmd = Command::new("timeout");
    cmd.args(["60", CHROMIUM])
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--disable-dev-shm-usage",
        ])
        .arg(format!("--user-data-dir={}", profile.display()))
        .args(extra)
        .arg(url);
    cmd.output().expect("run chromium")
}

/// The text of the element with `id` in the dumped DOM.
fn by_id<'a>(dom: &'a str, id: &str) -> &'a str {
    let start = dom
        .find(&format!("id=\"{id}\">"))
        .unwrap_or_else(|| panic!("no #{id}"))
        + id.len()
        + 6;
    &dom[start..start + dom[start..].find('<').unwrap()]
}

#[test]
fn a_watched_run_shows_every_site_and_the_figures_of_its_summary() {
    let (dir, recipe, machine) = bench_dir("");
    std::fs::write(
        &recipe,
        format!("{RECIPE}\n[accept]\nspec_nm = [500, 700]\n"),
    )
    .unwrap();
    let runs = dir.path().join("runs");
    let mut args = run_args(&recipe, &machine, "LIVE1", &runs);
    args.push("--watch".into());
    let mut child = Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(&args)
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut err = BufReader::new(child.stderr.take().unwrap());
    let mut url = None;
    let mut log = String::new();
    // The address comes first; the run then ends and the page stays up.
    loop {
        let mut line = String::new();
        if err.read_line(&mut line).unwrap() == 0 {
            panic!("isopach ended before the run did:\n{log}");
        }
        log.push_str(&line);
        if let Some(u) = line.trim().strip_prefix("live view: ") {
            url = Some(u.to_string());
        }
        if line.contains("the live page stays at") {
            break;
        }
    }
    let url = url.expect("no address printed");
    assert!(url.starts_with("http://127.0.0.1:"), "{url}");
    let summary: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(only_run(&runs).join("summary.json")).unwrap(),
    )
    .unwrap();

    let out = chromium(
        dir.path(),
        &url,
        &["--dump-dom", "--virtual-time-budget=3000", "--timeout=8000"],
    );
    let dom = String::from_utf8_lossy(&out.stdout).to_string();
    let shot = dir.path().join("live-view.png");
    let s = chromium(
        dir.path(),
        &url,
        &[
            &format!("--screenshot={}", shot.display()),
            "--window-size=1200,760",
            "--virtual-time-budget=3000",
            "--timeout=8000",
        ],
    );
    let state: serde_json::Value = serde_json::from_str(
        http_get(&format!("{url}state"))
            .split("\r\n\r\n")
            .nth(1)
            .expect("an HTTP body"),
    )
    .unwrap();
    // The page is gone once the process ends: stop it (the run is over) before asserting.
    unsafe { libc::kill(child.id() as i32, libc::SIGTERM) };
    let status = child.wait().unwrap();
    assert!(
        dom.contains("data-finished=\"true\""),
        "the page did not get the finished run:\n{dom}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // Every site appears, each once, none still pending.
    for n in 1..=9 {
        let count = dom.matches(&format!("data-site=\"{n}\"")).count();
        assert_eq!(count, 1, "site {n} appears {count} times");
    }
    assert!(!dom.contains("site pending"));
    // The figures match summary.json.
    for (id, key) in [
        ("mean", "mean_nm"),
        ("std", "std_nm"),
        ("min", "min_nm"),
        ("max", "max_nm"),
    ] {
        let want = format!("{:.3}", summary[key].as_f64().unwrap());
        assert_eq!(by_id(&dom, id), want, "#{id}");
    }
    assert_eq!(
        by_id(&dom, "valid"),
        format!("{} of 9", summary["sites_valid"])
    );
    assert_eq!(by_id(&dom, "progress"), "9 of 9 results");
    assert_last_spectrum(&state, &only_run(&runs), &dom);
    println!("live view screenshot: {}", shot.display());
    assert!(
        s.status.success() && shot.is_file(),
        "no screenshot: {}",
        String::from_utf8_lossy(&s.stderr)
    );
    // Keep the screenshot for a look after the test.
    let keep = std::env::temp_dir().join("isopach-live-view.png");
    std::fs::copy(&shot, &keep).unwrap();
    println!("copied to {}", keep.display());
    assert_eq!(status.code(), Some(0), "{log}");
}

#[test]
fn a_live_view_on_another_interface_is_refused_before_anything_starts() {
    let (dir, recipe, machine) = bench_dir("");
    let runs = dir.path().join("runs");
    let mut args = run_args(&recipe, &machine, "LIVE2", &runs);
    args.extend(["--watch", "--listen", "0.0.0.0:0"].map(String::from));
    let out = Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(&args)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("loopback"));
    assert!(!runs.exists() || std::fs::read_dir(&runs).unwrap().next().is_none());
}

/// One HTTP/1.0 GET on the loopback interface; the whole response.
fn http_get(url: &str) -> String {
    use std::io::{Read, Write};
    let rest = url.trim_start_matches("http://");
    let (host, path) = rest.split_at(rest.find('/').unwrap());
    let mut s = std::net::TcpStream::connect(host).unwrap();
    write!(s, "GET {path} HTTP/1.0\r\nHost: {host}\r\n\r\n").unwrap();
    let mut text = String::new();
    s.read_to_string(&mut text).unwrap();
    text
}

/// The page's last spectrum is the newest fitted attempt of the journal, inside the recipe's
/// window, and its model is the fit of that spectrum: the residual is far below the
/// fringes' swing (a valid fit on the simulated bench), and the page draws both.
fn assert_last_spectrum(state: &serde_json::Value, run: &Path, dom: &str) {
    use isopach::run::events::Event;
    let newest = events(run)
        .into_iter()
        .rev()
        .find_map(|e| match e {
            Event::SiteFitted { site, fit, .. } => Some((site, fit)),
            _ => None,
        })
        .expect("a fitted site");
    let sp = &state["last_spectrum"];
    assert_eq!(sp["site"].as_u64(), Some(newest.0 as u64), "{sp}");
    let column = |k: &str| -> Vec<f64> {
        sp[k]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect()
    };
    let (wl, measured, model) = (column("wavelength_nm"), column("measured"), column("model"));
    assert!(wl.len() > 100 && wl.len() <= 400, "{} points", wl.len());
    assert_eq!((measured.len(), model.len()), (wl.len(), wl.len()));
    assert!(
        wl.iter().all(|l| (420.0..=980.0).contains(l)),
        "outside the window"
    );
    let swing = measured.iter().copied().fold(f64::MIN, f64::max)
        - measured.iter().copied().fold(f64::MAX, f64::min);
    let rms = (measured
        .iter()
        .zip(&model)
        .map(|(a, b)| (a - b).powi(2))
        .sum::<f64>()
        / wl.len() as f64)
        .sqrt();
    assert!(swing > 0.1, "no fringes: swing {swing}");
    assert!(
        rms < 0.05 * swing,
        "model does not follow the spectrum: rms {rms}, swing {swing}"
    );
    let t = sp["thickness_nm"].as_f64().unwrap();
    assert!((t - newest.1.layers[0].thickness_nm).abs() < 1e-9);
    assert!(
        dom.contains(&format!("data-spectrum-site=\"{}\"", newest.0)),
        "no spectrum plot"
    );
    assert!(dom.contains("id=\"spectrum-model\""));
    assert!(by_id(dom, "spectrum-caption").starts_with(&format!("site {}:", newest.0)));
}
