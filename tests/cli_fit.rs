//! `isopach fit` run as a binary on reference fixtures and broken files.

mod fit_common;

use std::path::Path;
use std::process::Command;

fn isopach(args: &[&str]) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(args)
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn json_is_the_contract_object_and_close_to_the_reference() {
    // Fixture from scripts/make_tmm_fixtures.py (tmm): 1000 nm SiO2 on Si with 0.3 % noise.
    let (code, out, err) = isopach(&[
        "fit",
        "fixtures/spectra/sio2_si_001000p0nm_noisy.csv",
        "--recipe",
        "recipes/oxide-150-49.toml",
        "--json",
    ]);
    assert_eq!(code, 0, "{err}");
    let v: serde_json::Value = serde_json::from_str(out.trim()).unwrap();
    let keys: Vec<&str> = v.as_object().unwrap().keys().map(String::as_str).collect();
    assert_eq!(keys, ["flags", "gof", "layers", "method"]);
    assert_eq!(v["method"], "model");
    let layer = &v["layers"][0];
    assert_eq!(layer["material"], "sio2");
    assert!((layer["thickness_nm"].as_f64().unwrap() - 1000.0).abs() < 2.0);
    assert!(layer["sigma_nm"].as_f64().unwrap() > 0.0);
    assert!(v["gof"].as_f64().unwrap() > 0.99);
    assert_eq!(v["flags"], serde_json::json!([]));
}

#[test]
fn plot_is_written() {
    let dir = tempfile::tempdir().unwrap();
    let svg = dir.path().join("fit.svg");
    let (code, out, err) = isopach(&[
        "fit",
        "fixtures/spectra/si3n4_sio2_si_150p0_500p0nm.csv",
        "--recipe",
        "recipes/stack-200-diameter.toml",
        "--plot",
        svg.to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("si3n4") && out.contains("150.00"), "{out}");
    let text = std::fs::read_to_string(&svg).unwrap();
    assert!(text.starts_with("<svg") && text.contains("polyline") && text.contains("si3n4 150.00"));
}

#[test]
fn a_broken_spectrum_names_its_line_and_exits_2() {
    let dir = tempfile::tempdir().unwrap();
    let bad = dir.path().join("bad.csv");
    std::fs::write(
        &bad,
        "wavelength_nm,reflectance\n500,0.3\n501,0.31\n501,0.32\n",
    )
    .unwrap();
    let (code, _, err) = isopach(&[
        "fit",
        bad.to_str().unwrap(),
        "--recipe",
        "recipes/oxide-150-49.toml",
    ]);
    assert_eq!(code, 2);
    assert!(
        err.contains("bad.csv:4: duplicate wavelength 501 nm"),
        "{err}"
    );
}

#[test]
fn counts_files_are_normalised_against_the_reference_material() {
    // Counts made from a fixture: reference = bare-Si level, sample = R/R_Si of it.
    let text = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/spectra/sio2_si_001000p0nm.csv"),
    )
    .unwrap();
    let mut csv = String::from("wavelength_nm,sample,dark,reference\n");
    for line in text.lines().filter(|l| !l.starts_with('#')).skip(1) {
        let (w, r) = line.split_once(',').unwrap();
        let (w, r): (f64, f64) = (w.parse().unwrap(), r.parse().unwrap());
        // Fresnel reflectance of bare Si is about 0.33–0.5 here; use the library's own value.
        let r_si = isopach::optics::reflectance(
            &isopach::optics::Stack::bare(
                isopach::optics::MaterialLibrary::builtin()
                    .get("air")
                    .unwrap()
                    .clone(),
                isopach::optics::MaterialLibrary::builtin()
                    .get("si")
                    .unwrap()
                    .clone(),
            ),
            &[w],
            0.0,
            0.0,
        )[0];
        let reference = 30000.0 + 10.0 * (w / 100.0).sin();
        csv.push_str(&format!(
            "{w},{},{},{}\n",
            100.0 + (reference - 100.0) * r / r_si,
            100.0,
            reference
        ));
    }
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("raw.csv");
    std::fs::write(&path, csv).unwrap();
    let (code, out, err) = isopach(&[
        "fit",
        path.to_str().unwrap(),
        "--recipe",
        "recipes/oxide-150-49.toml",
        "--json",
    ]);
    assert_eq!(code, 0, "{err}");
    let v: serde_json::Value = serde_json::from_str(out.trim()).unwrap();
    assert!(
        (v["layers"][0]["thickness_nm"].as_f64().unwrap() - 1000.0).abs() < 0.5,
        "{out}"
    );
}

#[test]
fn a_broken_nk_table_names_its_line_and_exits_2() {
    let dir = tempfile::tempdir().unwrap();
    let recipe = fit_common::table_film_recipe(
        dir.path(),
        "wavelength_nm,n,k\n400,1.7,0\n500,one,0\n",
        "material = \"film\", nominal_nm = 500",
        [420, 900],
    );
    let (code, _, err) = isopach(&[
        "fit",
        "fixtures/spectra/sio2_si_001000p0nm.csv",
        "--recipe",
        recipe.to_str().unwrap(),
    ]);
    assert_eq!(code, 2);
    assert!(
        err.contains("film.csv:3: \"one\" in column 2 is not a number"),
        "{err}"
    );
}
