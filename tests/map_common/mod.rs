//! Shared helpers for the map tests: an analytic thickness field and hand-built run folders.
#![allow(dead_code)]

use isopach::map::SiteRow;
use isopach::recipe::{self, Wafer};
use isopach::run::folder::{RunFolder, RunMeta, RunToml};
use std::path::Path;

/// Dome plus tilt plus three-fold ripple, nm, on a wafer of usable radius `r_u` mm
/// (invented for tests; the same formula is in scripts/griddata_reference.py).
pub fn analytic(x: f64, y: f64, r_u: f64) -> f64 {
    let rho2 = (x * x + y * y) / (r_u * r_u);
    let theta = y.atan2(x);
    1000.0 + 20.0 * (1.0 - rho2) + 0.06 * x - 0.035 * y + 1.2 * (3.0 * theta).cos() * rho2
}

/// The recipe of the repository, loaded.
pub fn recipe(name: &str) -> recipe::LoadedRecipe {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("recipes")
        .join(format!("{name}.toml"));
    recipe::load(&path).expect("repository recipe loads")
}

/// A valid site row at a pattern site with the given thickness per layer.
pub fn site_row(s: &recipe::Site, thickness_nm: Vec<f64>) -> SiteRow {
    SiteRow {
        site: s.number,
        x_mm: s.x_mm,
        y_mm: s.y_mm,
        sigma_nm: vec![0.2; thickness_nm.len()],
        thickness_nm,
        gof: 0.998,
        flag: String::new(),
    }
}

/// Site rows of a recipe's pattern sampled from the analytic field (one layer, all valid).
pub fn analytic_rows(loaded: &recipe::LoadedRecipe) -> Vec<SiteRow> {
    let wafer: Wafer = loaded.wafer();
    let r_u = wafer.usable_radius();
    loaded
        .sites()
        .iter()
        .map(|s| site_row(s, vec![analytic(s.x_mm, s.y_mm, r_u)]))
        .collect()
}

/// The `run.toml` of a run of the recipe.
pub fn run_toml(loaded: &recipe::LoadedRecipe, wafer_id: &str) -> RunToml {
    RunToml {
        run: RunMeta {
            id: format!("{}-{wafer_id}", loaded.recipe.name),
            wafer: wafer_id.into(),
            lot: "L2612".into(),
            operator: "test".into(),
            started: "2026-12-03T14:22:05+01:00".into(),
            tool_version: env!("CARGO_PKG_VERSION").into(),
            recipe_path: loaded.path.display().to_string(),
            seed: 7,
            run_seed: None,
        },
        recipe: loaded.recipe.clone(),
        machine: None,
    }
}

/// Writes `run.toml` and `sites.csv` into `dir` and returns the folder.
pub fn make_run_folder(dir: &Path, meta: &RunToml, rows: &[SiteRow]) -> RunFolder {
    std::fs::create_dir_all(dir).unwrap();
    let folder = RunFolder::new(dir);
    std::fs::write(folder.run_toml(), toml::to_string(meta).unwrap()).unwrap();
    std::fs::write(folder.sites_csv(), isopach::map::sites_table::write(rows)).unwrap();
    folder
}
