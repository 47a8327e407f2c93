//! Writing drawn pages to files: SVG or PNG by the file's extension, atomically.

use anyhow::{bail, Context};
use isopach::map::scene::Scene;
use std::path::Path;

/// PNG pixels per layout pixel for files written by the CLI.
const PNG_SCALE: f64 = 1.0;

/// Writes `scene` to `path` as SVG or PNG (by extension).
pub fn write_scene(path: &Path, scene: &Scene) -> anyhow::Result<()> {
    let bytes = match path
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase)
        .as_deref()
    {
        Some("svg") => isopach::map::svg::write(scene).into_bytes(),
        Some("png") => isopach::map::png::write(scene, PNG_SCALE)?,
        _ => bail!("{}: the file name must end in .svg or .png", path.display()),
    };
    isopach::run::files::write_atomic(path, &bytes)
        .with_context(|| format!("cannot write {}", path.display()))
}
