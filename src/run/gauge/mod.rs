//! The figures of a gauge study (`isopach gauge`), derived from its journal and stored spectra
//! like every other file of a run folder: `gauge.json` (per site and pooled: mean,
//! repeatability, reproducibility, combined σ, the fit's own σ, the Cramér–Rao bound from the
//! measured noise; P/T, ndc and the verdict) and `gauge.html`, the page.
//!
//! The readings of a site are its valid fits, each in the pass its attempt number says
//! ([`GaugeSettings::pass_of`]); invalid readings are counted, not used.

pub mod crb;
pub mod figures;
mod page;

use super::derive::{frozen_gauge, read_states};
use super::events::SiteState;
use super::folder::RunFolder;
use super::measure::machine_of;
use super::new_run::loaded_recipe;
use super::plan::{GaugeSettings, Plan};
use crate::fit::FitResult;
use crate::spectrum::{normalise, read_csv, SpectrumFile};
use anyhow::Context;
use figures::{Capability, Reading, Scatter};
use serde::{Deserialize, Serialize};

/// Name of the study's figures in a run folder.
pub const GAUGE_JSON: &str = "gauge.json";
/// Name of the study's page in a run folder.
pub const GAUGE_HTML: &str = "gauge.html";

/// One reading as `gauge.json` lists it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ReadingRow {
    pub pass: u32,
    pub attempt: u32,
    pub thickness_nm: f64,
    pub fit_sigma_nm: f64,
}

/// One site of the study.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SiteGauge {
    pub site: usize,
    pub x_mm: f64,
    pub y_mm: f64,
    pub readings: Vec<ReadingRow>,
    /// Acquisitions whose fit is not valid (not used).
    pub invalid: usize,
    /// Measured noise level of the normalised reflectance, 1σ (see [`crb`]).
    pub noise_level: Option<f64>,
    /// The bound with each pixel's own measured noise, 1/√Σ(∂R_i/∂d)²/σ_i² (see [`crb`]).
    pub crb_per_pixel_nm: Option<f64>,
    /// The σ an unweighted least-squares fit attains with that noise (see [`crb`]).
    pub unweighted_nm: Option<f64>,
    #[serde(flatten)]
    pub scatter: Scatter,
}

/// The content of `gauge.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GaugeReport {
    pub run: String,
    pub study: GaugeSettings,
    /// The (first fitted) layer the figures are of.
    pub layer: String,
    pub sites: Vec<SiteGauge>,
    pub pooled: Scatter,
    pub capability: Capability,
    /// Readings asked for (sites × passes × repeats) and journalled so far.
    pub planned: usize,
    pub measured: usize,
}

/// Writes `gauge.json` and `gauge.html` of the run in `folder` when it is a gauge study;
/// `None` for a map.
pub fn write_gauge_outputs(folder: &RunFolder) -> anyhow::Result<Option<GaugeReport>> {
    let Some(settings) = frozen_gauge(folder)? else {
        return Ok(None);
    };
    let meta = folder.read_run_toml()?;
    let (_, states) = read_states(folder, &meta)?;
    let loaded = loaded_recipe(folder, &meta);
    let plan = Plan::for_sites(&loaded, machine_of(&meta)?.as_ref(), &[])?;
    let sites: Vec<SiteGauge> = states
        .iter()
        .filter(|s| !s.attempts.is_empty())
        .map(|s| site_gauge(folder, &plan, &settings, s))
        .collect();
    let scatters: Vec<Scatter> = sites.iter().map(|s| s.scatter.clone()).collect();
    let pooled = Scatter::pooled(&scatters);
    let means: Vec<f64> = scatters.iter().filter_map(|s| s.mean_nm).collect();
    let per_site = pooled.count as f64 / sites.len().max(1) as f64;
    let capability = Capability::of(
        pooled.combined_nm,
        loaded.recipe.accept.spec_nm,
        &means,
        per_site,
    );
    let report = GaugeReport {
        run: meta.run.id.clone(),
        study: settings,
        layer: super::outputs::fitted_layer_names(&meta.recipe)
            .first()
            .cloned()
            .unwrap_or_default(),
        planned: states.len() * (settings.passes * settings.repeats) as usize,
        measured: states
            .iter()
            .flat_map(|s| &s.attempts)
            .filter(|a| a.spectrum.is_some())
            .count(),
        sites,
        pooled,
        capability,
    };
    let json = serde_json::to_vec_pretty(&report)?;
    let path = folder.root.join(GAUGE_JSON);
    super::files::write_atomic(&path, &json)
        .with_context(|| format!("cannot write {}", path.display()))?;
    let path = folder.root.join(GAUGE_HTML);
    super::files::write_atomic(&path, page::html(&report).as_bytes())
        .with_context(|| format!("cannot write {}", path.display()))?;
    Ok(Some(report))
}

/// Reads `gauge.json` back.
pub fn read_gauge(folder: &RunFolder) -> anyhow::Result<GaugeReport> {
    let path = folder.root.join(GAUGE_JSON);
    let bytes = std::fs::read(&path).with_context(|| format!("cannot read {}", path.display()))?;
    serde_json::from_slice(&bytes).with_context(|| format!("{} does not parse", path.display()))
}

/// The figures of one site: its valid readings by pass, the measured noise and the bound.
fn site_gauge(
    folder: &RunFolder,
    plan: &Plan,
    settings: &GaugeSettings,
    state: &SiteState,
) -> SiteGauge {
    let mut readings = Vec::new();
    let mut fits: Vec<&FitResult> = Vec::new();
    let mut invalid = 0;
    let mut groups: Vec<(u32, Vec<Vec<f64>>)> = Vec::new();
    let mut wavelengths: Vec<f64> = Vec::new();
    for a in &state.attempts {
        let Some(pass) = settings.pass_of(a.attempt) else {
            continue;
        };
        let fit = a.fit.as_ref().filter(|_| a.valid);
        let Some((fit, layer)) = fit.and_then(|f| Some((f, f.layers.first()?))) else {
            invalid += usize::from(a.spectrum.is_some());
            continue;
        };
        readings.push(ReadingRow {
            pass,
            attempt: a.attempt,
            thickness_nm: layer.thickness_nm,
            fit_sigma_nm: layer.sigma_nm,
        });
        fits.push(fit);
        if let Some((wl, r)) = a
            .spectrum
            .as_ref()
            .and_then(|rel| reflectance(folder, plan, rel))
        {
            match groups.iter_mut().find(|(p, _)| *p == pass) {
                Some((_, g)) => g.push(r),
                None => groups.push((pass, vec![r])),
            }
            wavelengths = wl;
        }
    }
    let groups: Vec<Vec<Vec<f64>>> = groups.into_iter().map(|(_, g)| g).collect();
    let noise = crb::noise_variance(&groups);
    let as_readings: Vec<Reading> = readings
        .iter()
        .map(|r| Reading {
            pass: r.pass,
            thickness_nm: r.thickness_nm,
            fit_sigma_nm: r.fit_sigma_nm,
        })
        .collect();
    // The bound at the site's mean thickness, the stack's other layers as fitted.
    let mean = figures::Scatter::of_site(&as_readings, None).mean_nm;
    let bound = noise
        .zip(mean)
        .zip(fits.first())
        .and_then(|((var, d), fit)| {
            let mut at = (*fit).clone();
            at.layers[0].thickness_nm = d;
            let g = crb::slope(&plan.fitter, &at, &wavelengths);
            let per_pixel = crb::pixel_variance(&groups).filter(|v| v.len() == g.len());
            Some((
                crb::bound_nm(var, &g)?,
                per_pixel
                    .as_ref()
                    .and_then(|v| crb::bound_per_pixel_nm(v, &g)),
                per_pixel
                    .as_ref()
                    .and_then(|v| crb::unweighted_sigma_nm(v, &g)),
            ))
        });
    SiteGauge {
        site: state.site.number,
        x_mm: state.site.x_mm,
        y_mm: state.site.y_mm,
        readings,
        invalid,
        noise_level: noise.map(f64::sqrt),
        crb_per_pixel_nm: bound.and_then(|b| b.1),
        unweighted_nm: bound.and_then(|b| b.2),
        scatter: Scatter::of_site(&as_readings, bound.map(|b| b.0)),
    }
}

/// The normalised reflectance of a stored spectrum over the fit window (against the dark and
/// reference stored with it), with its wavelengths.
fn reflectance(folder: &RunFolder, plan: &Plan, rel: &str) -> Option<(Vec<f64>, Vec<f64>)> {
    let SpectrumFile::Counts(raw) = read_csv(&folder.root.join(rel)).ok()? else {
        return None;
    };
    let r_ref = plan
        .fitter
        .reference_reflectance(&plan.reference_material, &raw.sample.wavelength_nm)
        .ok()?;
    let s = normalise(&raw.sample, &raw.dark, &raw.reference, &r_ref).ok()?;
    let [lo, hi] = plan.fitter.window_nm();
    let w = s.window(lo, hi);
    Some((w.wavelength_nm, w.reflectance))
}
