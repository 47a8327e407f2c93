//! Creating a run folder: validated names, a unique id, the frozen `run.toml` (recipe, machine,
//! metadata) and the recipe's own n,k tables copied in, so the run can be resumed, refitted and
//! rendered even if the recipe file changes or moves.

use super::folder::{RunFolder, RunMeta, RunToml};
use super::id::{check_name, run_id};
use super::plan::frozen::FrozenPlan;
use super::plan::Plan;
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
    /// Seeds of the simulated bench (its wafer, this run's draws).
    pub seeds: crate::bench::SimSeeds,
}

/// The simulated bench's seeds for a new run of `wafer`: `given` seeds both (reproducible, for
/// tests and demos); otherwise the wafer's comes from its id (FNV-1a, so every run of one wafer
/// measures the same virtual film) and the run's own draws are fresh.
pub fn sim_seeds(wafer: &str, given: Option<u64>) -> crate::bench::SimSeeds {
    match given {
        Some(seed) => crate::bench::SimSeeds::same(seed),
        None => crate::bench::SimSeeds {
            wafer: crate::bench::sim::name_hash(wafer),
            run: rand::random(),
        },
    }
}

/// Folder inside a run that holds the recipe's n,k tables.
pub const MATERIALS_DIR: &str = "materials";

/// Creates the run folder of a checked plan, complete or not at all: everything (`run.toml`,
/// `plan.json`, the n,k tables, `spectra/`) is written into a hidden folder beside it that is
/// renamed into place last, so a kill at any moment leaves either no run or a resumable one.
pub fn create(plan: &Plan, new: &NewRun) -> anyhow::Result<(RunFolder, RunToml)> {
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
    let staging = new
        .runs_dir
        .join(format!(".{base}.partial-{}", std::process::id()));
    let result = stage_and_publish(plan, new, now, &base, &staging);
    if result.is_err() {
        let _ = std::fs::remove_dir_all(&staging);
    }
    result
}

/// Writes the run into `staging`, then renames it to the first free id.
fn stage_and_publish(
    plan: &Plan,
    new: &NewRun,
    now: chrono::DateTime<chrono::Local>,
    base: &str,
    staging: &Path,
) -> anyhow::Result<(RunFolder, RunToml)> {
    let loaded = &plan.recipe;
    std::fs::create_dir(staging)
        .with_context(|| format!("cannot create a run folder in {}", new.runs_dir.display()))?;
    let scratch = RunFolder::new(staging);
    std::fs::create_dir_all(scratch.spectra_dir())?;
    let recipe = freeze_tables(&loaded.recipe, loaded.dir(), staging)?;
    let mut meta = RunToml {
        run: RunMeta {
            id: base.to_string(),
            wafer: new.wafer.clone(),
            lot: new.lot.clone(),
            operator: new.operator.clone(),
            started: now.to_rfc3339_opts(chrono::SecondsFormat::Secs, false),
            tool_version: env!("CARGO_PKG_VERSION").to_string(),
            recipe_path: loaded.path.display().to_string(),
            seed: new.seeds.wafer,
            run_seed: Some(new.seeds.run),
        },
        recipe,
        machine: new.machine.clone(),
    };
    let frozen = serde_json::to_vec_pretty(&FrozenPlan::of(plan))?;
    super::files::write_atomic(&scratch.plan_json(), &frozen)?;
    // Two runs of one wafer in the same second get a suffix rather than sharing a folder.
    for k in 1..1000 {
        let id = if k == 1 {
            base.to_string()
        } else {
            format!("{base}-{k}")
        };
        let root = new.runs_dir.join(&id);
        if root.exists() {
            continue;
        }
        meta.run.id = id;
        write_run_toml(&scratch, &meta)?;
        if std::fs::rename(staging, &root).is_ok() {
            super::files::sync_dir(&new.runs_dir);
            return Ok((RunFolder::new(root), meta));
        }
    }
    anyhow::bail!(
        "cannot create a run folder for {base} in {}",
        new.runs_dir.display()
    )
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
