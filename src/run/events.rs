//! Journal events of a map run, and how the state of every site is derived from them.
//!
//! The journal is the truth: `sites.csv`, `summary.json` and the maps are rebuilt from these
//! events. A site can have several attempts (retries, `remeasure`); each attempt can be fitted
//! several times (`refit`): the newest fit of an attempt counts, and a site's result is its
//! newest valid attempt, else its newest attempt.
//!
//! A refit is all-or-nothing: its fits sit between `refit-started` and `refit-finished` and
//! count only once `refit-finished` is journalled. A refit killed mid-way (no
//! `refit-finished` before the next session's `run-started`) is ignored, so no site state
//! ever mixes two optical models.

use crate::bench::centring::Centring;
use crate::fit::shared::SharedDispersion;
use crate::fit::{quality, FitResult};
use crate::recipe::schema::AcceptSpec;
use crate::recipe::Site;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// One line of `journal.jsonl`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "event", rename_all = "kebab-case")]
pub enum Event {
    /// The run began (or a `resume`/`remeasure`/`refit` session began on it).
    RunStarted {
        time: String,
        command: String,
        sites_planned: usize,
    },
    /// Dark and reference spectra were taken; files are relative to the run folder.
    ReferenceTaken {
        time: String,
        dark: String,
        reference: String,
    },
    /// A site's spectrum was acquired and stored.
    SiteMeasured {
        time: String,
        site: usize,
        attempt: u32,
        x_mm: f64,
        y_mm: f64,
        stage_x_mm: f64,
        stage_y_mm: f64,
        spectrum: String,
    },
    /// A stored spectrum was fitted.
    SiteFitted {
        time: String,
        site: usize,
        attempt: u32,
        fit: FitResult,
        valid: bool,
        flag: String,
    },
    /// A site could not be measured or fitted at all.
    SiteFailed {
        time: String,
        site: usize,
        attempt: u32,
        reason: String,
    },
    /// A refit began: the fits up to `refit-finished` replace the earlier ones all at once.
    RefitStarted {
        time: String,
        /// Name of the recipe the refit fits with.
        recipe: String,
        /// The `run.toml` kept from before the refit, relative to the run folder (`None`:
        /// the refit keeps the run's recipe).
        #[serde(default)]
        previous: Option<String>,
        /// How many stored spectra it fits.
        spectra: usize,
    },
    /// Every fit of the refit begun last is journalled: they count from here on.
    RefitFinished { time: String },
    /// One dispersion of the recipe's fitted material was fitted jointly to the sites'
    /// spectra (`film.dispersion = "shared"`); the fits after it in the same refit use it.
    DispersionFitted {
        time: String,
        dispersion: Box<SharedDispersion>,
    },
    /// `resume --machine` replaced the run's machine file (names of the old and new file, the
    /// dotted keys that changed); later sessions use the new one, frozen in `run.toml`.
    MachineChanged {
        time: String,
        old: String,
        new: String,
        keys: Vec<String>,
    },
    /// A gauge study's wafer was unloaded and loaded again (its `reload`-th time).
    WaferReloaded { time: String, reload: u64 },
    /// The session stopped early (Ctrl-C, fault); the run can be resumed.
    RunStopped { time: String, reason: String },
    /// Every planned site has a result.
    RunFinished { time: String },
    /// The wafer was centred from edge scans: its sites are placed by this centre and
    /// rotation from here on (resumed sessions too).
    WaferCentred {
        time: String,
        #[serde(flatten)]
        centring: Centring,
    },
}

/// The newest centring journalled, if any: what places the sites of the run.
pub fn journalled_centring(events: &[Event]) -> Option<&Centring> {
    events.iter().rev().find_map(|e| match e {
        Event::WaferCentred { centring, .. } => Some(centring),
        _ => None,
    })
}

impl Event {
    /// When the event happened (RFC 3339).
    pub fn time(&self) -> &str {
        match self {
            Event::RunStarted { time, .. }
            | Event::ReferenceTaken { time, .. }
            | Event::SiteMeasured { time, .. }
            | Event::SiteFitted { time, .. }
            | Event::SiteFailed { time, .. }
            | Event::RefitStarted { time, .. }
            | Event::RefitFinished { time }
            | Event::DispersionFitted { time, .. }
            | Event::MachineChanged { time, .. }
            | Event::WaferCentred { time, .. }
            | Event::WaferReloaded { time, .. }
            | Event::RunStopped { time, .. }
            | Event::RunFinished { time } => time,
        }
    }
}

/// Current time, RFC 3339 with the local offset.
pub fn now() -> String {
    chrono::Local::now().to_rfc3339_opts(chrono::SecondsFormat::Millis, false)
}

/// Whether a fit is acceptable, and the flag that goes into `sites.csv`: `ok` when valid
/// (warnings such as `ambiguous` stay in the journal), else the reasons joined by `;`.
pub fn judge(fit: &FitResult, accept: &AcceptSpec) -> (bool, String) {
    if fit.is_valid(accept.min_gof) {
        return (true, "ok".to_string());
    }
    let mut flags = fit.flags.clone();
    if fit.gof < accept.min_gof && !flags.iter().any(|f| f == quality::POOR_FIT) {
        flags.push(quality::POOR_FIT.to_string());
    }
    if flags.is_empty() {
        flags.push(quality::NO_FIT.to_string());
    }
    (false, flags.join(";"))
}

/// The journal event for one fit of an attempt: `site-fitted`, judged by `accept`, or
/// `site-failed` with the reason the fit could not be made.
pub fn fit_event(
    site: usize,
    attempt: u32,
    result: Result<FitResult, String>,
    accept: &AcceptSpec,
) -> Event {
    match result {
        Ok(fit) => {
            let (valid, flag) = judge(&fit, accept);
            Event::SiteFitted {
                time: now(),
                site,
                attempt,
                fit,
                valid,
                flag,
            }
        }
        Err(reason) => Event::SiteFailed {
            time: now(),
            site,
            attempt,
            reason,
        },
    }
}

/// One measurement attempt of a site.
#[derive(Debug, Clone, PartialEq)]
pub struct Attempt {
    pub attempt: u32,
    pub spectrum: Option<String>,
    pub fit: Option<FitResult>,
    pub valid: bool,
    pub flag: String,
}

/// Everything the journal says about one site.
#[derive(Debug, Clone, PartialEq)]
pub struct SiteState {
    pub site: Site,
    pub attempts: Vec<Attempt>,
}

impl SiteState {
    /// The attempt that represents the site: newest valid, else newest.
    pub fn best(&self) -> Option<&Attempt> {
        self.attempts
            .iter()
            .rev()
            .find(|a| a.valid)
            .or_else(|| self.attempts.last())
    }
    /// Whether the site has a valid result.
    pub fn is_valid(&self) -> bool {
        self.attempts.iter().any(|a| a.valid)
    }
    /// Attempts whose spectrum is stored but not fitted (a kill between the two).
    pub fn unfitted(&self) -> impl Iterator<Item = &Attempt> {
        self.attempts
            .iter()
            .filter(|a| a.spectrum.is_some() && a.fit.is_none() && a.flag.is_empty())
    }
    /// The number the next attempt gets.
    pub fn next_attempt(&self) -> u32 {
        self.attempts.iter().map(|a| a.attempt).max().unwrap_or(0) + 1
    }
}

/// The events that count, in order, and the `refit-started` of a refit left unfinished at
/// the end of the journal: the fits of a refit are held back until its `refit-finished` and
/// dropped when a session begins (`run-started`) or another refit starts before it.
pub fn settled(events: &[Event]) -> (Vec<&Event>, Option<&Event>) {
    let mut out = Vec::with_capacity(events.len());
    let mut refit: Option<(&Event, Vec<&Event>)> = None;
    for e in events {
        match e {
            Event::RefitStarted { .. } => refit = Some((e, Vec::new())),
            Event::RefitFinished { .. } => {
                if let Some((_, held)) = refit.take() {
                    out.extend(held);
                }
            }
            Event::RunStarted { .. } => {
                refit = None;
                out.push(e);
            }
            e => match &mut refit {
                Some((_, held)) => held.push(e),
                None => out.push(e),
            },
        }
    }
    (out, refit.map(|(started, _)| started))
}

/// Whether a journal line is an event that [`settled`] turns on (`run-started`,
/// `refit-started`, `refit-finished`): [`settled`] over the events from the last such line
/// to the end finds the same unfinished refit as over the whole journal. Reads only the tag.
pub fn settles_refits(line: &[u8]) -> bool {
    #[derive(Deserialize)]
    struct Tag<'a> {
        #[serde(borrow)]
        event: Option<std::borrow::Cow<'a, str>>,
    }
    serde_json::from_slice::<Tag>(line).is_ok_and(|t| {
        matches!(
            t.event.as_deref(),
            Some("run-started" | "refit-started" | "refit-finished")
        )
    })
}

/// The shared dispersion the counting fits were made with: journalled in the last finished
/// refit (a finished refit without one clears it; an unfinished one does not count).
pub fn current_dispersion(events: &[Event]) -> Option<&SharedDispersion> {
    let mut current = None;
    let mut pending: Option<Option<&SharedDispersion>> = None;
    for e in events {
        match e {
            Event::RefitStarted { .. } => pending = Some(None),
            Event::DispersionFitted { dispersion, .. } => match &mut pending {
                Some(p) => *p = Some(dispersion.as_ref()),
                None => current = Some(dispersion.as_ref()),
            },
            Event::RefitFinished { .. } => {
                if let Some(p) = pending.take() {
                    current = p;
                }
            }
            Event::RunStarted { .. } => pending = None,
            _ => {}
        }
    }
    current
}

/// Folds the journal into per-site state, for the planned sites (in site-number order); the
/// fits of an unfinished refit do not count (see [`settled`]).
pub fn site_states(plan: &[Site], events: &[Event]) -> Vec<SiteState> {
    let mut by_site: BTreeMap<usize, SiteState> = plan
        .iter()
        .map(|s| {
            (
                s.number,
                SiteState {
                    site: *s,
                    attempts: Vec::new(),
                },
            )
        })
        .collect();
    for e in settled(events).0 {
        let (site, attempt) = match e {
            Event::SiteMeasured { site, attempt, .. }
            | Event::SiteFitted { site, attempt, .. }
            | Event::SiteFailed { site, attempt, .. } => (*site, *attempt),
            _ => continue,
        };
        let Some(state) = by_site.get_mut(&site) else {
            continue;
        };
        let idx = match state.attempts.iter().position(|a| a.attempt == attempt) {
            Some(i) => i,
            None => {
                state.attempts.push(Attempt {
                    attempt,
                    spectrum: None,
                    fit: None,
                    valid: false,
                    flag: String::new(),
                });
                state.attempts.len() - 1
            }
        };
        let a = &mut state.attempts[idx];
        match e {
            Event::SiteMeasured { spectrum, .. } => a.spectrum = Some(spectrum.clone()),
            Event::SiteFitted {
                fit, valid, flag, ..
            } => {
                a.fit = Some(fit.clone());
                a.valid = *valid;
                a.flag = flag.clone();
            }
            Event::SiteFailed { reason, .. } => {
                a.valid = false;
                a.flag = format!("failed: {reason}");
            }
            _ => {}
        }
    }
    for s in by_site.values_mut() {
        s.attempts.sort_by_key(|a| a.attempt);
    }
    by_site.into_values().collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::LayerResult;

    fn fit(t: f64, gof: f64) -> FitResult {
        FitResult {
            method: "model".into(),
            layers: vec![LayerResult {
                material: "sio2".into(),
                thickness_nm: t,
                sigma_nm: 0.1,
            }],
            gof,
            flags: vec![],
            terms: vec![],
        }
    }

    fn measured(site: usize, attempt: u32) -> Event {
        Event::SiteMeasured {
            time: String::new(),
            site,
            attempt,
            x_mm: 0.0,
            y_mm: 0.0,
            stage_x_mm: 0.0,
            stage_y_mm: 0.0,
            spectrum: format!("spectra/site-{site}-a{attempt}.csv"),
        }
    }

    fn fitted(site: usize, attempt: u32, t: f64, gof: f64) -> Event {
        let f = fit(t, gof);
        let (valid, flag) = judge(&f, &AcceptSpec::default());
        Event::SiteFitted {
            time: String::new(),
            site,
            attempt,
            fit: f,
            valid,
            flag,
        }
    }

    #[test]
    fn newest_valid_attempt_wins_and_refits_supersede() {
        let plan = [
            Site {
                number: 1,
                x_mm: 0.0,
                y_mm: 0.0,
            },
            Site {
                number: 2,
                x_mm: 1.0,
                y_mm: 0.0,
            },
        ];
        let events = vec![
            measured(1, 1),
            fitted(1, 1, 100.0, 0.99),
            measured(1, 2),
            fitted(1, 2, 150.0, 0.5), // invalid: the valid first attempt still counts
            measured(2, 1),
            fitted(2, 1, 200.0, 0.99),
            fitted(2, 1, 201.0, 0.99), // a refit of the same attempt
            measured(2, 2),            // killed before its fit
        ];
        let s = site_states(&plan, &events);
        let t = |i: usize| s[i].best().unwrap().fit.as_ref().unwrap().layers[0].thickness_nm;
        assert_eq!(t(0), 100.0);
        assert_eq!(t(1), 201.0);
        assert_eq!(
            s[1].unfitted().map(|a| a.attempt).collect::<Vec<_>>(),
            vec![2]
        );
        assert_eq!(s[1].next_attempt(), 3);
        assert_eq!(s[0].attempts[1].flag, "poor-fit");
    }

    #[test]
    fn events_round_trip_as_json_lines() {
        let e = fitted(3, 1, 99.5, 0.97);
        let line = serde_json::to_string(&e).unwrap();
        assert!(line.starts_with("{\"event\":\"site-fitted\""), "{line}");
        assert_eq!(serde_json::from_str::<Event>(&line).unwrap(), e);
    }

    #[test]
    fn a_refit_counts_whole_or_not_at_all() {
        let plan: Vec<Site> = (1..=3)
            .map(|n| Site {
                number: n,
                x_mm: n as f64,
                y_mm: 0.0,
            })
            .collect();
        let started = |command: &str| Event::RunStarted {
            time: String::new(),
            command: command.into(),
            sites_planned: 3,
        };
        let mut events = vec![started("run")];
        for n in 1..=3 {
            events.push(measured(n, 1));
            events.push(fitted(n, 1, 100.0, 0.99));
        }
        let run_len = events.len();
        events.push(started("refit"));
        events.push(Event::RefitStarted {
            time: String::new(),
            recipe: "wide".into(),
            previous: Some("run-before-refit.toml".into()),
            spectra: 3,
        });
        for n in 1..=3 {
            events.push(fitted(n, 1, 200.0, 0.99));
        }
        events.push(Event::RefitFinished {
            time: String::new(),
        });
        let thicknesses = |events: &[Event]| -> Vec<f64> {
            site_states(&plan, events)
                .iter()
                .map(|s| s.best().unwrap().fit.as_ref().unwrap().layers[0].thickness_nm)
                .collect()
        };
        // A kill after any event of the refit: every site keeps the old model, until the
        // refit is finished; then every site has the new one.
        for cut in run_len..events.len() {
            let (_, open) = settled(&events[..cut]);
            assert_eq!(open.is_some(), cut > run_len + 1, "cut {cut}");
            assert_eq!(thicknesses(&events[..cut]), vec![100.0; 3], "cut {cut}");
        }
        assert_eq!(thicknesses(&events), vec![200.0; 3]);
        assert!(settled(&events).1.is_none());
        // A session after an unfinished refit drops it, and its own fits count.
        let mut killed = events[..run_len + 4].to_vec();
        killed.push(started("resume"));
        killed.push(fitted(2, 1, 300.0, 0.99));
        assert!(settled(&killed).1.is_none());
        assert_eq!(thicknesses(&killed), vec![100.0, 300.0, 100.0]);
        // The end of the journal from its last boundary tells the same unfinished refit.
        for journal in (1..=events.len())
            .map(|cut| events[..cut].to_vec())
            .chain([killed])
        {
            let lines: Vec<String> = journal
                .iter()
                .map(|e| serde_json::to_string(e).unwrap())
                .collect();
            let from = lines
                .iter()
                .rposition(|l| settles_refits(l.as_bytes()))
                .unwrap_or(0);
            assert_eq!(settled(&journal[from..]).1, settled(&journal).1);
        }
    }
}
