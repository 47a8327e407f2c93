//! Helpers shared by the fit tests: recipes in memory and the reference fixtures.

#![allow(dead_code)]

use isopach::recipe::{self, LoadedRecipe};
use isopach::spectrum::{parse_csv, Spectrum, SpectrumFile};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// A recipe with the given `[film]` body (everything else minimal).
pub fn recipe(film: &str) -> LoadedRecipe {
    let text = format!(
        "name = \"t\"\n[wafer]\ndiameter_mm = 100\nedge_exclusion_mm = 3\n[pattern]\nkind = \"standard\"\nsites = 1\n[film]\n{film}\n"
    );
    let path = PathBuf::from("tests/inline.toml");
    LoadedRecipe {
        recipe: recipe::parse(&text, &path).unwrap_or_else(|e| panic!("{e}")),
        path,
        text,
    }
}

/// Writes `film.csv` (an n,k table) and `r.toml` (a one-site recipe fitting that film on Si
/// with `layer` as its layer entry and `window_nm` as its window) into `dir`; returns the
/// recipe's path.
pub fn table_film_recipe(dir: &Path, table: &str, layer: &str, window_nm: [u32; 2]) -> PathBuf {
    std::fs::write(dir.join("film.csv"), table).unwrap();
    let [lo, hi] = window_nm;
    let text = format!(
        "name = \"t\"\n[wafer]\ndiameter_mm = 100\nedge_exclusion_mm = 3\n[pattern]\nkind = \"standard\"\nsites = 1\n[film]\nambient = \"air\"\nsubstrate = \"si\"\nlayers = [ {{ {layer} }} ]\nwavelength_nm = [{lo}, {hi}]\n[materials.film]\nmodel = \"table\"\nfile = \"film.csv\"\n"
    );
    let path = dir.join("r.toml");
    std::fs::write(&path, text).unwrap();
    path
}

/// A fixture spectrum and its `# truth: name = value` header lines.
pub fn fixture(name: &str) -> (Spectrum, BTreeMap<String, f64>) {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/spectra")
        .join(name);
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    assert!(
        text.contains("with tmm "),
        "fixture header names the reference package"
    );
    let truth = text
        .lines()
        .filter_map(|l| l.strip_prefix("# truth: "))
        .filter_map(|l| l.split_once(" = "))
        .map(|(k, v)| (k.to_string(), v.parse().unwrap()))
        .collect();
    match parse_csv(&text, &path).unwrap() {
        SpectrumFile::Reflectance(s) => (s, truth),
        SpectrumFile::Counts(_) => panic!("fixture {name} is not a reflectance file"),
    }
}

/// Fixture file names starting with `prefix`.
pub fn fixtures(prefix: &str) -> Vec<String> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/spectra");
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .filter_map(|e| e.ok()?.file_name().into_string().ok())
        .filter(|n| n.starts_with(prefix) && n.ends_with(".csv"))
        .collect();
    v.sort();
    v
}
