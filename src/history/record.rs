//! What the history keeps of a run, taken from its folder; and the index kept up to date.

use super::db::{History, HistoryError, LayerRecord, RunRecord, SiteRecord};
use crate::compare::WaferRun;
use std::path::{Path, PathBuf};

/// The history database of a runs folder (a dot file, so `runs/*` lists only run folders).
pub fn db_path(runs_dir: &Path) -> PathBuf {
    runs_dir.join(".history.sqlite")
}

/// The history record of a run read back from its folder.
pub fn record_of(run: &WaferRun) -> RunRecord {
    let layers = run
        .summary
        .all_layers()
        .iter()
        .enumerate()
        .map(|(k, l)| LayerRecord {
            layer: k,
            material: l.layer.clone(),
            sites_total: l.sites_total,
            sites_valid: l.sites_valid,
            mean_nm: l.mean_nm,
            std_nm: l.std_nm,
            min_nm: l.min_nm,
            max_nm: l.max_nm,
            nu_1sigma_pct: l.nu_1sigma_pct,
            nu_range_pct: l.nu_range_pct,
        })
        .collect();
    let sites = run
        .rows
        .iter()
        .flat_map(|r| {
            r.thickness_nm
                .iter()
                .enumerate()
                .map(move |(k, t)| SiteRecord {
                    site: r.site,
                    layer: k,
                    x_mm: r.x_mm,
                    y_mm: r.y_mm,
                    thickness_nm: *t,
                    valid: r.valid_value(k).is_some(),
                })
        })
        .collect();
    RunRecord {
        run_id: run.meta.run.id.clone(),
        folder: run.folder.display().to_string(),
        recipe: run.meta.recipe.name.clone(),
        wafer: run.meta.run.wafer.clone(),
        lot: run.meta.run.lot.clone(),
        started: run.meta.run.started.clone(),
        layers,
        sites,
    }
}

/// Records (or re-records) the run in `folder` in the history of the folder's parent.
pub fn update(folder: &Path) -> anyhow::Result<()> {
    let run = WaferRun::load(folder)?;
    let parent = folder.parent().unwrap_or(Path::new("."));
    History::open(&db_path(parent))?.record(&record_of(&run))?;
    Ok(())
}

/// Every run folder (a folder with a `run.toml`) directly inside `runs_dir`, sorted by name.
pub fn run_folders(runs_dir: &Path) -> std::io::Result<Vec<PathBuf>> {
    let mut out: Vec<PathBuf> = std::fs::read_dir(runs_dir)?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.join("run.toml").is_file())
        .collect();
    out.sort();
    Ok(out)
}

/// Rebuilds the history of `runs_dir` from its run folders; folders that cannot be read are
/// returned with the reason, not fatal.
pub fn rebuild(runs_dir: &Path) -> anyhow::Result<(usize, Vec<(PathBuf, String)>)> {
    let mut records = Vec::new();
    let mut skipped = Vec::new();
    for folder in run_folders(runs_dir)? {
        match WaferRun::load(&folder) {
            Ok(run) => records.push(record_of(&run)),
            Err(e) => skipped.push((folder, crate::error_text::chain_text(&e))),
        }
    }
    let mut h = History::open(&db_path(runs_dir))?;
    h.rebuild(&records)
        .map_err(|e: HistoryError| anyhow::anyhow!(e))?;
    Ok((records.len(), skipped))
}
