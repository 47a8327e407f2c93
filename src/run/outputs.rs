//! A run folder's derived files, written from its site rows and read back: `sites.csv`,
//! `summary.json`, `map.svg`, `map.png` (DESIGN.md §3), each written atomically.
//!
//! With several fitted layers, `map.svg`/`map.png` show the first one and each further layer
//! k gets `map-layer{k}.svg`/`.png`. The drawing and the statistics are `map`'s; this module
//! only decides what goes where in a run folder, so `map` never needs to know about runs.

use super::files::write_atomic;
use super::folder::{RunFolder, RunToml};
use crate::map::render::{render_svg_and_png, MapInput, RenderOptions};
use crate::map::sites_table::{self, SiteRow};
use crate::map::stats::Summary;
use crate::map::MapError;
use crate::recipe::{Recipe, Wafer};
use anyhow::Context;
use std::path::{Path, PathBuf};

/// Names of the recipe's fitted layers, top first (the order of the thickness columns).
pub fn fitted_layer_names(recipe: &Recipe) -> Vec<String> {
    recipe
        .film
        .layers
        .iter()
        .filter(|l| l.fit)
        .map(|l| l.material.clone())
        .collect()
}

/// The map of one layer of a run, titled from its `run.toml`.
pub fn run_map_input(rows: &[SiteRow], meta: &RunToml, layer: usize) -> MapInput {
    let names = fitted_layer_names(&meta.recipe);
    let mut input = MapInput::thickness(
        Wafer::from_spec(&meta.recipe.wafer),
        rows.to_vec(),
        layer,
        names.get(layer).map(String::as_str).unwrap_or(""),
    );
    input.recipe = meta.recipe.name.clone();
    input.wafer_id = meta.run.wafer.clone();
    input.time = meta.run.started.clone();
    input.lot = meta.run.lot.clone();
    input.operator = meta.run.operator.clone();
    if layer == 0 {
        input.spec_nm = meta.recipe.accept.spec_nm;
    }
    input
}

/// The summary of a run's rows.
pub fn run_summary(rows: &[SiteRow], meta: &RunToml) -> Summary {
    let wafer = Wafer::from_spec(&meta.recipe.wafer);
    Summary::from_rows(
        rows,
        &fitted_layer_names(&meta.recipe),
        wafer.usable_radius(),
    )
    .with_spec(rows, meta.recipe.accept.spec_nm)
    .with_verdict(&meta.recipe.accept)
}

fn put(path: &Path, bytes: &[u8]) -> Result<(), MapError> {
    write_atomic(path, bytes).map_err(|e| MapError::io("write", path, e))
}

/// Writes `sites.csv`, `summary.json`, `map.svg` and `map.png` (plus per-layer maps for
/// further layers) into the run folder and returns the summary.
pub fn write_run_outputs(
    folder: &RunFolder,
    rows: &[SiteRow],
    meta: &RunToml,
) -> Result<Summary, MapError> {
    write_run_outputs_with(folder, rows, meta, &Fitted::default())
}

/// Fitted values beyond thicknesses that a run's derived files carry: per-site columns of
/// `sites.csv` (dispersion coefficients and their σ) and the shared dispersion of the run
/// (the `dispersion` object of `summary.json`).
#[derive(Debug, Clone, Default)]
pub struct Fitted {
    pub columns: Vec<(String, Vec<f64>)>,
    pub dispersion: Option<serde_json::Value>,
}

/// [`write_run_outputs`] with fitted values beyond thicknesses.
pub fn write_run_outputs_with(
    folder: &RunFolder,
    rows: &[SiteRow],
    meta: &RunToml,
    fitted: &Fitted,
) -> Result<Summary, MapError> {
    put(
        &folder.sites_csv(),
        sites_table::write_with_columns(rows, &fitted.columns).as_bytes(),
    )?;
    let summary = run_summary(rows, meta);
    let json = match &fitted.dispersion {
        None => summary.to_json(),
        Some(d) => {
            let mut v: serde_json::Value =
                serde_json::from_str(&summary.to_json()).map_err(|e| {
                    MapError::io("write", folder.summary_json(), std::io::Error::other(e))
                })?;
            if let Some(o) = v.as_object_mut() {
                o.insert("dispersion".into(), d.clone());
            }
            serde_json::to_string_pretty(&v).unwrap_or_default() + "\n"
        }
    };
    put(&folder.summary_json(), json.as_bytes())?;
    write_run_maps(folder, rows, meta, &RenderOptions::default())?;
    Ok(summary)
}

/// Where the map of `layer` (0-based) goes in a run folder.
pub fn map_paths(folder: &RunFolder, layer: usize) -> (PathBuf, PathBuf) {
    if layer == 0 {
        (folder.map_svg(), folder.map_png())
    } else {
        let k = layer + 1;
        (
            folder.root.join(format!("map-layer{k}.svg")),
            folder.root.join(format!("map-layer{k}.png")),
        )
    }
}

/// Writes the SVG and PNG map of every layer into the run folder; returns the paths written.
pub fn write_run_maps(
    folder: &RunFolder,
    rows: &[SiteRow],
    meta: &RunToml,
    opts: &RenderOptions,
) -> Result<Vec<PathBuf>, MapError> {
    let layers = sites_table::layer_count(rows).max(fitted_layer_names(&meta.recipe).len());
    let mut written = Vec::new();
    for layer in 0..layers {
        let input = run_map_input(rows, meta, layer);
        let (svg, png) = map_paths(folder, layer);
        let (svg_text, png_bytes) = render_svg_and_png(&input, opts)?;
        put(&svg, svg_text.as_bytes())?;
        put(&png, &png_bytes)?;
        written.extend([svg, png]);
    }
    Ok(written)
}

/// A run's derived values read back from its folder: the frozen `run.toml`, the `sites.csv`
/// rows and their summary (recomputed, so it always matches the rows).
#[derive(Debug, Clone)]
pub struct RunOutputs {
    pub meta: RunToml,
    pub rows: Vec<SiteRow>,
    pub summary: Summary,
}

/// Reads `run.toml` and `sites.csv` of the run folder at `path`; the one place that reads a
/// run's derived values back (for `compare`, `render` and `trend --rebuild`).
pub fn read_outputs(path: &Path) -> anyhow::Result<RunOutputs> {
    let folder = RunFolder::new(path);
    let meta = folder.read_run_toml()?;
    let rows = sites_table::read_file(&folder.sites_csv())
        .with_context(|| format!("run {} has no readable sites.csv", path.display()))?;
    let summary = run_summary(&rows, &meta);
    Ok(RunOutputs {
        meta,
        rows,
        summary,
    })
}
