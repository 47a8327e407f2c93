//! Issue 14, "Run report": `isopach report RUN` writes one self-contained HTML page or a
//! one-page PDF with the verdict, the figures, the facts and the site table. The PDF is
//! checked with poppler's `pdftoppm` (it renders) and `pdftotext` (its text holds the verdict
//! and the statistics); `.ci/run` installs poppler-utils when it is missing.

mod run_common;

use run_common::*;
use std::path::Path;
use std::process::Command;

/// A finished simulated run of the 9-site recipe with a spec window and run limits of which
/// the 1σ one cannot hold; returns (temp dir, run folder, summary.json).
fn failed_run() -> (tempfile::TempDir, std::path::PathBuf, serde_json::Value) {
    let (dir, recipe, machine) = bench_dir("");
    std::fs::write(
        &recipe,
        format!(
            "{RECIPE}\n[accept]\nspec_nm = [500, 700]\nmean_nm = [500, 700]\nmax_std_nm = 0.001\n"
        ),
    )
    .unwrap();
    let runs = dir.path().join("runs");
    let mut args = run_args(&recipe, &machine, "W07", &runs);
    args.extend(["--lot", "L2612", "--operator", "MK"].map(String::from));
    let out = Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(&args)
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(3),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let run = only_run(&runs);
    let summary =
        serde_json::from_str(&std::fs::read_to_string(run.join("summary.json")).unwrap()).unwrap();
    (dir, run, summary)
}

/// Runs a poppler tool, failing with the reason when it is not installed.
fn poppler(tool: &str, args: &[&str]) -> std::process::Output {
    match Command::new(tool).args(args).output() {
        Ok(o) => o,
        Err(e) => panic!(
            "{tool} cannot be run ({e}): install poppler-utils (apt-get install poppler-utils; .ci/run does)"
        ),
    }
}

fn squash(s: &str) -> String {
    s.split_whitespace().collect::<Vec<_>>().join(" ")
}

#[test]
fn the_pdf_renders_and_its_text_holds_the_verdict_and_the_statistics() {
    let (dir, run, summary) = failed_run();
    let pdf = dir.path().join("W07.pdf");
    let out = isopach(&[
        "report",
        run.to_str().unwrap(),
        "--out",
        pdf.to_str().unwrap(),
    ]);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(
        out.status.code(),
        Some(3),
        "{stdout}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(stdout.contains("verdict FAIL: 1σ"), "{stdout}");
    assert!(std::fs::read(&pdf).unwrap().starts_with(b"%PDF-"));
    // pdftoppm renders the page.
    let prefix = dir.path().join("page");
    let r = poppler(
        "pdftoppm",
        &[
            "-png",
            "-r",
            "40",
            pdf.to_str().unwrap(),
            prefix.to_str().unwrap(),
        ],
    );
    assert!(r.status.success(), "{}", String::from_utf8_lossy(&r.stderr));
    let png = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().path())
        .find(|p| p.file_name().unwrap().to_string_lossy().starts_with("page"))
        .expect("pdftoppm wrote no page");
    let bytes = std::fs::read(&png).unwrap();
    assert!(bytes.starts_with(b"\x89PNG"));
    // One page only, and not blank: a rendered page of text and colour is far above the size
    // of an empty PNG of the same size.
    assert!(bytes.len() > 20_000, "{} bytes", bytes.len());
    // Its text holds the verdict, the figures and the facts.
    let t = poppler("pdftotext", &["-layout", pdf.to_str().unwrap(), "-"]);
    assert!(t.status.success());
    let text = squash(&String::from_utf8_lossy(&t.stdout));
    let std = summary["std_nm"].as_f64().unwrap();
    let mean = summary["mean_nm"].as_f64().unwrap();
    for want in [
        "FAIL".to_string(),
        format!("1σ {std:.2} nm > 0.001 nm"),
        format!("mean {mean:.2} nm in [500, 700] nm"),
        "L2612".into(),
        "MK".into(),
        "W07".into(),
        "rel-9".into(),
        "built-in simulated bench".into(),
    ] {
        assert!(
            text.contains(&want),
            "{want:?} not in the PDF text:\n{text}"
        );
    }
}

#[test]
fn the_html_page_is_self_contained_and_numbers_every_site() {
    let (_dir, run, summary) = failed_run();
    let out = isopach(&["report", run.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(3));
    let html = std::fs::read_to_string(run.join("report.html")).unwrap();
    assert!(html.starts_with("<!DOCTYPE html>"));
    // Nothing is fetched: no script, no link, no URL but the SVG namespace.
    assert!(!html.contains("<script") && !html.contains("<link"));
    assert_eq!(
        html.matches("http").count(),
        html.matches("http://www.w3.org/2000/svg").count()
    );
    let svg = &html[html.find("<svg").unwrap()..html.find("</svg>").unwrap() + 6];
    let doc = roxmltree::Document::parse(svg).unwrap();
    let texts = |class: &str| -> Vec<String> {
        doc.descendants()
            .filter(|n| n.attribute("class") == Some(class))
            .map(|n| n.text().unwrap_or("").to_string())
            .collect()
    };
    // Every site is numbered on the map and has a table row (8 cells each).
    let mut numbers = texts("site-number");
    numbers.sort_by_key(|n| n.parse::<usize>().unwrap());
    assert_eq!(numbers, (1..=9).map(|n| n.to_string()).collect::<Vec<_>>());
    assert_eq!(texts("site-row").len(), 9 * 8);
    assert_eq!(texts("verdict"), ["FAIL"]);
    assert!(texts("fact").contains(&"L2612".to_string()));
    // The flag column spells flags as sites.csv does.
    let csv = std::fs::read_to_string(run.join("sites.csv")).unwrap();
    let rows = texts("site-row");
    for (k, line) in csv.lines().skip(1).enumerate() {
        let flag = line.rsplit(',').next().unwrap();
        assert_eq!(rows[k * 8 + 7], flag, "site row {k}");
    }
    assert_eq!(summary["verdict"]["pass"], false);
}

#[test]
fn a_report_needs_a_run_folder_and_an_html_or_pdf_name() {
    let (dir, run, _) = failed_run();
    let bad = isopach(&["report", run.to_str().unwrap(), "--out", "x.docx"]);
    assert_eq!(bad.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&bad.stderr).contains(".html or .pdf"));
    let none = isopach(&["report", dir.path().join("nope").to_str().unwrap()]);
    assert_eq!(
        none.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&none.stderr)
    );
    assert!(!Path::new("x.docx").exists());
}
