//! The live view's model of a run: the journal events seen so far, folded exactly as the run
//! folder's files are (`site_states` → site rows → summary), so the page's figures are the
//! ones `summary.json` will hold. Fed by [`LiveFeed`] (a subscriber of a session's events) or
//! by following `journal.jsonl` ([`LiveState::follow`], for a run of another process).
//!
//! The page also shows the newest fitted spectrum against its model: the stored spectrum is
//! read back and normalised exactly as a refit would (`refit::stored_reflectance`), and the
//! model drawn from the fit's own result, over the recipe's window, thinned to a few hundred
//! points.
//!
//! Every change is broadcast as one whole snapshot (JSON text) on a bounded channel: a page
//! that falls behind misses snapshots, never the latest, and the run never waits for it. A
//! page opened mid-run asks for the current snapshot first.

use super::derive::{planned_sites, read_states, rows};
use super::drift::ReferenceTimeline;
use super::events::{site_states, Event};
use super::folder::{RunFolder, RunToml};
use super::measure::{machine_of, reference_material};
use super::new_run::loaded_recipe;
use super::outputs::{fitted_layer_names, run_summary};
use super::plan::frozen::FrozenPlan;
use super::refit::stored_reflectance;
use super::stream::{RunEvent, Subscriber};
use crate::fit::{FitResult, Fitter};
use crate::map::colour;
use crate::recipe::Site;
use serde_json::json;
use std::sync::{Arc, Mutex};
use tokio::sync::broadcast;

/// Snapshots kept for a slow page before it starts missing them.
const BACKLOG: usize = 16;

/// Points of the spectrum plot at most (a page needs no more than it has pixels).
const SPECTRUM_POINTS: usize = 400;

/// What the page needs to draw a fitted spectrum against its model.
struct SpectrumSource {
    folder: RunFolder,
    fitter: Fitter,
    reference_material: String,
    window_nm: [f64; 2],
}

/// A run as the live page shows it.
pub struct LiveState {
    meta: RunToml,
    sites: Vec<Site>,
    per_site_s: f64,
    events: Vec<Event>,
    /// Measurements planned by the passes of this session (0: not known, use the plan).
    passes: usize,
    /// `None` when the run's frozen recipe cannot be fitted by this build.
    source: Option<SpectrumSource>,
    /// The newest fitted spectrum as the page draws it, and which attempt it is.
    last_spectrum: Option<((usize, u32), serde_json::Value)>,
}

impl LiveState {
    /// The state of the run in `folder` as its journal says now.
    pub fn read(folder: &RunFolder) -> anyhow::Result<LiveState> {
        let meta = folder.read_run_toml()?;
        let (events, _) = read_states(folder, &meta)?;
        let sites = planned_sites(folder, &meta)?;
        let source = Fitter::from_recipe(&loaded_recipe(folder, &meta))
            .ok()
            .map(|fitter| SpectrumSource {
                folder: folder.clone(),
                fitter,
                reference_material: reference_material(&machine_of(&meta).ok().flatten()),
                window_nm: meta.recipe.film.wavelength_nm,
            });
        let mut state = LiveState {
            meta,
            sites,
            per_site_s: per_site_s(folder),
            events,
            passes: 0,
            source,
            last_spectrum: None,
        };
        state.refresh_spectrum();
        Ok(state)
    }

    /// Draws the newest fitted spectrum anew when a newer fit has come in.
    fn refresh_spectrum(&mut self) {
        let newest = self.events.iter().rev().find_map(|e| match e {
            Event::SiteFitted {
                site, attempt, fit, ..
            } => Some((*site, *attempt, fit)),
            _ => None,
        });
        let Some((site, attempt, fit)) = newest else {
            return;
        };
        if self.last_spectrum.as_ref().map(|(k, _)| *k) == Some((site, attempt)) {
            return;
        }
        if let Some(view) = self.spectrum_view(site, attempt, fit) {
            self.last_spectrum = Some(((site, attempt), view));
        }
    }

    /// One attempt's spectrum and its model over the recipe's window, as the page draws them.
    fn spectrum_view(
        &self,
        site: usize,
        attempt: u32,
        fit: &FitResult,
    ) -> Option<serde_json::Value> {
        let source = self.source.as_ref()?;
        let rel = self.events.iter().rev().find_map(|e| match e {
            Event::SiteMeasured {
                site: s,
                attempt: a,
                spectrum,
                ..
            } if (*s, *a) == (site, attempt) => Some(spectrum.as_str()),
            _ => None,
        })?;
        let timeline = ReferenceTimeline::from_events(&self.events);
        let (spectrum, _) = stored_reflectance(
            &source.folder,
            (site, attempt, rel),
            &timeline,
            &source.fitter,
            &source.reference_material,
        )
        .ok()?;
        let [lo, hi] = source.window_nm;
        let inside: Vec<usize> = (0..spectrum.wavelength_nm.len())
            .filter(|&i| (lo..=hi).contains(&spectrum.wavelength_nm[i]))
            .collect();
        let step = inside.len().div_ceil(SPECTRUM_POINTS).max(1);
        let picked: Vec<usize> = inside.into_iter().step_by(step).collect();
        let wavelength_nm: Vec<f64> = picked.iter().map(|&i| spectrum.wavelength_nm[i]).collect();
        let measured: Vec<f64> = picked.iter().map(|&i| spectrum.reflectance[i]).collect();
        let model = source.fitter.model_reflectance(fit, &wavelength_nm);
        let finite = |v: Vec<f64>| -> Vec<Option<f64>> {
            v.into_iter().map(|x| x.is_finite().then_some(x)).collect()
        };
        Some(json!({
            "site": site,
            "attempt": attempt,
            "wavelength_nm": wavelength_nm,
            "measured": finite(measured),
            "model": finite(model),
            "thickness_nm": fit.layers.first().map(|l| l.thickness_nm).filter(|t| t.is_finite()),
            "gof": Some(fit.gof).filter(|g| g.is_finite()),
            "flags": fit.flags,
        }))
    }

    /// Takes the journal's events anew (a follower's step); whether anything changed.
    pub fn follow(&mut self, folder: &RunFolder) -> anyhow::Result<bool> {
        let (events, _) = read_states(folder, &self.meta)?;
        let changed = events != self.events;
        self.events = events;
        if changed {
            self.refresh_spectrum();
        }
        Ok(changed)
    }

    /// Folds one session event in; whether the page must be told.
    pub fn apply(&mut self, event: &RunEvent) -> bool {
        match event {
            RunEvent::Journal(e) => {
                self.events.push(e.clone());
                if matches!(e, Event::SiteFitted { .. }) {
                    self.refresh_spectrum();
                }
                true
            }
            RunEvent::Pass { sites, .. } => {
                self.passes += sites;
                true
            }
            _ => false,
        }
    }

    /// Results since the newest session began, and measurements it planned.
    fn progress(&self) -> (usize, usize) {
        let start = self
            .events
            .iter()
            .rposition(|e| matches!(e, Event::RunStarted { .. }))
            .unwrap_or(0);
        let mut planned = 0;
        let mut done = 0;
        for e in &self.events[start..] {
            match e {
                Event::RunStarted { sites_planned, .. } => planned = *sites_planned,
                Event::SiteFitted { .. } | Event::SiteFailed { .. } => done += 1,
                _ => {}
            }
        }
        let planned = if self.passes > 0 {
            self.passes
        } else {
            planned
        };
        (done, planned.max(done))
    }

    /// Whether the newest session finished or stopped, and why it stopped.
    fn ended(&self) -> (bool, Option<String>) {
        match self.events.iter().rev().find(|e| {
            matches!(
                e,
                Event::RunFinished { .. } | Event::RunStopped { .. } | Event::RunStarted { .. }
            )
        }) {
            Some(Event::RunFinished { .. }) => (true, None),
            Some(Event::RunStopped { reason, .. }) => (false, Some(reason.clone())),
            _ => (false, None),
        }
    }

    /// The whole page state as JSON.
    pub fn snapshot(&self) -> serde_json::Value {
        let layers = fitted_layer_names(&self.meta.recipe).len().max(1);
        let rows = rows(&site_states(&self.sites, &self.events), layers);
        let summary = run_summary(&rows, &self.meta);
        let f = &summary.first;
        let spec = self.meta.recipe.accept.spec_nm;
        let sites: Vec<serde_json::Value> = rows
            .iter()
            .map(|r| {
                let value = r.valid_value(0);
                json!({
                    "site": r.site,
                    "x_mm": r.x_mm,
                    "y_mm": r.y_mm,
                    "value_nm": value,
                    "flag": r.flag,
                    "measured": r.flag != super::derive::NOT_MEASURED,
                    "out_of_spec": f.spec.as_ref().is_some_and(|s| s.is_out(r.site)),
                })
            })
            .collect();
        let (done, planned) = self.progress();
        let (finished, stopped) = self.ended();
        let w = &self.meta.recipe.wafer;
        json!({
            "run": self.meta.run.id,
            "recipe": self.meta.recipe.name,
            "wafer": self.meta.run.wafer,
            "lot": self.meta.run.lot,
            "diameter_mm": w.diameter_mm,
            "edge_exclusion_mm": w.edge_exclusion_mm,
            "spec_nm": spec,
            "sites": sites,
            "done": done,
            "planned": planned,
            "time_left_s": if finished { 0.0 } else { planned.saturating_sub(done) as f64 * self.per_site_s },
            "finished": finished,
            "stopped": stopped,
            "stats": f,
            "verdict": summary.verdict,
            "last_spectrum": self.last_spectrum.as_ref().map(|(_, v)| v),
            "palette": (0..=10).map(|k| colour::scale(k as f64 / 10.0).hex()).collect::<Vec<_>>(),
        })
    }
}

/// The frozen plan's duration estimate per site (0 when the run has no `plan.json`).
fn per_site_s(folder: &RunFolder) -> f64 {
    std::fs::read(folder.plan_json())
        .ok()
        .and_then(|b| serde_json::from_slice::<FrozenPlan>(&b).ok())
        .map(|p| p.duration_s / p.sites.len().max(1) as f64)
        .unwrap_or(0.0)
}

/// Where snapshots go: the current one for a page that arrives, and a bounded broadcast of
/// each new one for pages already watching.
#[derive(Clone)]
pub struct LiveHub {
    latest: Arc<Mutex<Arc<str>>>,
    tx: broadcast::Sender<Arc<str>>,
}

impl LiveHub {
    /// A hub starting at `state`'s snapshot.
    pub fn new(state: &LiveState) -> LiveHub {
        let (tx, _) = broadcast::channel(BACKLOG);
        LiveHub {
            latest: Arc::new(Mutex::new(state.snapshot().to_string().into())),
            tx,
        }
    }

    /// Publishes `state`'s snapshot; never waits (no page, or a slow one, changes nothing).
    pub fn publish(&self, state: &LiveState) {
        let text: Arc<str> = state.snapshot().to_string().into();
        *self.latest.lock().unwrap_or_else(|e| e.into_inner()) = text.clone();
        let _ = self.tx.send(text);
    }

    /// The current snapshot.
    pub fn latest(&self) -> Arc<str> {
        self.latest
            .lock()
            .unwrap_or_else(|e| e.into_inner())
            .clone()
    }

    /// Snapshots from now on (a receiver that lags is told so and skips ahead).
    pub fn subscribe(&self) -> broadcast::Receiver<Arc<str>> {
        self.tx.subscribe()
    }
}

/// The live view as a subscriber of a session's events.
pub struct LiveFeed {
    pub state: LiveState,
    pub hub: LiveHub,
}

impl Subscriber for LiveFeed {
    fn on_event(&mut self, event: &RunEvent) -> anyhow::Result<()> {
        if self.state.apply(event) {
            self.hub.publish(&self.state);
        }
        Ok(())
    }
}
