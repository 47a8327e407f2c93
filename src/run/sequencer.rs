//! The sequencer: executes a [`Plan`]'s steps on a bench under one cancellation scope and
//! publishes every step on the run's [`EventStream`].
//!
//! Steps: home → centring (when asked: the sites are then placed by the measured centre and
//! rotation, checked against the soft limits first) → reference (move to the reference piece,
//! or ask the operator) with dark and reference spectra → per site: move → motion complete → settle → acquire → store the raw
//! spectrum → journal it → the fitting workers fit it while the stage moves on. Sites that come
//! back invalid are measured again, up to the recipe's `retries`, in further passes; a site
//! that still fails is flagged, not fatal. A failed acquisition is tried again
//! ([`acquire_retrying`]), then the site is journalled as failed and the run goes on; only
//! [`FAILED_SITES_IN_A_ROW`] such sites in a row stop it (the spectrometer is gone). Ctrl-C or a fault at ANY step (homing and the
//! reference move included) abandons that step, finishes and journals the fits in flight,
//! stops the stage and journals the stop, so the run can be resumed.
//!
//! Lamp-drift references placed by the plan between sites are executed like any step; when
//! one is taken, the sites measured since the previous one are fitted again with the reference
//! interpolated in time ([`super::drift`]).

use super::drift::{normalised_between, seconds, TakenReference};
use super::events::{fit_event, now, Event};
use super::fit_workers::{FitWorkers, Pending};
use super::folder::RunFolder;
use super::journal_writer::JournalWriter;
use super::plan::{GaugeMotion, Plan, PlanError, ReferencePlacement, SiteStep, Step};
use super::stream::{EventStream, RunEvent};
use crate::bench::centring::probe::ProbeSettings;
use crate::bench::centring::{locate, BenchProbe, CentringSettings};
use crate::bench::spectrometer::{acquire_retrying, AcquireKind};
use crate::bench::Bench;
use crate::recipe::schema::AcceptSpec;
use crate::spectrum::{write_counts_csv, Counts, RawSpectrum};
use anyhow::Context;
use std::future::Future;
use std::sync::Arc;
use std::time::Duration;
use tokio::sync::watch;

/// How a session of measuring ended.
#[derive(Debug)]
pub enum Outcome {
    /// Every site given was measured (valid or flagged).
    Finished,
    /// The user stopped it; the run can be resumed.
    Interrupted,
    /// A fault stopped it (the error says what); the run can be resumed.
    Failed(anyhow::Error),
}

/// Asks the operator to do something by hand (place the reference piece) and waits; called on
/// a blocking thread, so Ctrl-C still stops the session while it waits.
pub type Prompt = Arc<dyn Fn(&str) -> anyhow::Result<()> + Send + Sync>;

/// Why the steps ended early.
#[derive(Debug)]
pub enum Stop {
    /// Ctrl-C or another stop signal.
    Interrupted,
    /// A fault (the error says what and where).
    Fault(anyhow::Error),
}

/// The one cancellation scope of a session: every step's future runs inside [`Scope::guard`].
#[derive(Clone)]
pub struct Scope {
    cancel: watch::Receiver<bool>,
}

impl Scope {
    /// A scope that stops when `cancel` becomes `true`.
    pub fn new(cancel: watch::Receiver<bool>) -> Scope {
        Scope { cancel }
    }

    /// Whether a stop was asked.
    pub fn cancelled(&self) -> bool {
        *self.cancel.borrow()
    }

    /// Runs `step` unless a stop is asked first; a stop drops (abandons) the step's future,
    /// and the caller then stops the stage.
    pub async fn guard<T>(&self, step: impl Future<Output = anyhow::Result<T>>) -> Result<T, Stop> {
        if self.cancelled() {
            return Err(Stop::Interrupted);
        }
        let mut cancel = self.cancel.clone();
        tokio::select! {
            biased;
            // A closed channel (nobody left to ask for a stop) disables this branch.
            Ok(_) = cancel.wait_for(|c| *c) => Err(Stop::Interrupted),
            r = step => r.map_err(Stop::Fault),
        }
    }
}

/// Drives one measuring session on a run.
pub struct Sequencer {
    folder: RunFolder,
    stream: EventStream,
    workers: FitWorkers,
    scope: Scope,
    accept: AcceptSpec,
    prompt: Option<Prompt>,
    dark: Option<Counts>,
    reference: Option<Counts>,
    /// Sites in a row whose acquisition failed.
    failed_in_a_row: usize,
    /// The latest reference of this session, with its time.
    last_reference: Option<TakenReference>,
    /// Sites measured since it: site, attempt, time, spectrum.
    since_reference: Vec<(usize, u32, f64, Arc<RawSpectrum>)>,
    /// Writes the journal (it is the stream's journal subscriber too) and syncs spectrum
    /// files off the critical path, in order with the events that name them.
    writer: JournalWriter,
}

impl Sequencer {
    /// A sequencer for the run in `folder`, publishing on `stream` (whose first subscriber
    /// should be `writer`, the run's journal), fitting with `workers` (subscribed to `stream`
    /// too) and judging fits by `accept`.
    pub fn new(
        folder: RunFolder,
        stream: EventStream,
        writer: JournalWriter,
        workers: FitWorkers,
        scope: Scope,
        accept: AcceptSpec,
    ) -> Sequencer {
        Sequencer {
            folder,
            stream,
            workers,
            scope,
            accept,
            prompt: None,
            dark: None,
            reference: None,
            failed_in_a_row: 0,
            last_reference: None,
            since_reference: Vec::new(),
            writer,
        }
    }

    /// Waits until every event published so far is on disk (before the journal is read back).
    pub fn flush(&self) -> anyhow::Result<()> {
        self.writer.flush()
    }

    /// How to ask the operator for a hand step (without one, such a step is a fault).
    pub fn with_prompt(mut self, prompt: Option<Prompt>) -> Sequencer {
        self.prompt = prompt;
        self
    }

    /// Publishes an event to every subscriber.
    pub fn publish(&mut self, event: RunEvent) -> anyhow::Result<()> {
        self.stream.publish(event)
    }

    /// Publishes a journal event (queued in order on the journal writer; see
    /// [`Sequencer::flush`]).
    pub fn log(&mut self, event: Event) -> anyhow::Result<()> {
        self.publish(RunEvent::Journal(event))
    }

    fn note(&mut self, text: impl Into<String>) -> Result<(), Stop> {
        self.publish(RunEvent::Note(text.into()))
            .map_err(Stop::Fault)
    }

    /// Executes `plan` on `bench` (attempt numbers from `next_attempt`); see the module doc.
    pub async fn execute(
        &mut self,
        bench: &mut Bench,
        plan: &Plan,
        mut next_attempt: impl FnMut(usize) -> u32,
    ) -> Outcome {
        let outcome = match self.steps(bench, plan, &mut next_attempt).await {
            Ok(()) => Outcome::Finished,
            Err(stop) => self.stopped(Some(bench), stop).await,
        };
        // A long-running spectrometer helper is told to close (dropping it kills it anyway).
        match tokio::time::timeout(STOP_TIMEOUT, bench.spectrometer.close()).await {
            Ok(Ok(())) => {}
            Ok(Err(e)) => tracing::warn!("closing the spectrometer: {e}"),
            Err(_) => tracing::warn!("the spectrometer did not close in time"),
        }
        outcome
    }

    async fn steps(
        &mut self,
        bench: &mut Bench,
        plan: &Plan,
        next_attempt: &mut impl FnMut(usize) -> u32,
    ) -> Result<(), Stop> {
        // Sites go where the plan puts them (a centring journalled earlier included).
        bench.transform = plan.transform();
        // Centring (after homing) replaces the plan by one placed by the measured centre;
        // the first pass goes on from the step after it.
        let centred;
        let (plan, start) = match plan.steps.iter().position(|s| matches!(s, Step::Centre(_))) {
            Some(i) => {
                for step in &plan.steps[..i] {
                    if let Step::Home = step {
                        self.home(bench).await?;
                    }
                }
                let Step::Centre(settings) = &plan.steps[i] else {
                    unreachable!("found above")
                };
                centred = self.centre(bench, plan, settings).await?;
                (&centred, i)
            }
            None => (plan, 0),
        };
        let mut todo = plan.clone();
        for pass in 0..=plan.acquire().retries {
            let count = todo.sites().count();
            if count == 0 {
                break;
            }
            if pass > 0 {
                self.publish(RunEvent::Pass { pass, sites: count })
                    .map_err(Stop::Fault)?;
            }
            let mut invalid = Vec::new();
            // A later pass skips the prelude (homed and referenced already) but takes the
            // lamp-drift references placed between its sites.
            let first_site = todo
                .steps
                .iter()
                .position(|s| matches!(s, Step::Site(_) | Step::Gauge(_)))
                .unwrap_or(0);
            let from = if pass == 0 { start } else { first_site };
            for (i, step) in todo.steps.iter().enumerate().skip(from) {
                match step {
                    Step::Home => self.home(bench).await?,
                    // The placed plan has nothing left to centre.
                    Step::Centre(_) => {}
                    Step::Reference(placement) => {
                        self.reference(bench, plan, *placement).await?;
                        if pass == 0 && i + 1 == first_site {
                            self.publish(RunEvent::Pass { pass, sites: count })
                                .map_err(Stop::Fault)?;
                        }
                    }
                    Step::Site(step) => {
                        let attempt = next_attempt(step.site.number);
                        self.site(bench, plan, step, None, attempt, &mut invalid)
                            .await?
                    }
                    Step::Gauge(g) => {
                        self.site(
                            bench,
                            plan,
                            &g.site,
                            Some(g.motion),
                            g.attempt,
                            &mut invalid,
                        )
                        .await?
                    }
                    Step::Reload { reload, ask } => self.reload(bench, *reload, *ask).await?,
                }
            }
            self.finish(self.workers.take_all(), &mut invalid).await?;
            // A gauge study keeps every reading as it came: an invalid one is a finding of
            // the study, not a site to measure again.
            if plan.gauge.is_some() {
                break;
            }
            todo = plan.only(|s| invalid.contains(&s.number));
            let left: Vec<usize> = todo.sites().map(|s| s.site.number).collect();
            if !left.is_empty() && pass < plan.acquire().retries {
                let sites = crate::site_list::site_list(left);
                self.note(format!("measuring again: site {sites}"))?;
            }
        }
        Ok(())
    }

    async fn home(&mut self, bench: &mut Bench) -> Result<(), Stop> {
        self.note("homing the stage")?;
        self.scope
            .guard(async { bench.stage.home().await.context("homing failed") })
            .await
    }

    /// Finds the wafer's centre and rotation from edge scans, journals them and returns the
    /// plan placed by them, its soft limits checked before any motion to a site.
    async fn centre(
        &mut self,
        bench: &mut Bench,
        plan: &Plan,
        settings: &CentringSettings,
    ) -> Result<Plan, Stop> {
        let nominal = plan.transform();
        self.note(format!(
            "centring the wafer: {} rays from the nominal centre ({:.3}, {:.3}) mm",
            settings.rays, nominal.center_mm[0], nominal.center_mm[1]
        ))?;
        let a = plan.acquire();
        let probe_settings = ProbeSettings {
            integration_ms: a.integration_ms,
            averages: a.averages,
            settle_ms: a.settle_ms,
        };
        let wafer = plan.recipe.wafer();
        let centring = self
            .scope
            .guard(async {
                let mut probe = BenchProbe::new(bench, probe_settings).await?;
                Ok(locate(&mut probe, &wafer, &nominal, settings).await?)
            })
            .await
            .map_err(|s| in_step(s, "centring the wafer"))?;
        let placed = plan.placed(&centring);
        bench.transform = placed.transform();
        self.log(Event::WaferCentred {
            time: now(),
            centring: centring.clone(),
        })
        .map_err(Stop::Fault)?;
        self.note(centring.describe(&nominal))?;
        match placed.limit_problem() {
            Some(problem) => Err(Stop::Fault(
                anyhow::Error::new(PlanError::OutsideTravel(problem))
                    .context("with the measured wafer centre"),
            )),
            None => Ok(placed),
        }
    }

    /// Takes dark and reference spectra after bringing the reference under the probe.
    async fn reference(
        &mut self,
        bench: &mut Bench,
        plan: &Plan,
        placement: ReferencePlacement,
    ) -> Result<(), Stop> {
        let material = plan.reference_material.clone();
        match placement {
            ReferencePlacement::Position(p) => {
                self.note(format!(
                    "moving to the reference piece at ({}, {}) mm",
                    p[0], p[1]
                ))?;
                self.scope
                    .guard(async {
                        bench.stage.move_to(p[0], p[1]).await?;
                        bench.stage.wait_idle().await?;
                        Ok(())
                    })
                    .await
                    .map_err(|s| in_step(s, "moving to the reference piece"))?;
            }
            ReferencePlacement::ByHand => {
                let ask = self.prompt.clone().ok_or_else(|| {
                    Stop::Fault(anyhow::anyhow!(
                        "the machine file gives no [reference] position_mm and there is nobody \
                         to ask: add the position of an on-chuck reference piece, or run \
                         interactively"
                    ))
                })?;
                let message =
                    format!("Place the {material} reference under the probe, then press Enter");
                self.scope
                    .guard(async move {
                        tokio::task::spawn_blocking(move || ask(&message))
                            .await
                            .context("the operator prompt failed")?
                    })
                    .await?;
            }
            ReferencePlacement::Simulated => {}
        }
        let a = plan.acquire().clone();
        let (dark, reference) = self
            .scope
            .guard(async {
                let spectrometer = bench.spectrometer.as_mut();
                let (ms, avg) = (a.integration_ms, a.averages);
                let dark = acquire_retrying(spectrometer, AcquireKind::Dark, ms, avg, None)
                    .await
                    .context("dark spectrum")?;
                let pixels = Some(dark.counts.len());
                let reference =
                    acquire_retrying(spectrometer, AcquireKind::Reference, ms, avg, pixels)
                        .await
                        .context("reference spectrum")?;
                Ok((dark, reference))
            })
            .await?;
        // Timed when the light was collected, not after the files are synced: the lamp-drift
        // interpolation compares this time with the sites' (see [`super::drift`]).
        let time = now();
        let tag = chrono::Local::now().format("%H%M%S%3f").to_string();
        let dark_file = format!("spectra/dark-{tag}.csv");
        let ref_file = format!("spectra/reference-{tag}.csv");
        let as_raw = |sample: &Counts| RawSpectrum {
            sample: sample.clone(),
            dark: dark.clone(),
            reference: sample.clone(),
        };
        self.store(&dark_file, &as_raw(&dark))
            .map_err(Stop::Fault)?;
        self.store(&ref_file, &as_raw(&reference))
            .map_err(Stop::Fault)?;
        let taken = TakenReference {
            t: seconds(&time).unwrap_or_default(),
            dark: dark.clone(),
            reference: reference.clone(),
        };
        self.log(Event::ReferenceTaken {
            time,
            dark: dark_file,
            reference: ref_file,
        })
        .map_err(Stop::Fault)?;
        self.renormalise(&taken);
        self.note(format!("dark and {material} reference taken"))?;
        if let Some(note) = plan.fitter.coverage_note(&reference.wavelength_nm) {
            self.note(format!("warning: spectrometer: {note}"))?;
        }
        self.dark = Some(dark);
        self.reference = Some(reference);
        self.last_reference = Some(taken);
        Ok(())
    }

    /// Fits the sites measured since the previous reference again, each normalised by the
    /// reference interpolated at its time between that one and `taken` (see [`super::drift`]);
    /// the new fits supersede the first ones in the journal.
    fn renormalise(&mut self, taken: &TakenReference) {
        let since = std::mem::take(&mut self.since_reference);
        let Some(before) = &self.last_reference else {
            return;
        };
        for (site, attempt, t, raw) in since {
            match normalised_between(&raw, before, taken, t) {
                Some(raw) => self.workers.start(site, attempt, Arc::new(raw)),
                None => tracing::warn!(
                    site,
                    "references on different wavelength axes: the site keeps its first fit"
                ),
            }
        }
    }

    /// The wafer is unloaded and loaded again: the simulated bench places it with a fresh
    /// error; on a real bench the operator is asked (when `ask`). Journalled.
    async fn reload(&mut self, bench: &mut Bench, reload: u64, ask: bool) -> Result<(), Stop> {
        if let Some(placed) = bench.reload_simulated(reload) {
            self.note(format!(
                "reload {reload} (simulated): the wafer lies {:.3} mm, {:.3} mm off its first \
                 placement's nominal centre, turned {:.3}°",
                placed.offset_mm[0], placed.offset_mm[1], placed.rotation_deg
            ))?;
        } else if ask {
            let prompt = self.prompt.clone().ok_or_else(|| {
                Stop::Fault(anyhow::anyhow!(
                    "a reload study needs the operator to unload and reload the wafer and there \
                     is nobody to ask: run it interactively"
                ))
            })?;
            let message = format!(
                "Reload {reload}: unload the wafer, load it again as for a new run, then press Enter"
            );
            self.scope
                .guard(async move {
                    tokio::task::spawn_blocking(move || prompt(&message))
                        .await
                        .context("the operator prompt failed")?
                })
                .await?;
        }
        self.log(Event::WaferReloaded {
            time: now(),
            reload,
        })
        .map_err(Stop::Fault)
    }

    /// Writes a raw spectrum file (relative path in the run folder) atomically.
    fn store(&self, rel: &str, raw: &RawSpectrum) -> anyhow::Result<()> {
        let mut bytes = Vec::new();
        write_counts_csv(&mut bytes, raw, &[])?;
        let path = self.folder.root.join(rel);
        super::files::write_atomic_unsynced(&path, &bytes)
            .with_context(|| format!("cannot write {}", path.display()))?;
        self.writer.sync_file(path)
    }

    /// Measures one site and hands its spectrum to the fitting workers; journals the fits
    /// that finished meanwhile.
    async fn site(
        &mut self,
        bench: &mut Bench,
        plan: &Plan,
        step: &SiteStep,
        motion: Option<GaugeMotion>,
        attempt: u32,
        invalid: &mut Vec<usize>,
    ) -> Result<(), Stop> {
        let n = step.site.number;
        let a = plan.acquire().clone();
        let pixels = self.reference.as_ref().map(|r| r.counts.len());
        // A move that fails stops the run; an acquisition that fails flags the site.
        let acquired = self
            .scope
            .guard(async {
                match motion {
                    None | Some(GaugeMotion::ToSite) => {
                        bench.move_to_site(&step.site).await?;
                        bench.settle(a.settle_ms).await;
                    }
                    // A static repeat: no line is sent.
                    Some(GaugeMotion::Stay) => {}
                    Some(GaugeMotion::AwayAndBack(away)) => {
                        bench.stage.move_to(away[0], away[1]).await?;
                        bench.stage.wait_idle().await?;
                        bench.move_to_site(&step.site).await?;
                        bench.settle(a.settle_ms).await;
                    }
                }
                let spectrometer = bench.spectrometer.as_mut();
                let (ms, avg) = (a.integration_ms, a.averages);
                Ok(acquire_retrying(spectrometer, AcquireKind::Sample, ms, avg, pixels).await)
            })
            .await?;
        // Timed when the light was collected (see the reference step).
        let time = now();
        let counts = match acquired {
            Ok(counts) => counts,
            Err(e) => return self.acquisition_failed(n, attempt, e, invalid),
        };
        self.failed_in_a_row = 0;
        let raw = RawSpectrum {
            sample: counts,
            dark: self.dark.clone().unwrap_or_default(),
            reference: self.reference.clone().unwrap_or_default(),
        };
        let rel = format!("spectra/site-{n:04}-a{attempt}.csv");
        self.store(&rel, &raw).map_err(Stop::Fault)?;
        let raw = Arc::new(raw);
        self.since_reference
            .push((n, attempt, seconds(&time).unwrap_or_default(), raw.clone()));
        self.log(Event::SiteMeasured {
            time,
            site: n,
            attempt,
            x_mm: step.site.x_mm,
            y_mm: step.site.y_mm,
            stage_x_mm: step.stage_mm[0],
            stage_y_mm: step.stage_mm[1],
            spectrum: rel,
        })
        .map_err(Stop::Fault)?;
        self.publish(RunEvent::Acquired {
            site: n,
            attempt,
            raw,
        })
        .map_err(Stop::Fault)?;
        // The fit of the previous site has had the whole move to finish.
        let older = self.workers.take_older();
        self.finish(older, invalid).await
    }

    /// Journals a site whose acquisition failed and goes on, unless too many failed in a row.
    fn acquisition_failed(
        &mut self,
        site: usize,
        attempt: u32,
        error: crate::bench::SpectrometerError,
        invalid: &mut Vec<usize>,
    ) -> Result<(), Stop> {
        let reason = format!("acquisition failed: {error}");
        tracing::warn!(site, attempt, %reason, "site not measured");
        invalid.push(site);
        self.failed_in_a_row += 1;
        self.log(Event::SiteFailed {
            time: now(),
            site,
            attempt,
            reason: reason.clone(),
        })
        .map_err(Stop::Fault)?;
        if self.failed_in_a_row >= FAILED_SITES_IN_A_ROW {
            return Err(Stop::Fault(anyhow::anyhow!(
                "{FAILED_SITES_IN_A_ROW} sites in a row could not be measured (last: site {site}: \
                 {reason}): check the spectrometer, then resume the run"
            )));
        }
        Ok(())
    }

    /// Waits for fits in flight and journals their results.
    async fn finish(
        &mut self,
        pending: Vec<Pending>,
        invalid: &mut Vec<usize>,
    ) -> Result<(), Stop> {
        for p in pending {
            let (site, attempt) = (p.site, p.attempt);
            let result = p.result().await;
            match &result {
                Ok(fit) => {
                    tracing::info!(
                        site,
                        attempt,
                        thickness_nm = fit.thickness_nm(),
                        gof = fit.gof,
                        "site fitted"
                    )
                }
                Err(reason) => tracing::warn!(site, attempt, %reason, "site not fitted"),
            }
            let event = fit_event(site, attempt, result, &self.accept);
            // A later fit of the same spectrum (renormalised by the next reference) has the
            // last word.
            invalid.retain(|s| *s != site);
            if !matches!(event, Event::SiteFitted { valid: true, .. }) {
                invalid.push(site);
            }
            self.log(event).map_err(Stop::Fault)?;
        }
        Ok(())
    }

    /// Ends a session that stopped early: journals the fits in flight, stops the stage (when
    /// there is one), journals the stop. The outcome says why.
    pub async fn stopped(&mut self, bench: Option<&mut Bench>, stop: Stop) -> Outcome {
        let reason = match &stop {
            Stop::Interrupted => "interrupted by the user (Ctrl-C or a stop signal)".to_string(),
            Stop::Fault(e) => crate::error_text::chain_text(e),
        };
        tracing::warn!(%reason, "run stopped");
        let mut ignored = Vec::new();
        if let Err(Stop::Fault(e)) = self.finish(self.workers.take_all(), &mut ignored).await {
            tracing::error!("a fit in flight could not be journalled: {e:#}");
        }
        if let Some(bench) = bench {
            if let Err(e) = stop_stage(bench).await {
                tracing::error!("{e}");
            }
        }
        if let Err(e) = self.log(Event::RunStopped {
            time: now(),
            reason: reason.clone(),
        }) {
            return Outcome::Failed(e);
        }
        match stop {
            Stop::Interrupted => Outcome::Interrupted,
            Stop::Fault(e) => Outcome::Failed(e),
        }
    }
}

impl Drop for Sequencer {
    /// A session that ends by an error still gets what it queued onto the disk.
    fn drop(&mut self) {
        if let Err(e) = self.flush() {
            tracing::error!("the journal could not be completed: {e:#}");
        }
    }
}

/// Sites in a row whose acquisition failed that stop the run: one failed site is a flag on
/// the map, several in a row mean the spectrometer is gone (common practice).
pub const FAILED_SITES_IN_A_ROW: usize = 3;

/// How long a stop may take before the session gives up waiting for the stage's answer.
const STOP_TIMEOUT: Duration = Duration::from_secs(10);

/// Stops the stage, waiting at most [`STOP_TIMEOUT`]: a stage that stopped answering must
/// not hold the stop forever. The error says which.
pub async fn stop_stage(bench: &mut Bench) -> Result<(), String> {
    match tokio::time::timeout(STOP_TIMEOUT, bench.stage.stop()).await {
        Ok(Ok(())) => Ok(()),
        Ok(Err(e)) => Err(format!("stopping the stage failed: {e}")),
        Err(_) => Err("the stage did not confirm the stop in time".into()),
    }
}

/// A fault inside a named step carries the step's name.
fn in_step(stop: Stop, what: &'static str) -> Stop {
    match stop {
        Stop::Fault(e) => Stop::Fault(e.context(what)),
        s => s,
    }
}
