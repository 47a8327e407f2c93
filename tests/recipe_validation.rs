//! Every recipe validation error: its message and the line it is reported on.

use isopach::bench::machine::{self, check_pair};
use isopach::recipe::{self, Located, RecipeError};
use std::path::Path;

mod validation_common;

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
    validation_common::one_problem(BASE, key, line, problems)
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
        p[0].message.contains("unknown key \"edge_excl\""),
        "{}",
        p[0].message
    );
    let p = problems(&BASE.replace("diameter_mm = 150", "diameter_mm = = 150"));
    assert_eq!(p[0].line, 3);
    let shown = p[0].to_string();
    assert!(shown.starts_with("r.toml:3:"), "{shown}");
}

/// The problems of `text` as `KEY.PATH: message` strings (the position stripped).
fn messages(text: &str) -> Vec<String> {
    problems(text).iter().map(|p| p.message.clone()).collect()
}

/// The one problem whose message starts with `key`, or a panic listing them all.
fn at_key(p: &[Located], key: &str) -> Located {
    let found: Vec<&Located> = p
        .iter()
        .filter(|p| p.message.starts_with(&format!("{key}: ")))
        .collect();
    assert_eq!(found.len(), 1, "one problem at {key}, got {p:#?}");
    found[0].clone()
}

#[test]
fn type_error_names_key_path_and_does_not_hide_others() {
    let text = BASE
        .replace("diameter_mm = 150", "diameter_mm = \"150\"\ndiamter = 3")
        .replace("kind = \"polar\"", "kind = \"polar\"\nringz = [4]")
        .replace("[420, 980]", "[420, 2500]");
    let p = problems(&text);
    assert_eq!(p.len(), 4, "{p:#?}");
    let d = at_key(&p, "wafer.diameter_mm");
    assert_eq!(
        d.message,
        "wafer.diameter_mm: expected a number, found the text \"150\""
    );
    assert_eq!((d.line, d.col), (3, 15));
    let typo = at_key(&p, "wafer.diamter");
    assert!(
        typo.message
            .contains("unknown key \"diamter\" (did you mean \"diameter_mm\"?)"),
        "{}",
        typo.message
    );
    assert_eq!(typo.line, 4);
    assert!(at_key(&p, "pattern.ringz")
        .message
        .contains("unknown key \"ringz\""));
    assert!(at_key(&p, "film.wavelength_nm")
        .message
        .contains("outside 200–2000 nm"));
    assert!(p[0]
        .to_string()
        .starts_with("r.toml:3:15: wafer.diameter_mm: "));
}

#[test]
fn type_errors_inside_tagged_tables_name_their_key() {
    let text = BASE.replace(
        "kind = \"polar\"\nrings = [8, 16]",
        "kind = \"grid\"\npitch_mm = \"10\"",
    );
    let p = problems(&text);
    assert_eq!(p.len(), 1, "{p:#?}");
    assert_eq!(
        p[0].message,
        "pattern.pitch_mm: expected a number, found the text \"10\""
    );
    assert_eq!(p[0].line, 8);
    let p = problems(&BASE.replace("kind = \"polar\"", "kind = \"spiral\""));
    assert!(
        p[0].message
            .starts_with("pattern.kind: unknown value \"spiral\""),
        "{p:#?}"
    );
}

#[test]
fn missing_required_key_is_located() {
    let p = problems(&BASE.replace("substrate = \"si\"\n", ""));
    assert_eq!(p.len(), 1, "{p:#?}");
    assert!(
        p[0].message
            .starts_with("film.substrate: required key \"substrate\" is missing"),
        "{}",
        p[0].message
    );
    assert_eq!(p[0].line, 9, "points at the [film] table");
}

#[test]
fn nominal_1e308_is_refused_not_panicking() {
    let p = one(
        "layers",
        r#"layers = [ { material = "sio2", nominal_nm = 1e308 } ]"#,
    );
    assert!(
        p.message.starts_with("film.layers[0].nominal_nm: "),
        "{}",
        p.message
    );
    assert!(p.message.contains("above 100000 nm"), "{}", p.message);
    let p = one(
        "layers",
        r#"layers = [ { material = "sio2", nominal_nm = 1000, min_nm = 100, max_nm = 1e300 } ]"#,
    );
    assert!(
        p.message.starts_with("film.layers[0].max_nm: "),
        "{}",
        p.message
    );
}

#[test]
fn window_with_three_values_is_refused() {
    let p = one("wavelength_nm", "wavelength_nm = [420, 980, 1000]");
    assert_eq!(
        p.message,
        "film.wavelength_nm: expected a list of exactly 2 values, found 3"
    );
    assert_eq!(p.line, line_of("wavelength_nm"));
    let p = one("wavelength_nm", "wavelength_nm = [420]");
    assert!(
        p.message.contains("exactly 2 values, found 1"),
        "{}",
        p.message
    );
}

#[test]
fn nan_and_inf_are_refused_everywhere() {
    let p = one("rings", "rings = [8, 16]\nstart_angle_deg = nan");
    assert!(
        p.message
            .starts_with("pattern.start_angle_deg: NaN is not a finite number"),
        "{}",
        p.message
    );
    let p = with_material("[materials.m]\nmodel = \"constant\"\nn = inf\n");
    assert_eq!(p.len(), 1, "{p:#?}");
    assert!(
        p[0].message
            .starts_with("materials.m.n: inf is not a finite number"),
        "{}",
        p[0].message
    );
    // A non-finite nominal is reported once, not again through its default bounds.
    let p = one(
        "layers",
        r#"layers = [ { material = "sio2", nominal_nm = nan } ]"#,
    );
    assert!(
        p.message.starts_with("film.layers[0].nominal_nm: "),
        "{}",
        p.message
    );
}

#[test]
fn fourier_with_two_fitted_layers_is_a_validation_problem() {
    let text = BASE
        .replace(
            "layers = [ { material = \"sio2\", nominal_nm = 1000, min_nm = 100, max_nm = 3000 } ]",
            "layers = [ { material = \"si3n4\", nominal_nm = 100 }, { material = \"sio2\", nominal_nm = 1000 } ]",
        )
        .replace("wavelength_nm = [420, 980]", "wavelength_nm = [420, 980]\nmethod = \"fourier\"");
    let p = problems(&text);
    assert_eq!(p.len(), 1, "{p:#?}");
    assert!(
        p[0].message
            .starts_with("film.method: method fourier fits one layer, the recipe fits 2"),
        "{}",
        p[0].message
    );
    assert_eq!(p[0].line, 14);
}

#[test]
fn table_path_outside_the_recipe_folder_is_refused() {
    for (file, why) in [
        ("/etc/passwd", "absolute path"),
        ("../nk.csv", "leaves the recipe's folder"),
    ] {
        let p = with_material(&format!(
            "[materials.m]\nmodel = \"table\"\nfile = \"{file}\"\n"
        ));
        assert_eq!(p.len(), 1, "{p:#?}");
        assert!(
            p[0].message.starts_with("materials.m.file: "),
            "{}",
            p[0].message
        );
        assert!(p[0].message.contains(why), "{}", p[0].message);
    }
}

#[test]
fn site_count_ceiling_is_checked_before_sites_are_made() {
    let started = std::time::Instant::now();
    let p = one("rings", "rings = [1000000000]");
    assert!(p.message.starts_with("pattern.rings: "), "{}", p.message);
    assert!(
        p.message.contains("more than the 10000 a map may have"),
        "{}",
        p.message
    );
    let grid = BASE.replace(
        "kind = \"polar\"\nrings = [8, 16]",
        "kind = \"grid\"\npitch_mm = 0.001",
    );
    let p = problems(&grid);
    assert_eq!(p.len(), 1, "{p:#?}");
    assert!(
        p[0].message
            .starts_with("pattern.pitch_mm: this pattern has about"),
        "{}",
        p[0].message
    );
    let sites: Vec<String> = (0..10_001).map(|i| format!("[{}, 0]", i % 50)).collect();
    let custom = BASE.replace(
        "kind = \"polar\"\nrings = [8, 16]",
        &format!("kind = \"custom\"\nsites_mm = [{}]", sites.join(", ")),
    );
    let p = problems(&custom);
    assert_eq!(p.len(), 1, "{p:#?}");
    assert!(
        p[0].message
            .starts_with("pattern.sites_mm: this pattern has about 10001 sites"),
        "{}",
        p[0].message
    );
    assert!(
        started.elapsed().as_secs() < 20,
        "validation must not generate the sites"
    );
}

#[test]
fn unknown_reference_material_is_a_pair_problem_in_the_machine_file() {
    let recipe = recipe::parse(BASE, Path::new("r.toml")).unwrap();
    let text = "name = \"b\"\n[stage]\nport = \"simulated\"\ntravel_x_mm = [0, 200]\ntravel_y_mm = [0, 200]\n[reference]\nmaterial = \"unobtainium\"\n";
    let m = machine::LoadedMachine {
        machine: machine::parse(text, Path::new("m.toml")).unwrap(),
        path: "m.toml".into(),
        text: text.into(),
    };
    let p = check_pair(&recipe, Some(&m)).unwrap_err();
    assert_eq!(p.len(), 1, "{p:#?}");
    assert_eq!(p[0].line, 7);
    assert!(
        p[0].to_string().starts_with(
            "m.toml:7:12: reference.material: unknown reference material \"unobtainium\""
        ),
        "{}",
        p[0]
    );
    // A material of the recipe's own is known; so is the built-in bench's reference.
    let own = format!("{BASE}[materials.unobtainium]\nmodel = \"constant\"\nn = 2.0\n");
    let recipe_own = recipe::parse(&own, Path::new("r.toml")).unwrap();
    assert!(check_pair(&recipe_own, Some(&m)).is_ok());
    assert!(check_pair(&recipe, None).is_ok());
    assert!(messages(BASE).is_empty());
}

/// A recipe fitting the coefficients of its film material (`materials` is the table body).
fn fitted_material(film_extra: &str, materials: &str) -> String {
    BASE.replace("material = \"sio2\"", "material = \"film\"")
        .replace(
            "wavelength_nm = [420, 980]",
            &format!("wavelength_nm = [420, 980]\n{film_extra}"),
        )
        + "[materials.film]\nmodel = \"cauchy\"\na = 1.6\nb = 0.01\n"
        + materials
}

#[test]
fn fitted_coefficients_are_checked_with_their_key_paths() {
    let ok = fitted_material("dispersion = \"shared\"", "fit = [\"a\", \"b\"]\nbounds.a = [1.5, 1.7]\nurbach = { k0 = 0.001, beta_per_ev = 3, e0_ev = 3 }\n");
    assert!(problems(&ok).is_empty(), "{:?}", problems(&ok));
    let text = fitted_material(
        "",
        "fit = [\"a\", \"q\", \"a\"]\nbounds.b = [0, 1]\nbounds.a = [1.7, 1.8]\n",
    );
    let p = problems(&text);
    let msgs: Vec<&str> = p.iter().map(|p| p.message.as_str()).collect();
    assert_eq!(p.len(), 4, "{msgs:#?}");
    assert!(msgs.iter().any(|m| m
        .contains("\"q\" is not a coefficient of this formula (fitted ones can be: a, b, c, k)")));
    assert!(msgs.iter().any(|m| m.contains("\"a\" is listed twice")));
    assert!(msgs
        .iter()
        .any(|m| m.contains("bounds for \"b\", which is not in fit")));
    assert!(msgs
        .iter()
        .any(|m| m.contains("starting value a = 1.6 lies outside its bounds [1.7, 1.8]")));
    // Reported on the lines of the keys.
    let line = |k: &str| text.lines().position(|l| l.starts_with(k)).unwrap() + 1;
    assert!(p
        .iter()
        .filter(|p| p.message.contains("listed twice"))
        .all(|p| p.line == line("fit =")));
    assert!(p
        .iter()
        .filter(|p| p.message.contains("[1.7, 1.8]"))
        .all(|p| p.line == line("bounds.a")));
}

#[test]
fn shared_dispersion_needs_a_fitted_material_of_a_fitted_layer() {
    let p = one(
        "wavelength_nm",
        "wavelength_nm = [420, 980]\ndispersion = \"shared\"",
    );
    assert!(
        p.message.contains("no material has fitted coefficients"),
        "{}",
        p.message
    );
    let text = fitted_material("", "fit = [\"a\"]\n").replace(
        "nominal_nm = 1000, min_nm = 100, max_nm = 3000",
        "nominal_nm = 1000, fit = false",
    );
    let p = problems(&text);
    assert!(
        p.iter()
            .any(|p| p.message.contains("no fitted layer is made of it")),
        "{p:?}"
    );
    let text = fitted_material("method = \"fourier\"", "fit = [\"a\"]\n");
    assert!(problems(&text).iter().any(|p| p
        .message
        .contains("cannot fit the coefficients of material film")));
    let text = fitted_material("", "fit = [\"k0\"]\n");
    assert!(
        problems(&text)
            .iter()
            .any(|p| p.message.contains("\"k0\" is not a coefficient")),
        "k0 needs an Urbach tail"
    );
}
