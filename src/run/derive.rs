//! Rebuilding a run folder's derived files from its journal: `sites.csv`, `summary.json` and
//! the maps (the run's entry in the history is written from them by `history_entry`).
//! Deterministic: the same journal gives the same files, so a rebuild after a crash matches a
//! clean run.

use super::events::{current_dispersion, site_states, Event, SiteState};
use super::folder::{RunFolder, RunToml};
use super::journal;
use super::outputs::{fitted_layer_names, write_run_outputs_with, Fitted};
use super::plan::frozen::FrozenPlan;
use super::plan::GaugeSettings;
use crate::bench::centring::CentringSettings;
use crate::map::sites_table::SiteRow;
use crate::map::stats::Summary;
use crate::recipe::{pattern, Site, Wafer};
use anyhow::Context;

/// Flag of a planned site that has no attempt yet.
pub const NOT_MEASURED: &str = "not-measured";

/// The planned sites of a run in measuring order: its frozen `plan.json`, or for a run made
/// before plans were frozen, the frozen recipe's pattern in the order it would be planned.
pub fn planned_order(folder: &RunFolder, meta: &RunToml) -> anyhow::Result<Vec<Site>> {
    if let Some(frozen) = read_frozen(folder)? {
        return Ok(frozen.ordered_sites());
    }
    let sites = pattern::sites(&meta.recipe.pattern, &Wafer::from_spec(&meta.recipe.wafer));
    Ok(super::plan::order(&meta.recipe.pattern, &sites))
}

/// The centring a run asked for (`run --centre`), as frozen in its `plan.json`.
pub fn frozen_centring(folder: &RunFolder) -> anyhow::Result<Option<CentringSettings>> {
    Ok(read_frozen(folder)?.and_then(|f| f.centring))
}

/// The gauge study a run is (`isopach gauge`), as frozen in its `plan.json`; `None`: a map.
pub fn frozen_gauge(folder: &RunFolder) -> anyhow::Result<Option<GaugeSettings>> {
    Ok(read_frozen(folder)?.and_then(|f| f.gauge))
}

fn read_frozen(folder: &RunFolder) -> anyhow::Result<Option<FrozenPlan>> {
    let path = folder.plan_json();
    if !path.exists() {
        return Ok(None);
    }
    let text = std::fs::read(&path).with_context(|| format!("cannot read {}", path.display()))?;
    let frozen = serde_json::from_slice(&text)
        .with_context(|| format!("{} is not a valid plan", path.display()))?;
    Ok(Some(frozen))
}

/// The planned sites of a run, in site-number order.
pub fn planned_sites(folder: &RunFolder, meta: &RunToml) -> anyhow::Result<Vec<Site>> {
    let mut sites = planned_order(folder, meta)?;
    sites.sort_by_key(|s| s.number);
    Ok(sites)
}

/// Reads the journal and folds it into per-site state.
pub fn read_states(
    folder: &RunFolder,
    meta: &RunToml,
) -> anyhow::Result<(Vec<Event>, Vec<SiteState>)> {
    // A run folder whose first session has not journalled anything yet has no journal.
    let events: Vec<Event> = if folder.journal().exists() {
        journal::read(&folder.journal())?.events
    } else {
        Vec::new()
    };
    let states = site_states(&planned_sites(folder, meta)?, &events);
    Ok((events, states))
}

/// One `sites.csv` row per planned site: its best attempt, or `not-measured`.
pub fn rows(states: &[SiteState], layers: usize) -> Vec<SiteRow> {
    states
        .iter()
        .map(|s| {
            let best = s.best();
            let fit = best.and_then(|a| a.fit.as_ref());
            let pick = |f: &dyn Fn(&crate::fit::LayerResult) -> f64| -> Vec<f64> {
                (0..layers)
                    .map(|k| fit.and_then(|r| r.layers.get(k)).map(f).unwrap_or(f64::NAN))
                    .collect()
            };
            SiteRow {
                site: s.site.number,
                x_mm: s.site.x_mm,
                y_mm: s.site.y_mm,
                thickness_nm: pick(&|l| l.thickness_nm),
                sigma_nm: pick(&|l| l.sigma_nm),
                gof: fit.map(|f| f.gof).unwrap_or(f64::NAN),
                flag: match best {
                    None => NOT_MEASURED.to_string(),
                    Some(a) if a.flag.is_empty() => "not-fitted".to_string(),
                    Some(a) => a.flag.clone(),
                },
            }
        })
        .collect()
}

/// What a rebuild wrote, and the journal's events it was made from (read once, for the
/// run's history entry too).
pub struct Rebuilt {
    pub summary: Summary,
    pub events: Vec<Event>,
}

/// Rewrites every derived file of the run from its journal.
pub fn rebuild(folder: &RunFolder) -> anyhow::Result<Rebuilt> {
    let meta = folder.read_run_toml()?;
    let (events, states) = read_states(folder, &meta)?;
    let layers = fitted_layer_names(&meta.recipe).len().max(1);
    let rows = rows(&states, layers);
    let shared = current_dispersion(&events);
    let fitted = Fitted {
        columns: coefficient_columns(&states, shared),
        dispersion: shared.and_then(|d| serde_json::to_value(d).ok()),
    };
    let summary = write_run_outputs_with(folder, &rows, &meta, &fitted)?;
    // A gauge study's own figures are derived files too.
    super::gauge::write_gauge_outputs(folder)?;
    Ok(Rebuilt { summary, events })
}

/// `MATERIAL.NAME` and `MATERIAL.NAME_sigma` of every fitted coefficient, one value per
/// site from its best attempt's fit: per site when fitted per site, the shared value when
/// the fits were made with a shared dispersion (see [`current_dispersion`]).
fn coefficient_columns(
    states: &[SiteState],
    shared: Option<&crate::fit::shared::SharedDispersion>,
) -> Vec<(String, Vec<f64>)> {
    if let Some(d) = shared {
        let measured: Vec<bool> = states.iter().map(|s| s.best().is_some()).collect();
        let each = |v: f64| -> Vec<f64> {
            measured
                .iter()
                .map(|m| if *m { v } else { f64::NAN })
                .collect()
        };
        return d
            .coefficients
            .iter()
            .flat_map(|t| {
                [
                    (t.name.clone(), each(t.value)),
                    (format!("{}_sigma", t.name), each(t.sigma)),
                ]
            })
            .collect();
    }
    let fits: Vec<Option<&crate::fit::FitResult>> = states
        .iter()
        .map(|s| s.best().and_then(|a| a.fit.as_ref()))
        .collect();
    let mut names: Vec<&str> = Vec::new();
    for t in fits.iter().flatten().flat_map(|f| &f.terms) {
        if t.name.contains('.') && !names.contains(&t.name.as_str()) {
            names.push(&t.name);
        }
    }
    let mut out = Vec::new();
    for name in names {
        let term = |f: &Option<&crate::fit::FitResult>| -> Option<crate::fit::Term> {
            f.and_then(|f| f.terms.iter().find(|t| t.name == name).cloned())
        };
        out.push((
            name.to_string(),
            fits.iter()
                .map(|f| term(f).map_or(f64::NAN, |t| t.value))
                .collect(),
        ));
        out.push((
            format!("{name}_sigma"),
            fits.iter()
                .map(|f| term(f).map_or(f64::NAN, |t| t.sigma))
                .collect(),
        ));
    }
    out
}
