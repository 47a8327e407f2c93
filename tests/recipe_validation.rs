//! Every recipe validation error: its message and the line it is reported on.

use isopach::recipe::{self, Located, RecipeError};
use std::path::Path;

/// A valid base recipe; tests replace one line to break it.
const BASE: &str = r#"name = "t"
[wafer]
diameter_mm = 150
edge_exclusion_mm = 3
orientation = "flat"
[pattern]
kind = "polar"
rings = [8, 16]
[film]
ambient = "air"
substrate = "si"
layers = [ { material = "sio2", nominal_nm = 1000, min_nm = 100, max_nm = 3000 } ]
wavelength_nm = [420, 980]
"#;

fn problems(text: &str) -> Vec<Located> {
    match recipe::parse(text, Path::new("r.toml")) {
        Ok(_) => Vec::new(),
        Err(RecipeError::Invalid(p)) => p,
        Err(e) => panic!("unexpected error {e}"),
    }
}

/// Replaces the line starting with `key` and returns the single problem reported.
fn one(key: &str, line: &str) -> Located {
    let text: String = BASE
        .lines()
        .map(|l| if l.starts_with(key) { line } else { l })
        .collect::<Vec<_>>()
        .join("\n");
    let p = problems(&text);
    assert_eq!(p.len(), 1, "expected one problem for {line:?}, got {p:#?}");
    p.into_iter().next().unwrap()
}

fn line_of(key: &str) -> usize {
    BASE.lines().position(|l| l.starts_with(key)).unwrap() + 1
}

#[test]
fn base_recipe_is_valid() {
    assert!(problems(BASE).is_empty());
}

#[test]
fn diameter_outside_limits() {
    for d in ["20", "451"] {
        let p = one("diameter_mm", &format!("diameter_mm = {d}"));
        assert_eq!(p.line, line_of("diameter_mm"));
        assert!(p.message.contains("outside 25–450 mm"), "{}", p.message);
    }
}

#[test]
fn edge_exclusion_not_smaller_than_radius() {
    let p = one("edge_exclusion_mm", "edge_exclusion_mm = 75");
    assert_eq!((p.line, p.col), (4, 21));
    assert!(
        p.message.contains("smaller than the radius 75 mm"),
        "{}",
        p.message
    );
}

#[test]
fn empty_rings_and_zero_site_rings() {
    let p = one("rings", "rings = []");
    assert_eq!(p.line, line_of("rings"));
    assert!(p.message.contains("rings is empty"));
    let p = one("rings", "rings = [8, 0]");
    assert_eq!(p.line, line_of("rings"));
    assert!(p.message.contains("ring 2 has zero sites"), "{}", p.message);
}

#[test]
fn grid_pitch_zero_or_too_large() {
    let text = BASE.replace(
        "kind = \"polar\"\nrings = [8, 16]",
        "kind = \"grid\"\npitch_mm = 0",
    );
    let p = problems(&text);
    assert_eq!(p.len(), 1);
    assert_eq!(p[0].line, 8);
    assert!(p[0].message.contains("greater than zero"));
    // A 100 mm pitch offset by 50 mm puts every node at r ≥ 70.7 mm, outside r = 72 mm? No:
    // (±50, ±50) has r = 70.7 < 72, so use a 200 mm pitch offset (80, 0): nearest node r = 80.
    let text = BASE.replace(
        "kind = \"polar\"\nrings = [8, 16]",
        "kind = \"grid\"\npitch_mm = 200\noffset_mm = [80, 0]",
    );
    let p = problems(&text);
    assert_eq!(p.len(), 1, "{p:#?}");
    assert!(
        p[0].message.contains("puts no site inside"),
        "{}",
        p[0].message
    );
}

#[test]
fn custom_site_outside_names_site_and_distance() {
    let text = BASE.replace(
        "kind = \"polar\"\nrings = [8, 16]",
        "kind = \"custom\"\nsites_mm = [\n  [0, 0],\n  [74, 0],\n]",
    );
    let p = problems(&text);
    assert_eq!(p.len(), 1, "{p:#?}");
    assert_eq!(p[0].line, 10);
    // Usable radius 75 − 3 = 72 mm, so (74, 0) is 2 mm out.
    assert!(
        p[0].message
            .contains("site 2 at (74, 0) mm lies 2.00 mm outside"),
        "{}",
        p[0].message
    );
}

#[test]
fn custom_site_behind_the_flat() {
    // 150 mm flat at 270°: chord at y = −69.27 mm, usable up to y = −66.27 mm.
    let text = BASE.replace(
        "kind = \"polar\"\nrings = [8, 16]",
        "kind = \"custom\"\nsites_mm = [[0, -68]]",
    );
    let p = problems(&text);
    assert_eq!(p.len(), 1, "{p:#?}");
    assert!(
        p[0].message
            .contains("site 1 at (0, -68) mm lies 1.73 mm outside"),
        "{}",
        p[0].message
    );
}

#[test]
fn wavelength_window_reversed_or_outside() {
    let p = one("wavelength_nm", "wavelength_nm = [980, 420]");
    assert_eq!(p.line, line_of("wavelength_nm"));
    assert!(p.message.contains("reversed"));
    let p = one("wavelength_nm", "wavelength_nm = [150, 980]");
    assert!(p.message.contains("outside 200–2000 nm"), "{}", p.message);
}

#[test]
fn layer_bounds() {
    let p = one(
        "layers",
        r#"layers = [ { material = "sio2", nominal_nm = 1000, min_nm = 3000, max_nm = 100 } ]"#,
    );
    assert_eq!(p.line, line_of("layers"));
    assert!(
        p.message
            .contains("min_nm 3000 must be smaller than max_nm 100"),
        "{}",
        p.message
    );
    let p = one(
        "layers",
        r#"layers = [ { material = "sio2", nominal_nm = 5000, min_nm = 100, max_nm = 3000 } ]"#,
    );
    assert!(
        p.message.contains("nominal_nm 5000 is outside"),
        "{}",
        p.message
    );
}

#[test]
fn unknown_material_suggests_nearest() {
    let p = one(
        "layers",
        r#"layers = [ { material = "si02", nominal_nm = 1000, min_nm = 100, max_nm = 3000 } ]"#,
    );
    assert_eq!((p.line, p.col), (12, 25));
    assert!(
        p.message
            .contains("unknown material \"si02\"; did you mean \"sio2\"?"),
        "{}",
        p.message
    );
    let p = one("substrate", r#"substrate = "silicon""#);
    assert!(
        p.message.contains("unknown material \"silicon\""),
        "{}",
        p.message
    );
}

fn with_material(block: &str) -> Vec<Located> {
    let text = BASE.replace("material = \"sio2\"", "material = \"m\"") + block;
    problems(&text)
}

#[test]
fn sellmeier_pole_inside_window() {
    // c = 0.36 µm² puts a pole at 600 nm, inside 420–980 nm.
    let p = with_material("[materials.m]\nmodel = \"sellmeier\"\nb = [1.0]\nc = [0.36]\n");
    assert_eq!(p.len(), 1, "{p:#?}");
    assert_eq!(p[0].line, 17);
    assert!(
        p[0].message.contains("pole at 600.0 nm"),
        "{}",
        p[0].message
    );
}

#[test]
fn cauchy_n_below_one_and_negative_k() {
    let p = with_material("[materials.m]\nmodel = \"cauchy\"\na = 0.9\nb = 0.001\n");
    assert_eq!(p.len(), 1, "{p:#?}");
    assert_eq!(p[0].line, 16);
    assert!(p[0].message.contains("(< 1)"), "{}", p[0].message);
    let p = with_material("[materials.m]\nmodel = \"constant\"\nn = 1.5\nk = -0.1\n");
    assert_eq!(p.len(), 1, "{p:#?}");
    assert_eq!(p[0].line, 17);
    assert!(
        p[0].message.contains("k = -0.1 is negative"),
        "{}",
        p[0].message
    );
}

#[test]
fn all_errors_reported_at_once() {
    let text = BASE
        .replace("diameter_mm = 150", "diameter_mm = 10")
        .replace("min_nm = 100", "min_nm = 5000")
        .replace("[420, 980]", "[980, 420]");
    let p = problems(&text);
    assert_eq!(p.len(), 3, "{p:#?}");
    let lines: Vec<usize> = p.iter().map(|p| p.line).collect();
    assert_eq!(lines, vec![3, 12, 13]);
}

#[test]
fn unknown_keys_and_syntax_errors_have_positions() {
    let p = problems(&BASE.replace(
        "edge_exclusion_mm = 3",
        "edge_exclusion_mm = 3\nedge_excl = 4",
    ));
    assert_eq!(p.len(), 1);
    assert_eq!(p[0].line, 5);
    assert!(
        p[0].message.contains("unknown field `edge_excl`"),
        "{}",
        p[0].message
    );
    let p = problems(&BASE.replace("diameter_mm = 150", "diameter_mm = = 150"));
    assert_eq!(p[0].line, 3);
    let shown = p[0].to_string();
    assert!(shown.starts_with("r.toml:3:"), "{shown}");
}
