//! Creating a run folder: validated names, a unique id, the frozen `run.toml` (recipe, machine,
//! metadata) and the recipe's own n,k tables copied in, so the run can be resumed, refitted and
//! rendered even if the recipe file changes or moves.

use super::folder::{RunFolder, RunMeta, RunToml};
use super::id::{check_name, run_id};
use crate::recipe::schema::MaterialSpec;
use crate::recipe::{LoadedRecipe, Recipe};
use anyhow::Context;
use std::path::{Path, PathBuf};

/// What a new run is: which recipe, on which bench, for which wafer.
#[derive(Debug, Clone)]
pub struct NewRun {
    pub wafer: String,
    pub lot: String,
    pub operator: String,
    /// The folder that holds run folders.
    pub runs_dir: PathBuf,
    /// The machine file as a table (`None`: the built-in simulated bench).
    pub machine: Option<toml::Table>,
    /// Seed of the simulated parts.
    pub seed: u64,
}

/// Folder inside a run that holds the recipe's n,k tables.
pub const MATERIALS_DIR: &str = "materials";

/// Creates the run folder and writes `run.toml`; returns the folder and what was written.
pub fn create(loaded: &LoadedRecipe, new: &NewRun) -> anyhow::Result<(RunFolder, RunToml)> {
    check_name("wafer id", &new.wafer)?;
    if !new.lot.is_empty() {
        check_name("lot", &new.lot)?;
    }
    if !new.operator.is_empty() {
        check_name("operator", &new.operator)?;
    }
    std::fs::create_dir_all(&new.runs_dir)
        .with_context(|| format!("cannot create the runs folder {}", new.runs_dir.display()))?;
    let now = chrono::Local::now();
    let base = run_id(now, &new.wafer);
    // Two runs of one wafer in the same second get a suffix rather than sharing a folder.
    let (id, root) = (1..1000)
        .map(|k| {
            if k == 1 {
                base.clone()
            } else {
                format!("{base}-{k}")
            }
        })
        .map(|id| {
            let root = new.runs_dir.join(&id);
            (id, root)
        })
        .find(|(_, root)| std::fs::create_dir(root).is_ok())
        .with_context(|| {
            format!(
                "cannot create a run folder for {base} in {}",
                new.runs_dir.display()
            )
        })?;
    let folder = RunFolder::new(root);
    std::fs::create_dir_all(folder.spectra_dir())?;
    let recipe = freeze_tables(&loaded.recipe, loaded.dir(), &folder.root)?;
    let meta = RunToml {
        run: RunMeta {
            id,
            wafer: new.wafer.clone(),
            lot: new.lot.clone(),
            operator: new.operator.clone(),
            started: now.to_rfc3339_opts(chrono::SecondsFormat::Secs, false),
            tool_version: env!("CARGO_PKG_VERSION").to_string(),
            recipe_path: loaded.path.display().to_string(),
            seed: new.seed,
        },
        recipe,
        machine: new.machine.clone(),
    };
    write_run_toml(&folder, &meta)?;
    Ok((folder, meta))
}

/// Writes `run.toml` atomically.
pub fn write_run_toml(folder: &RunFolder, meta: &RunToml) -> anyhow::Result<()> {
    let text = toml::to_string(meta).context("cannot serialise run.toml")?;
    super::files::write_atomic(&folder.run_toml(), text.as_bytes())
        .with_context(|| format!("cannot write {}", folder.run_toml().display()))
}

/// Copies each `table` material's file into the run folder and points the recipe at the copy.
pub fn freeze_tables(
    recipe: &Recipe,
    recipe_dir: &Path,
    run_root: &Path,
) -> anyhow::Result<Recipe> {
    let mut out = recipe.clone();
    for (name, spec) in out.materials.iter_mut() {
        if let MaterialSpec::Table { file } = spec {
            let src = recipe_dir.join(&*file);
            let rel = format!("{MATERIALS_DIR}/{name}.csv");
            let dst = run_root.join(&rel);
            std::fs::create_dir_all(run_root.join(MATERIALS_DIR))?;
            std::fs::copy(&src, &dst).with_context(|| {
                format!(
                    "cannot copy n,k table {} into the run folder",
                    src.display()
                )
            })?;
            *file = rel;
        }
    }
    Ok(out)
}

/// The frozen recipe of a run as a loaded recipe whose relative paths resolve in the run folder.
pub fn loaded_recipe(folder: &RunFolder, meta: &RunToml) -> LoadedRecipe {
    LoadedRecipe {
        recipe: meta.recipe.clone(),
        path: folder.run_toml(),
        text: toml::to_string(&meta.recipe).unwrap_or_default(),
    }
}
