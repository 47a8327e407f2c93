//! Fitting stored spectra again: after a stop (spectra stored but not fitted) and for
//! `isopach refit` with a new model, window or method. No stage motion.
//!
//! A refit is all-or-nothing (see [`super::events::settled`]): `refit-started` (naming the
//! `run.toml` kept from before), then `run.toml` with the new recipe, the fits, and
//! `refit-finished`. A refit killed before its end is discarded by the next session on the
//! run ([`discard_unfinished`]): the kept `run.toml` comes back and the old fits stand.

use super::drift::ReferenceTimeline;
use super::events::{fit_event, Event, SiteState};
use super::folder::{read_run_toml, RunFolder};
use super::journal;
use crate::fit::shared::SharedDispersion;
use crate::fit::Fitter;
use crate::recipe::schema::{AcceptSpec, Recipe};
use crate::recipe::LoadedRecipe;
use crate::spectrum::{read_csv, SignalQuality, Spectrum, SpectrumFile};
use anyhow::Context;

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
    let result = stored_reflectance(
        folder,
        (site, attempt, rel),
        timeline,
        fitter,
        reference_material,
    )
    .map(|(spectrum, quality)| fitter.fit_with_quality(&spectrum, &quality));
    fit_event(site, attempt, result, accept)
}

/// The stored spectrum of one attempt (`(site, attempt, file)`) as the fit sees it:
/// reflectance, normalised by the reference interpolated in time, with the flags its counts
/// earned.
pub fn stored_reflectance(
    folder: &RunFolder,
    (site, attempt, rel): (usize, u32, &str),
    timeline: &ReferenceTimeline,
    fitter: &Fitter,
    reference_material: &str,
) -> Result<(Spectrum, SignalQuality), String> {
    match read_csv(&folder.root.join(rel)) {
        Ok(SpectrumFile::Counts(raw)) => {
            timeline
                .corrected(folder, site, attempt, raw)
                .and_then(|raw| {
                    fitter
                        .reflectance_of_raw(&raw, reference_material)
                        .map_err(|e| e.to_string())
                })
        }
        Ok(SpectrumFile::Reflectance(spectrum)) => Ok((spectrum, SignalQuality::default())),
        Err(e) => Err(e.to_string()),
    }
}

/// The recipe with the fitted material replaced by `dispersion`'s formula (nothing left
/// to fit), for fitting every site's thickness with the shared dispersion.
pub fn recipe_with_dispersion(
    loaded: &LoadedRecipe,
    dispersion: &SharedDispersion,
) -> LoadedRecipe {
    let mut r = loaded.clone();
    r.recipe
        .materials
        .insert(dispersion.material.clone(), dispersion.spec.clone());
    r
}

/// A shared-dispersion refit (`film.dispersion = "shared"`): every stored attempt fitted at
/// the nominal coefficients, one dispersion fitted jointly to the valid sites' newest valid
/// attempts, then every attempt fitted again with it. Returns the `dispersion-fitted` event
/// and the fits, to journal inside a refit; `Err` says why no joint fit could be made.
#[allow(clippy::too_many_arguments)] // the same set-up as fit_all, plus the recipe
pub fn shared_dispersion_fits(
    folder: &RunFolder,
    attempts: &[(usize, u32, String)],
    timeline: &ReferenceTimeline,
    fitter: &Fitter,
    loaded: &LoadedRecipe,
    reference_material: &str,
    accept: &AcceptSpec,
    on_done: &(dyn Fn() + Sync),
) -> anyhow::Result<Vec<Event>> {
    let nominal = fit_all(
        folder,
        attempts,
        timeline,
        fitter,
        reference_material,
        accept,
        &|| {},
    );
    // The newest valid attempt of each site seeds the joint fit.
    let mut chosen: std::collections::BTreeMap<usize, (u32, &str, Vec<f64>)> = Default::default();
    for ((site, attempt, rel), e) in attempts.iter().zip(&nominal) {
        if let Event::SiteFitted {
            fit, valid: true, ..
        } = e
        {
            let seed = fit.layers.iter().map(|l| l.thickness_nm).collect();
            if chosen.get(site).is_none_or(|c| c.0 < *attempt) {
                chosen.insert(*site, (*attempt, rel.as_str(), seed));
            }
        }
    }
    let mut spectra = Vec::new();
    let mut seeds = Vec::new();
    for (site, (attempt, rel, seed)) in chosen {
        if let Ok((s, _)) = stored_reflectance(
            folder,
            (site, attempt, rel),
            timeline,
            fitter,
            reference_material,
        ) {
            spectra.push(s);
            seeds.push(seed);
        }
    }
    if spectra.is_empty() {
        anyhow::bail!("no site has a valid fit at the nominal coefficients to start the shared dispersion fit from");
    }
    let dispersion = crate::fit::shared::fit_spectra(fitter, &spectra, &seeds, None)?;
    let with = Fitter::from_recipe(&recipe_with_dispersion(loaded, &dispersion))?
        .with_resolution_nm(fitter.resolution_nm());
    let mut events = vec![Event::DispersionFitted {
        time: super::events::now(),
        dispersion: Box::new(dispersion),
    }];
    events.extend(fit_all(
        folder,
        attempts,
        timeline,
        &with,
        reference_material,
        accept,
        on_done,
    ));
    Ok(events)
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

/// Fits many stored attempts on all cores; events come back in the order given. Workers take
/// the next attempt as they finish one (fits differ in cost), and a worker that panics
/// takes the refit down with it rather than leaving its sites out.
pub fn fit_all(
    folder: &RunFolder,
    attempts: &[(usize, u32, String)],
    timeline: &ReferenceTimeline,
    fitter: &Fitter,
    reference_material: &str,
    accept: &AcceptSpec,
    on_done: &(dyn Fn() + Sync),
) -> Vec<Event> {
    use std::sync::atomic::{AtomicUsize, Ordering};
    let workers = std::thread::available_parallelism()
        .map(|n| n.get())
        .unwrap_or(1)
        .clamp(1, attempts.len().max(1));
    let next = AtomicUsize::new(0);
    let mut fitted: Vec<(usize, Event)> = std::thread::scope(|scope| {
        let handles: Vec<_> = (0..workers)
            .map(|_| {
                scope.spawn(|| {
                    let mut mine = Vec::new();
                    loop {
                        let i = next.fetch_add(1, Ordering::Relaxed);
                        let Some((site, attempt, rel)) = attempts.get(i) else {
                            return mine;
                        };
                        mine.push((
                            i,
                            fit_stored(
                                folder,
                                *site,
                                *attempt,
                                rel,
                                timeline,
                                fitter,
                                reference_material,
                                accept,
                            ),
                        ));
                        on_done();
                    }
                })
            })
            .collect();
        handles
            .into_iter()
            .flat_map(|h| h.join().unwrap_or_else(|p| std::panic::resume_unwind(p)))
            .collect()
    });
    fitted.sort_unstable_by_key(|(i, _)| *i);
    fitted.into_iter().map(|(_, e)| e).collect()
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

/// Discards a refit that a kill left unfinished at the end of the run's journal: its fits
/// already do not count; this puts back the `run.toml` kept from before it, so the recipe
/// matches the fits again. Returns a note saying what was done (`None`: nothing to do).
pub fn discard_unfinished(folder: &RunFolder) -> anyhow::Result<Option<String>> {
    if !folder.journal().exists() {
        return Ok(None);
    }
    // Only the end of the journal: from its last session or refit boundary on.
    let events =
        journal::read_since::<Event>(&folder.journal(), super::events::settles_refits)?.events;
    let Some(Event::RefitStarted {
        time,
        recipe,
        previous,
        ..
    }) = super::events::settled(&events).1
    else {
        return Ok(None);
    };
    let mut note = format!(
        "a refit with recipe \"{recipe}\" started {time} did not finish (killed or stopped \
         mid-way): it is discarded, its fits are ignored and every site keeps its fit from \
         before it"
    );
    match previous.as_ref().map(|p| (p, folder.root.join(p))) {
        Some((previous, kept)) if kept.exists() => {
            // The kept file must be a valid run.toml before it replaces the current one.
            read_run_toml(&kept)?;
            let bytes =
                std::fs::read(&kept).with_context(|| format!("cannot read {}", kept.display()))?;
            super::files::write_atomic(&folder.run_toml(), &bytes)
                .with_context(|| format!("cannot restore {}", folder.run_toml().display()))?;
            note.push_str(&format!(
                "; run.toml is restored from {previous} (to apply that recipe, run the refit again)"
            ));
        }
        Some((previous, _)) => note.push_str(&format!(
            "; the run.toml kept from before it ({previous}) is gone, so run.toml still holds \
             the refit's recipe: run `isopach refit` again to fit every site with it"
        )),
        None => {}
    }
    Ok(Some(note))
}
