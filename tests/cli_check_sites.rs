//! `isopach check` and `isopach sites` run as a user would: the built binary in a temp dir.

use std::path::Path;
use std::process::{Command, Output};

fn isopach(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(args)
        .output()
        .expect("run isopach")
}

fn recipe(name: &str) -> String {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("recipes")
        .join(name)
        .display()
        .to_string()
}

fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

#[test]
fn check_accepts_every_shipped_recipe_with_a_summary() {
    for entry in std::fs::read_dir(Path::new(env!("CARGO_MANIFEST_DIR")).join("recipes")).unwrap() {
        let path = entry.unwrap().path();
        let o = isopach(&["check", path.to_str().unwrap()]);
        assert_eq!(
            o.status.code(),
            Some(0),
            "{}: {}",
            path.display(),
            String::from_utf8_lossy(&o.stderr)
        );
        let out = stdout(&o);
        assert_eq!(out.lines().count(), 1, "{out}");
        assert!(out.starts_with("ok: ") && out.contains(" sites; "), "{out}");
    }
    let out = stdout(&isopach(&["check", &recipe("oxide-150-49.toml")]));
    assert!(out.contains("150 mm wafer, flat at 270°, 5 mm edge exclusion; standard 49, 49 sites; air / sio2 1000 nm / si"), "{out}");
}

#[test]
fn check_lists_every_error_with_file_line_col_and_exits_2() {
    let dir = tempfile::tempdir().unwrap();
    let bad = dir.path().join("bad.toml");
    std::fs::write(
        &bad,
        "name = \"bad\"\n[wafer]\ndiameter_mm = 150\nedge_exclusion_mm = 80\norientation = \"none\"\n[pattern]\nkind = \"custom\"\nsites_mm = [[0, 0], [90, 0]]\n[film]\nambient = \"air\"\nsubstrate = \"si\"\nlayers = [ { material = \"unobtainium\", nominal_nm = 100, min_nm = 10, max_nm = 500 } ]\nwavelength_nm = [900, 400]\n",
    )
    .unwrap();
    let o = isopach(&["check", bad.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    let out = stdout(&o);
    let lines: Vec<&str> = out.lines().collect();
    let file = bad.display().to_string();
    assert_eq!(lines.len(), 4, "{out}");
    assert!(
        lines[0].starts_with(&format!("{file}:4:21: wafer.edge_exclusion_mm:")),
        "{out}"
    );
    assert!(lines[1].starts_with(&format!("{file}:8:21: pattern.sites_mm[1]: site 2 at (90, 0) mm lies 15.00 mm outside the wafer")), "{out}");
    assert!(
        lines[2].starts_with(&format!(
            "{file}:12:25: film.layers[0].material: unknown material"
        )),
        "{out}"
    );
    assert!(
        lines[3].starts_with(&format!("{file}:13:17: film.wavelength_nm:")),
        "{out}"
    );
}

#[test]
fn check_reports_a_missing_file_and_exits_2() {
    let o = isopach(&["check", "/nonexistent/recipe.toml"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(
        String::from_utf8_lossy(&o.stderr).contains("cannot read recipe /nonexistent/recipe.toml")
    );
}

#[test]
fn sites_prints_the_table_and_csv() {
    let o = isopach(&["sites", &recipe("oxide-150-49.toml")]);
    assert_eq!(o.status.code(), Some(0));
    let out = stdout(&o);
    let lines: Vec<&str> = out.lines().collect();
    assert_eq!(
        lines[0].split_whitespace().collect::<Vec<_>>(),
        ["site", "x_mm", "y_mm", "r_mm"]
    );
    assert_eq!(
        lines[1].split_whitespace().collect::<Vec<_>>(),
        ["1", "0.000", "0.000", "0.000"]
    );
    // Site 2 starts ring 1 (8 sites) at 0°, radius 70/3 mm on a 150 mm wafer with 5 mm exclusion.
    assert_eq!(
        lines[2].split_whitespace().collect::<Vec<_>>(),
        ["2", "23.333", "0.000", "23.333"]
    );
    assert_eq!(*lines.last().unwrap(), "49 sites");

    let csv = stdout(&isopach(&["sites", &recipe("oxide-150-49.toml"), "--csv"]));
    let rows: Vec<&str> = csv.lines().collect();
    assert_eq!(rows[0], "site,x_mm,y_mm,r_mm");
    assert_eq!(rows.len(), 50);
    // Site 49 is the last of the 24-site outer ring (r = 70 mm) at 345°.
    let a = 345f64.to_radians();
    let f: Vec<f64> = rows[49].split(',').map(|v| v.parse().unwrap()).collect();
    assert_eq!(f[0], 49.0);
    assert!((f[1] - 70.0 * a.cos()).abs() < 1e-8, "{}", rows[49]);
    assert!((f[2] - 70.0 * a.sin()).abs() < 1e-8, "{}", rows[49]);
    assert!((f[3] - 70.0).abs() < 1e-8, "{}", rows[49]);
}

#[test]
fn sites_svg_parses_and_has_every_site() {
    let dir = tempfile::tempdir().unwrap();
    let svg = dir.path().join("plan.svg");
    let o = isopach(&[
        "sites",
        &recipe("resist-100-grid.toml"),
        "--out",
        svg.to_str().unwrap(),
    ]);
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    let n_sites = stdout(&o)
        .lines()
        .filter(|l| l.split_whitespace().count() == 4)
        .count()
        - 1;
    let text = std::fs::read_to_string(&svg).unwrap();
    let doc = roxmltree::Document::parse(&text).expect("SVG parses as XML");
    let circles: Vec<_> = doc
        .descendants()
        .filter(|n| n.attribute("class") == Some("site"))
        .collect();
    assert_eq!(circles.len(), n_sites);
    let mut numbers: Vec<usize> = circles
        .iter()
        .map(|c| c.attribute("data-site").unwrap().parse().unwrap())
        .collect();
    numbers.sort();
    assert_eq!(numbers, (1..=n_sites).collect::<Vec<_>>());
    assert!(doc
        .descendants()
        .any(|n| n.attribute("class") == Some("outline")));
    assert!(doc
        .descendants()
        .any(|n| n.attribute("class") == Some("edge-exclusion")));
}
