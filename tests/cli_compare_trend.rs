//! `isopach compare` and `isopach trend` on run folders built in a temp dir from analytic
//! thickness fields; figures checked against values computed independently here.

use isopach::map::sites_table::{self, SiteRow};
use isopach::recipe::{self, pattern};
use isopach::run::folder::{RunMeta, RunToml};
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn isopach(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(args)
        .output()
        .expect("run isopach")
}

fn json(o: &Output) -> Value {
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    serde_json::from_slice(&o.stdout).expect("JSON output")
}

/// A run folder whose sites follow `field(x, y)`; `recipe_file` names a shipped recipe.
fn make_run(
    dir: &Path,
    id: &str,
    recipe_file: &str,
    started: &str,
    field: impl Fn(f64, f64) -> f64,
) -> PathBuf {
    let loaded = recipe::load(
        &Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("recipes")
            .join(recipe_file),
    )
    .unwrap();
    let sites = pattern::sites(&loaded.recipe.pattern, &loaded.wafer());
    let rows: Vec<SiteRow> = sites
        .iter()
        .map(|s| SiteRow {
            site: s.number,
            x_mm: s.x_mm,
            y_mm: s.y_mm,
            thickness_nm: vec![field(s.x_mm, s.y_mm)],
            sigma_nm: vec![0.1],
            gof: 0.999,
            flag: "ok".into(),
        })
        .collect();
    let folder = dir.join(id);
    std::fs::create_dir_all(&folder).unwrap();
    let meta = RunToml {
        run: RunMeta {
            id: id.into(),
            wafer: id.into(),
            lot: "L1".into(),
            operator: String::new(),
            started: started.into(),
            tool_version: "test".into(),
            recipe_path: recipe_file.into(),
            seed: 0,
            run_seed: None,
        },
        recipe: loaded.recipe,
        machine: None,
    };
    std::fs::write(folder.join("run.toml"), toml::to_string(&meta).unwrap()).unwrap();
    std::fs::write(folder.join("sites.csv"), sites_table::write(&rows)).unwrap();
    folder
}

/// A thickness field over the wafer, nm at (x, y) mm.
type Field = fn(f64, f64) -> f64;

/// One run of the 49-site oxide recipe per (wafer id, field), started an hour apart from
/// 08:00 on 2026-12-01.
fn oxide_runs(dir: &Path, fields: &[(&str, Field)]) -> Vec<PathBuf> {
    fields
        .iter()
        .enumerate()
        .map(|(k, (id, f))| {
            let started = format!("2026-12-01T{:02}:00:00+00:00", 8 + k);
            make_run(dir, id, "oxide-150-49.toml", &started, f)
        })
        .collect()
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

fn sample_std(v: &[f64]) -> f64 {
    let m = mean(v);
    (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64).sqrt()
}

#[test]
fn compare_gives_per_wafer_and_wafer_to_wafer_figures() {
    let dir = tempfile::tempdir().unwrap();
    let runs = oxide_runs(
        dir.path(),
        &[
            ("W01", |x, _| 1000.0 + 0.1 * x),
            ("W02", |_, y| 1010.0 + 0.05 * y),
            ("W03", |x, y| 995.0 + 0.01 * x * y),
        ],
    );
    let (a, b, c) = (&runs[0], &runs[1], &runs[2]);
    let out = json(&isopach(&[
        "compare",
        a.to_str().unwrap(),
        b.to_str().unwrap(),
        c.to_str().unwrap(),
        "--json",
    ]));
    let wafers = out["wafers"].as_array().unwrap();
    assert_eq!(wafers.len(), 3);
    assert_eq!(wafers[1]["wafer"], "W02");
    // Independent figures from the same analytic fields at the plan's sites.
    let loaded =
        recipe::load(&Path::new(env!("CARGO_MANIFEST_DIR")).join("recipes/oxide-150-49.toml"))
            .unwrap();
    let sites = loaded.sites();
    let va: Vec<f64> = sites.iter().map(|s| 1000.0 + 0.1 * s.x_mm).collect();
    let vb: Vec<f64> = sites.iter().map(|s| 1010.0 + 0.05 * s.y_mm).collect();
    let vc: Vec<f64> = sites
        .iter()
        .map(|s| 995.0 + 0.01 * s.x_mm * s.y_mm)
        .collect();
    let means = [mean(&va), mean(&vb), mean(&vc)];
    for (w, v) in wafers.iter().zip([&va, &vb, &vc]) {
        assert!((w["mean_nm"].as_f64().unwrap() - mean(v)).abs() < 1e-3); // sites.csv keeps 3 decimals
        assert!((w["std_nm"].as_f64().unwrap() - sample_std(v)).abs() < 1e-3); // sites.csv keeps 3 decimals
        assert_eq!(w["sites_valid"], 49);
    }
    let w2w = &out["wafer_to_wafer"];
    assert!((w2w["mean_nm"].as_f64().unwrap() - mean(&means)).abs() < 1e-3); // sites.csv keeps 3 decimals
    assert!(
        (w2w["nu_pct"].as_f64().unwrap() - 100.0 * sample_std(&means) / mean(&means)).abs() < 1e-3
    ); // sites.csv keeps 3 decimals
}

#[test]
fn delta_with_itself_is_zero_and_rate_is_delta_over_time() {
    let dir = tempfile::tempdir().unwrap();
    let a = make_run(
        dir.path(),
        "PRE",
        "oxide-150-49.toml",
        "2026-12-01T08:00:00+00:00",
        |x, y| 1000.0 + 0.1 * x - 0.02 * y,
    );
    let b = make_run(
        dir.path(),
        "POST",
        "oxide-150-49.toml",
        "2026-12-01T09:00:00+00:00",
        |x, y| 700.0 + 0.05 * x - 0.02 * y,
    );
    let (a, b) = (a.to_str().unwrap(), b.to_str().unwrap());
    let d = json(&isopach(&["compare", a, a, "--delta", "--json"]));
    assert_eq!(d["delta"]["mean_nm"].as_f64().unwrap(), 0.0);
    assert_eq!(d["delta"]["range_nm"].as_f64().unwrap(), 0.0);
    assert_eq!(d["delta"]["basis"], "site-by-site");
    // B − A = −300 − 0.05 x; over 12.5 min that is (−300 − 0.05 x)/12.5 nm/min per site.
    let loaded =
        recipe::load(&Path::new(env!("CARGO_MANIFEST_DIR")).join("recipes/oxide-150-49.toml"))
            .unwrap();
    let want: Vec<f64> = loaded
        .sites()
        .iter()
        .map(|s| (-300.0 - 0.05 * s.x_mm) / 12.5)
        .collect();
    let dir_out = dir.path().join("rate.svg");
    let r = json(&isopach(&[
        "compare",
        a,
        b,
        "--delta",
        "--per-min",
        "12.5",
        "--json",
        "--out",
        dir_out.to_str().unwrap(),
    ]));
    assert!((r["delta"]["mean_nm"].as_f64().unwrap() - mean(&want)).abs() < 1e-3); // sites.csv keeps 3 decimals
    assert!((r["delta"]["std_nm"].as_f64().unwrap() - sample_std(&want)).abs() < 1e-3); // sites.csv keeps 3 decimals
    assert_eq!(r["delta"]["unit"], "nm/min");
    let svg = std::fs::read_to_string(&dir_out).unwrap();
    roxmltree::Document::parse(&svg).expect("rate map SVG parses");
    assert!(svg.contains("nm/min"));
}

#[test]
fn delta_across_unmatched_plans_goes_through_interpolation() {
    let dir = tempfile::tempdir().unwrap();
    // A: 49-site polar plan on a 150 mm wafer; B: the 5 mm grid of a 100 mm recipe sits inside
    // A's usable disc. Both carry the same smooth dome, B shifted by +20 nm.
    let dome = |x: f64, y: f64| 1000.0 - 0.01 * (x * x + y * y) + 0.2 * x;
    let a = make_run(
        dir.path(),
        "A",
        "oxide-150-49.toml",
        "2026-12-01T08:00:00+00:00",
        dome,
    );
    let b = make_run(
        dir.path(),
        "B",
        "resist-100-grid.toml",
        "2026-12-01T09:00:00+00:00",
        move |x, y| dome(x, y) + 20.0,
    );
    let d = json(&isopach(&[
        "compare",
        a.to_str().unwrap(),
        b.to_str().unwrap(),
        "--delta",
        "--json",
    ]));
    assert_eq!(d["delta"]["basis"], "interpolated");
    let m = d["delta"]["mean_nm"].as_f64().unwrap();
    let s = d["delta"]["std_nm"].as_f64().unwrap();
    // The quadratic dome is reproduced by the interpolant to well under 1 nm between sites
    // spaced 23 mm apart (curvature 0.02 nm/mm² → error bound ≈ 0.02·23²/8 ≈ 1.3 nm worst case).
    assert!((m - 20.0).abs() < 0.5, "mean delta {m}");
    assert!(s < 0.6, "σ of delta {s}");
}

#[test]
fn trend_rebuilds_the_history_and_flags_an_outlier() {
    let dir = tempfile::tempdir().unwrap();
    let runs = dir.path().join("runs");
    let offsets = [0.0, 1.0, -0.5, 0.8, -1.0, 0.3, 0.0, -0.6, 0.4, 25.0];
    for (i, o) in offsets.iter().enumerate() {
        make_run(
            &runs,
            &format!("W{i:02}"),
            "oxide-150-49.toml",
            &format!("2026-12-01T{:02}:00:00+00:00", i + 1),
            move |x, _| 1000.0 + o + 0.01 * x,
        );
    }
    let out = json(&isopach(&[
        "trend",
        "--runs",
        runs.to_str().unwrap(),
        "--rebuild",
        "--recipe",
        "oxide-150-49",
        "--json",
    ]));
    let rows = out["runs"].as_array().unwrap();
    assert_eq!(rows.len(), 10);
    assert_eq!(rows[0]["wafer"], "W00");
    // Independent I-MR limits over the ten means (mean of the field = 1000 + offset + 0.01·x̄).
    let means: Vec<f64> = rows
        .iter()
        .map(|r| r["mean_nm"].as_f64().unwrap())
        .collect();
    let center = mean(&means);
    let mr: Vec<f64> = means.windows(2).map(|w| (w[1] - w[0]).abs()).collect();
    let ucl = center + 3.0 * mean(&mr) / 1.128;
    assert!((out["mean_limits"]["ucl"].as_f64().unwrap() - ucl).abs() < 1e-3); // sites.csv keeps 3 decimals
    assert!(means[9] > ucl, "the last wafer is beyond the limit");
    assert!(rows[9]["mean_signals"]
        .as_array()
        .unwrap()
        .iter()
        .any(|s| s == "above-ucl"));
    assert!(rows[..9]
        .iter()
        .all(|r| r["mean_signals"].as_array().unwrap().is_empty()));
    let chart = dir.path().join("trend.png");
    let o = isopach(&[
        "trend",
        "--runs",
        runs.to_str().unwrap(),
        "--out",
        chart.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(&std::fs::read(&chart).unwrap()[..8], b"\x89PNG\r\n\x1a\n");
}

#[test]
fn history_survives_a_kill_mid_rebuild() {
    let dir = tempfile::tempdir().unwrap();
    let runs = dir.path().join("runs");
    for i in 0..60 {
        make_run(
            &runs,
            &format!("K{i:03}"),
            "resist-100-grid.toml",
            &format!("2026-12-01T00:{:02}:00+00:00", i % 60),
            move |x, y| 1400.0 + i as f64 + 0.01 * (x + y),
        );
    }
    let r = runs.to_str().unwrap();
    assert!(isopach(&["trend", "--runs", r, "--rebuild", "--json"])
        .status
        .success());
    let before = json(&isopach(&["trend", "--runs", r, "--json"]));
    assert_eq!(before["runs"].as_array().unwrap().len(), 60);
    for delay_ms in [5u64, 20, 40, 80] {
        let mut child = Command::new(env!("CARGO_BIN_EXE_isopach"))
            .args(["trend", "--runs", r, "--rebuild", "--json"])
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(std::time::Duration::from_millis(delay_ms));
        let _ = child.kill();
        let _ = child.wait();
        // Whatever the moment of the kill, the history holds every run, whole.
        let after = json(&isopach(&["trend", "--runs", r, "--json"]));
        assert_eq!(
            after["runs"], before["runs"],
            "after a kill at {delay_ms} ms"
        );
    }
}

#[test]
fn sheet_puts_every_map_on_one_colour_scale() {
    let dir = tempfile::tempdir().unwrap();
    let runs = oxide_runs(
        dir.path(),
        &[
            ("S1", |x, _| 1000.0 + 0.1 * x),
            ("S2", |x, _| 1030.0 + 0.1 * x),
        ],
    );
    let (a, b) = (&runs[0], &runs[1]);
    let sheet = dir.path().join("sheet.svg");
    let o = isopach(&[
        "compare",
        a.to_str().unwrap(),
        b.to_str().unwrap(),
        "--sheet",
        sheet.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = std::fs::read_to_string(&sheet).unwrap();
    let doc = roxmltree::Document::parse(&text).expect("sheet SVG parses");
    let outlines = doc
        .descendants()
        .filter(|n| n.attribute("class").is_some_and(|c| c.contains("outline")))
        .count();
    assert!(outlines >= 2, "one wafer outline per map, got {outlines}");
    // S1 spans about 993–1007 nm and S2 1023–1037 nm: only on a common scale does each colour
    // bar carry both the 1000 and the 1030 tick.
    assert!(text.contains("S1") && text.contains("S2"));
    let tick = |t: &str| text.matches(&format!(">{t}<")).count();
    assert!(tick("1000") >= 2 && tick("1030") >= 2, "common scale ticks");
}

#[test]
fn compare_table_counts_sites_in_the_recipes_spec_window() {
    let dir = tempfile::tempdir().unwrap();
    // The second is tilted so that its +x side leaves the recipe's 950–1050 nm window.
    let runs = oxide_runs(
        dir.path(),
        &[
            ("W11", |x, _| 1000.0 + 0.1 * x),
            ("W12", |x, _| 1040.0 + 0.2 * x),
        ],
    );
    let (a, b) = (&runs[0], &runs[1]);
    let loaded =
        recipe::load(&Path::new(env!("CARGO_MANIFEST_DIR")).join("recipes/oxide-150-49.toml"))
            .unwrap();
    let inside = loaded
        .sites()
        .iter()
        .filter(|s| (1040.0 + 0.2 * s.x_mm) <= 1050.0)
        .count();
    assert!(inside > 20 && inside < 49, "{inside}");
    let o = isopach(&["compare", a.to_str().unwrap(), b.to_str().unwrap()]);
    assert!(o.status.success());
    let table = String::from_utf8_lossy(&o.stdout);
    let head = table.lines().next().unwrap();
    assert!(head.ends_with("in_spec"), "{table}");
    let row = |w: &str| {
        table
            .lines()
            .find(|l| l.starts_with(w))
            .unwrap()
            .to_string()
    };
    assert!(row("W11").ends_with(" 49/49"), "{table}");
    assert!(row("W12").ends_with(&format!(" {inside}/49")), "{table}");
    let out = json(&isopach(&[
        "compare",
        a.to_str().unwrap(),
        b.to_str().unwrap(),
        "--json",
    ]));
    assert_eq!(
        out["wafers"][1]["spec"]["sites_out"]
            .as_array()
            .unwrap()
            .len(),
        49 - inside
    );
}

#[test]
fn compare_warns_when_wafers_are_not_like_for_like() {
    let dir = tempfile::tempdir().unwrap();
    let flat: Field = |_, _| 1000.0;
    let a = make_run(
        dir.path(),
        "OX1",
        "oxide-150-49.toml",
        "2026-12-01T08:00:00+00:00",
        flat,
    );
    let b = make_run(
        dir.path(),
        "OX2",
        "oxide-150-49.toml",
        "2026-12-01T09:00:00+00:00",
        flat,
    );
    // Another recipe, stack, diameter and site plan: the 100 mm resist grid.
    let c = make_run(
        dir.path(),
        "RS1",
        "resist-100-grid.toml",
        "2026-12-01T10:00:00+00:00",
        flat,
    );
    let (a, b, c) = (
        a.to_str().unwrap(),
        b.to_str().unwrap(),
        c.to_str().unwrap(),
    );
    let same = isopach(&["compare", a, b]);
    assert!(same.status.success());
    assert!(!String::from_utf8_lossy(&same.stderr).contains("warning"));
    let mixed = isopach(&["compare", a, b, c]);
    assert!(mixed.status.success(), "still compared");
    let err = String::from_utf8_lossy(&mixed.stderr);
    for said in [
        "RS1 (RS1) was measured with recipe resist-100-grid, OX1 (OX1) with recipe oxide-150-49",
        "RS1 (RS1) is a 100 mm wafer, OX1 (OX1) a 150 mm wafer",
        "has the stack",
        "another site plan",
    ] {
        assert!(err.contains(said), "missing {said:?} in:\n{err}");
    }
    let j = json(&isopach(&["compare", a, b, c, "--json"]));
    assert_eq!(
        j["warnings"].as_array().unwrap().len(),
        4,
        "{}",
        j["warnings"]
    );
}

#[test]
fn compare_and_trend_export_csv_for_a_spreadsheet() {
    let dir = tempfile::tempdir().unwrap();
    let runs_dir = dir.path().join("runs");
    let runs = oxide_runs(
        &runs_dir,
        &[("W01", |x, _| 1000.0 + 0.1 * x), ("W02", |_, _| 1010.0)],
    );
    let o = isopach(&[
        "compare",
        runs[0].to_str().unwrap(),
        runs[1].to_str().unwrap(),
        "--csv",
    ]);
    assert!(o.status.success());
    let text = String::from_utf8(o.stdout).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 3, "{text}");
    let header: Vec<&str> = lines[0].split(',').collect();
    let w2: Vec<&str> = lines[2].split(',').collect();
    let at = |name: &str| header.iter().position(|h| *h == name).unwrap();
    assert_eq!(w2[at("wafer")], "W02");
    assert_eq!(w2[at("mean_nm")].parse::<f64>().unwrap(), 1010.0);
    // One flat wafer has σ 0 and its figures exist; none is NaN anywhere.
    assert_eq!(w2[at("std_nm")].parse::<f64>().unwrap(), 0.0);
    assert_eq!(w2[at("sites_valid")], "49");
    assert!(!text.contains("NaN"));
    let t = isopach(&[
        "trend",
        "--runs",
        runs_dir.to_str().unwrap(),
        "--rebuild",
        "--csv",
    ]);
    assert!(t.status.success(), "{}", String::from_utf8_lossy(&t.stderr));
    let text = String::from_utf8(t.stdout).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 3, "{text}");
    assert!(
        lines[0].starts_with("started,bench,recipe,wafer,"),
        "{}",
        lines[0]
    );
    // The oxide recipe's spec window travels with each run.
    assert!(
        lines[1].contains(",oxide-150-49,W01,") && lines[1].contains(",950,1050,"),
        "{}",
        lines[1]
    );
}

#[test]
fn trend_charts_one_recipe_unless_told_and_shows_the_spec_window_and_dates() {
    let dir = tempfile::tempdir().unwrap();
    let runs = dir.path().join("runs");
    for (i, (recipe, level)) in [
        ("oxide-150-49.toml", 1000.0),
        ("resist-100-grid.toml", 1500.0),
        ("oxide-150-49.toml", 1001.0),
        ("resist-100-grid.toml", 1502.0),
        ("oxide-150-49.toml", 999.0),
    ]
    .into_iter()
    .enumerate()
    {
        make_run(
            &runs,
            &format!("M{i}"),
            recipe,
            &format!("2026-12-0{}T08:00:00+00:00", i + 1),
            move |_, _| level,
        );
    }
    let r = runs.to_str().unwrap();
    let o = isopach(&["trend", "--runs", r, "--rebuild", "--json"]);
    let err = String::from_utf8_lossy(&o.stderr).to_string();
    let out = json(&o);
    // The newest run is oxide: only the three oxide runs, and stderr says why.
    let rows = out["runs"].as_array().unwrap();
    assert_eq!(rows.len(), 3, "{out}");
    assert!(rows.iter().all(|r| r["recipe"] == "oxide-150-49"));
    assert!(err.contains("charting oxide-150-49"), "{err}");
    assert_eq!(rows[0]["spec_nm"], serde_json::json!([950.0, 1050.0]));
    // Limits over the oxide means only: the centre is their mean, nowhere near 1500.
    let centre = out["mean_limits"]["center"].as_f64().unwrap();
    assert!((centre - 1000.0).abs() < 1e-6, "centre {centre}");
    let all = json(&isopach(&["trend", "--runs", r, "--all-recipes", "--json"]));
    assert_eq!(all["runs"].as_array().unwrap().len(), 5);
    // The chart draws the spec window and labels runs with their dates.
    let chart = dir.path().join("trend.svg");
    assert!(
        isopach(&["trend", "--runs", r, "--out", chart.to_str().unwrap()])
            .status
            .success()
    );
    let svg = std::fs::read_to_string(&chart).unwrap();
    assert!(
        svg.contains("spec USL 1050") && svg.contains("spec LSL 950"),
        "no spec window"
    );
    assert!(svg.contains("M4 12-05"), "no run date label");
    let table = String::from_utf8(isopach(&["trend", "--runs", r]).stdout).unwrap();
    assert!(table.contains("spec window: 950 to 1050 nm"), "{table}");
}
