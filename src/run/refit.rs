//! Fitting stored spectra again: after a stop (spectra stored but not fitted) and for
//! `isopach refit` with a new model, window or method. No stage motion.

use super::drift::ReferenceTimeline;
use super::events::{fitted, now, Event, SiteState};
use super::folder::RunFolder;
use crate::fit::Fitter;
use crate::recipe::schema::{AcceptSpec, Recipe};
use crate::spectrum::{read_csv, SpectrumFile};

/// Fits the stored spectrum of one attempt, normalised by the reference interpolated in time
/// (`timeline`, see [`super::drift`]), and gives the journal event for it.
#[allow(clippy::too_many_arguments)] // one attempt, its references and the fit set-up
pub fn fit_stored(
    folder: &RunFolder,
    site: usize,
    attempt: u32,
    rel: &str,
    timeline: &ReferenceTimeline,
    fitter: &Fitter,
    reference_material: &str,
    accept: &AcceptSpec,
) -> Event {
    let fitted = |fit| fitted(site, attempt, fit, accept);
    let failed = |reason: String| Event::SiteFailed {
        time: now(),
        site,
        attempt,
        reason,
    };
    match read_csv(&folder.root.join(rel)) {
        Ok(SpectrumFile::Counts(raw)) => match timeline
            .corrected(folder, site, attempt, raw)
            .and_then(|raw| {
                fitter
                    .fit_raw(&raw, reference_material)
                    .map_err(|e| e.to_string())
            }) {
            Ok(fit) => fitted(fit),
            Err(e) => failed(e),
        },
        Ok(SpectrumFile::Reflectance(spectrum)) => fitted(fitter.fit(&spectrum)),
        Err(e) => failed(e.to_string()),
    }
}

/// Every stored attempt of every site, as (site, attempt, spectrum file).
pub fn stored_attempts(states: &[SiteState]) -> Vec<(usize, u32, String)> {
    states
        .iter()
        .flat_map(|s| {
            s.attempts
                .iter()
                .filter_map(move |a| a.spectrum.clone().map(|f| (s.site.number, a.attempt, f)))
        })
        .collect()
}

/// Fits many stored attempts on all cores; events come back in the order given.
pub fn fit_all(
    folder: &RunFolder,
    attempts: &[(usize, u32, String)],
    timeline: &ReferenceTimeline,
    fitter: &Fitter,
    reference_material: &str,
    accept: &AcceptSpec,
    on_done: &(dyn Fn() + Sync),
) -> Vec<Event> {
    let workers = std::thread::available_parallelism()
        .map(|n| n.get())
        .unwrap_or(1)
        .max(1);
    let chunk = attempts.len().div_ceil(workers).max(1);
    std::thread::scope(|scope| {
        let handles: Vec<_> = attempts
            .chunks(chunk)
            .map(|part| {
                scope.spawn(move || {
                    part.iter()
                        .map(|(site, attempt, rel)| {
                            let e = fit_stored(
                                folder,
                                *site,
                                *attempt,
                                rel,
                                timeline,
                                fitter,
                                reference_material,
                                accept,
                            );
                            on_done();
                            e
                        })
                        .collect::<Vec<_>>()
                })
            })
            .collect();
        handles
            .into_iter()
            .flat_map(|h| h.join().unwrap_or_default())
            .collect()
    })
}

/// Why a recipe cannot refit a run.
#[derive(Debug, thiserror::Error)]
#[error("recipe {new} cannot refit this run: its {what} differs from the run's (refit changes only [film], [accept] and [materials]; measure a new run for another {what})")]
pub struct PlanMismatch {
    pub new: String,
    pub what: &'static str,
}

/// The run's recipe with the film model, acceptance and materials of `new`.
pub fn refit_recipe(frozen: &Recipe, new: &Recipe) -> Result<Recipe, PlanMismatch> {
    let mismatch = |what| PlanMismatch {
        new: new.name.clone(),
        what,
    };
    if frozen.wafer != new.wafer {
        return Err(mismatch("[wafer]"));
    }
    if frozen.pattern != new.pattern {
        return Err(mismatch("[pattern]"));
    }
    let mut r = frozen.clone();
    r.film = new.film.clone();
    r.accept = new.accept.clone();
    r.materials = new.materials.clone();
    Ok(r)
}
