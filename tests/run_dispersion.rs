//! Shared dispersion on the simulated bench and `isopach material fit` on reference spectra:
//! the demo recipe recipes/resist-150-shared-dispersion.toml run with the default simulated
//! machine, its journal, derived files and a refit; the command on the tmm fixtures of
//! scripts/make_dispersion_fixtures.py (truth in their headers).

mod run_common;

use isopach::run::events::{current_dispersion, Event};
use run_common::{events, isopach, only_run};
use std::path::Path;

fn root(p: &str) -> String {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join(p)
        .to_string_lossy()
        .into_owned()
}

#[test]
fn demo_recipe_fits_one_dispersion_across_the_wafer_and_refit_repeats_it() {
    let dir = tempfile::tempdir().unwrap();
    let runs = dir.path().join("runs");
    let recipe = root("recipes/resist-150-shared-dispersion.toml");
    let out = isopach(&[
        "run",
        &recipe,
        "--wafer",
        "D01",
        "--runs",
        runs.to_str().unwrap(),
    ]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let run = only_run(&runs);
    let ev = events(&run);
    let d = current_dispersion(&ev).expect("a dispersion-fitted event in a finished refit");
    assert_eq!(d.spectra, 49);
    // The virtual wafer is made of the recipe's material (a = 1.605, b = 0.0135): the joint
    // fit must find it again, within a few σ and to 1e-3 in a.
    let a = &d.coefficients[0];
    assert_eq!(a.name, "resist-batch.a");
    assert!((a.value - 1.605).abs() < 1e-3, "{a:?}");
    assert!(a.sigma > 0.0 && a.correlation_with_thickness.abs() <= 1.0);
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(run.join("summary.json")).unwrap()).unwrap();
    assert_eq!(summary["dispersion"]["material"], "resist-batch");
    let sites = std::fs::read_to_string(run.join("sites.csv")).unwrap();
    assert!(sites
        .lines()
        .next()
        .unwrap()
        .ends_with(",resist-batch.a,resist-batch.a_sigma,resist-batch.b,resist-batch.b_sigma"));
    // The run ends: a refit bracket holding the joint fit, then run-finished.
    let kinds: Vec<&str> = ev
        .iter()
        .map(|e| match e {
            Event::RefitStarted { .. } => "refit-started",
            Event::DispersionFitted { .. } => "dispersion-fitted",
            Event::RefitFinished { .. } => "refit-finished",
            Event::RunFinished { .. } => "run-finished",
            _ => "",
        })
        .filter(|k| !k.is_empty())
        .collect();
    assert_eq!(
        kinds,
        [
            "refit-started",
            "dispersion-fitted",
            "refit-finished",
            "run-finished"
        ]
    );
    let out = isopach(&["refit", run.to_str().unwrap()]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        stdout.contains("shared dispersion of resist-batch over 49 sites"),
        "{stdout}"
    );
    let again = events(&run);
    let d2 = current_dispersion(&again).unwrap();
    assert!((d2.coefficients[0].value - a.value).abs() < 1e-9);
}

fn material_recipe(dir: &Path) -> String {
    let text = r#"name = "m"
[wafer]
diameter_mm = 100
edge_exclusion_mm = 3
[pattern]
kind = "standard"
sites = 1
[film]
ambient = "air"
substrate = "si"
layers = [ { material = "film", nominal_nm = 1500, min_nm = 600, max_nm = 3500 } ]
wavelength_nm = [420, 980]
method = "model"
[materials.film]
model = "cauchy"
a = 1.60
b = 0.008
c = 0.0
fit = ["a", "b", "c"]
bounds.c = [-0.005, 0.005]
"#;
    let p = dir.join("m.toml");
    std::fs::write(&p, text).unwrap();
    p.to_string_lossy().into_owned()
}

#[test]
fn material_fit_prints_a_ready_block_from_several_spectra() {
    let dir = tempfile::tempdir().unwrap();
    let recipe = material_recipe(dir.path());
    let s1 = root("fixtures/spectra/dispersion/resist_000800nm_noisy.csv");
    let s2 = root("fixtures/spectra/dispersion/resist_003000nm_noisy.csv");
    let out = isopach(&[
        "material",
        "fit",
        &s1,
        &s2,
        "--recipe",
        &recipe,
        "--name",
        "resist-lot7",
    ]);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{stdout}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(stdout.contains("[materials.resist-lot7]"), "{stdout}");
    // The printed block is a valid recipe material whose n(633 nm) is the fixture's
    // (n633 = 1.620698 in its header, from tmm's input coefficients) within 0.002.
    let block: String = stdout
        .lines()
        .take_while(|l| !l.trim().is_empty())
        .collect::<Vec<_>>()
        .join("\n");
    let parsed: toml::Table = toml::from_str(&block).unwrap();
    let spec: isopach::optics::MaterialSpec = parsed["materials"]["resist-lot7"]
        .clone()
        .try_into()
        .unwrap();
    let n = isopach::optics::library::from_spec("x", &spec, Path::new("."))
        .unwrap()
        .index(633.0)
        .re;
    assert!((n - 1.620698).abs() < 0.002, "n(633) = {n}");
}

#[test]
fn material_fit_refuses_when_thickness_and_index_cannot_be_told_apart() {
    // 100 nm of oxide (tmm fixture of scripts/make_tmm_fixtures.py) through a 60 nm window
    // with scale and tilt fitted: no fringe, no absolute level, so n and d trade off
    // (|correlation| near 1).
    let dir = tempfile::tempdir().unwrap();
    let recipe = material_recipe(dir.path());
    let text = std::fs::read_to_string(&recipe)
        .unwrap()
        .replace(
            "wavelength_nm = [420, 980]",
            "wavelength_nm = [700, 760]\nfit_scale = true\nfit_tilt = true",
        )
        .replace(
            "nominal_nm = 1500, min_nm = 600, max_nm = 3500",
            "nominal_nm = 100, min_nm = 20, max_nm = 400",
        )
        .replace("a = 1.60", "a = 1.47")
        .replace("b = 0.008", "b = 0.003")
        .replace("fit = [\"a\", \"b\", \"c\"]", "fit = [\"a\", \"b\"]")
        .replace("bounds.c = [-0.005, 0.005]", "");
    std::fs::write(&recipe, text).unwrap();
    let s = root("fixtures/spectra/sio2_si_000100p0nm_noisy.csv");
    let out = isopach(&["material", "fit", &s, "--recipe", &recipe]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(
        out.status.code(),
        Some(1),
        "{stderr}{}",
        String::from_utf8_lossy(&out.stdout)
    );
    assert!(
        stderr.contains("refused") && stderr.contains("cannot be told apart"),
        "{stderr}"
    );
    assert!(out.stdout.is_empty(), "no material block when refused");
    // With the thickness from another instrument there is no trade-off left.
    let out = isopach(&[
        "material",
        "fit",
        &s,
        "--recipe",
        &recipe,
        "--thickness-nm",
        "100",
    ]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // Bad input: exit 2.
    let out = isopach(&[
        "material",
        "fit",
        &s,
        "--recipe",
        &recipe,
        "--thickness-nm",
        "-5",
    ]);
    assert_eq!(out.status.code(), Some(2));
    let out = isopach(&["material", "fit", "/nonexistent.csv", "--recipe", &recipe]);
    assert_eq!(out.status.code(), Some(2));
}
