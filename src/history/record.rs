//! What the history keeps of a run, made from plain values (the run's identity, its site rows
//! and their summary), and the index kept up to date.
//!
//! The history knows nothing of run folders: `run` hands it the rows it has just derived
//! (`run::derive::rebuild`), or reads them back for `trend --rebuild` (`run::history_entry`).

pub use super::db::RunIdentity;
use super::db::{History, HistoryError, LayerRecord, RunRecord, SiteRecord};
use crate::map::sites_table::SiteRow;
use crate::map::stats::Summary;
use std::path::{Path, PathBuf};

/// The history database of a runs folder (a dot file, so `runs/*` lists only run folders).
pub fn db_path(runs_dir: &Path) -> PathBuf {
    runs_dir.join(".history.sqlite")
}

/// The history record of a run from its identity, summary and site rows.
pub fn record_of(id: RunIdentity, summary: &Summary, rows: &[SiteRow]) -> RunRecord {
    let layers = summary
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
    let sites = rows
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
    RunRecord { id, layers, sites }
}

/// Records (or re-records) one run in the history of `runs_dir`.
pub fn record(runs_dir: &Path, run: &RunRecord) -> Result<(), HistoryError> {
    History::open(&db_path(runs_dir))?.record(run)
}

/// Replaces the whole history of `runs_dir` with `runs`, in one transaction.
pub fn rebuild(runs_dir: &Path, runs: &[RunRecord]) -> Result<(), HistoryError> {
    History::open(&db_path(runs_dir))?.rebuild(runs)
}
