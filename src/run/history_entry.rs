//! A run's entry in the run-to-run history, made from the values `derive` computed, or read
//! back from run folders for `trend --rebuild`.
//!
//! The dependency is one way: `run` feeds `history` plain values; `history` never reads a run
//! folder itself.

use super::folder::{RunFolder, RunToml};
use super::outputs::read_outputs;
use crate::history::db::RunRecord;
use crate::history::record::{self, RunIdentity};
use crate::map::sites_table::SiteRow;
use crate::map::stats::Summary;
use std::path::{Path, PathBuf};

/// The history record of the run in `folder` from its frozen `run.toml`, rows and summary.
pub fn entry(folder: &Path, meta: &RunToml, rows: &[SiteRow], summary: &Summary) -> RunRecord {
    let id = RunIdentity {
        run_id: meta.run.id.clone(),
        folder: folder.display().to_string(),
        recipe: meta.recipe.name.clone(),
        wafer: meta.run.wafer.clone(),
        lot: meta.run.lot.clone(),
        started: meta.run.started.clone(),
    };
    record::record_of(id, summary, rows)
}

/// Records (or re-records) the run in `folder` in the history of the folder's parent.
pub fn record(
    folder: &RunFolder,
    meta: &RunToml,
    rows: &[SiteRow],
    summary: &Summary,
) -> anyhow::Result<()> {
    let parent = folder.root.parent().unwrap_or(Path::new("."));
    record::record(parent, &entry(&folder.root, meta, rows, summary))?;
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
pub fn rebuild_history(runs_dir: &Path) -> anyhow::Result<(usize, Vec<(PathBuf, String)>)> {
    let mut records = Vec::new();
    let mut skipped = Vec::new();
    for folder in run_folders(runs_dir)? {
        match read_outputs(&folder) {
            Ok(o) => records.push(entry(&folder, &o.meta, &o.rows, &o.summary)),
            Err(e) => skipped.push((folder, crate::error_text::chain_text(&e))),
        }
    }
    record::rebuild(runs_dir, &records)?;
    Ok((records.len(), skipped))
}
