//! What the history keeps of a run, made from plain values (the run's identity, its site rows
//! and their summary), and the index kept up to date.
//!
//! The history knows nothing of run folders: `run` reads a run's rows and sessions from its
//! folder and hands them over (`run::history_entry`), at the end of a session and for
//! `trend --rebuild`.

use super::db::{LayerRecord, RunRecord, SiteRecord};
pub use super::db::{RunIdentity, SessionRecord};
use crate::map::sites_table::SiteRow;
use crate::map::stats::Summary;

/// The history record of a run from its identity, sessions, summary and site rows.
pub fn record_of(
    id: RunIdentity,
    sessions: Vec<SessionRecord>,
    summary: &Summary,
    rows: &[SiteRow],
) -> RunRecord {
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
            spec_lo_nm: l.spec.as_ref().map_or(f64::NAN, |s| s.lo_nm),
            spec_hi_nm: l.spec.as_ref().map_or(f64::NAN, |s| s.hi_nm),
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
    RunRecord {
        id,
        sessions,
        layers,
        sites,
    }
}
