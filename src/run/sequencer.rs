//! The sequencer: drives a bench through a list of sites and journals every step.
//!
//! Per site: move → motion complete → settle → acquire → store the raw spectrum → journal it →
//! hand it to a fitting worker (a blocking thread) while the stage moves on to the next site.
//! Sites that come back invalid are measured again, up to the recipe's `retries`, in a second
//! pass; a site that still fails is flagged, not fatal. Cancellation (Ctrl-C) stops motion,
//! finishes the fit in flight and journals the stop, so the run can be resumed.

use super::events::{judge, now, Event};
use super::folder::{RunFolder, RunToml};
use super::journal::Journal;
use crate::bench::Bench;
use crate::fit::{FitResult, Fitter};
use crate::recipe::schema::AcquireSpec;
use crate::recipe::Site;
use crate::spectrum::{write_counts_csv, Counts, RawSpectrum};
use anyhow::Context;
use std::sync::Arc;
use std::time::Duration;
use tokio::sync::watch;
use tokio::task::JoinHandle;

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

/// What the sequencer tells whoever shows progress.
#[derive(Debug, Clone)]
pub enum Progress {
    /// Measuring begins: this many site measurements are planned for this pass.
    Pass { pass: u32, sites: usize },
    /// A site was fitted.
    Site {
        site: usize,
        attempt: u32,
        thickness_nm: f64,
        valid: bool,
        flag: String,
    },
    /// Something worth a line (reference taken, retrying…).
    Note(String),
}

/// Asks the operator to do something by hand (place the reference piece) and waits.
pub type Prompt = Box<dyn Fn(&str) -> anyhow::Result<()> + Send + Sync>;

/// Drives one measuring session on a run.
pub struct Sequencer {
    folder: RunFolder,
    journal: Journal,
    fitter: Arc<Fitter>,
    acquire: AcquireSpec,
    accept: crate::recipe::schema::AcceptSpec,
    reference_material: String,
    dark: Option<Counts>,
    reference: Option<Counts>,
    progress: Box<dyn FnMut(Progress) + Send>,
    prompt: Option<Prompt>,
    cancel: watch::Receiver<bool>,
}

/// A fit running on a blocking thread, with the site and attempt it belongs to.
type Pending = (usize, u32, JoinHandle<Result<FitResult, String>>);

impl Sequencer {
    /// A sequencer for the run in `folder`, appending to its journal.
    pub fn new(
        folder: RunFolder,
        meta: &RunToml,
        fitter: Arc<Fitter>,
        reference_material: String,
        cancel: watch::Receiver<bool>,
    ) -> anyhow::Result<Sequencer> {
        let journal = Journal::open(&folder.journal())?;
        Ok(Sequencer {
            folder,
            journal,
            fitter,
            acquire: meta.recipe.acquire.clone(),
            accept: meta.recipe.accept.clone(),
            reference_material,
            dark: None,
            reference: None,
            progress: Box::new(|_| {}),
            prompt: None,
            cancel,
        })
    }

    /// Where progress goes.
    pub fn on_progress(mut self, f: impl FnMut(Progress) + Send + 'static) -> Sequencer {
        self.progress = Box::new(f);
        self
    }

    /// How to ask the operator for a hand step (without one, such a step is an error).
    pub fn with_prompt(mut self, prompt: Prompt) -> Sequencer {
        self.prompt = Some(prompt);
        self
    }

    /// Appends an event to the journal (synced before returning).
    pub fn log(&mut self, event: &Event) -> anyhow::Result<()> {
        Ok(self.journal.append(event)?)
    }

    fn cancelled(&self) -> bool {
        *self.cancel.borrow()
    }

    /// Homes the stage if the machine file says how, then takes dark and reference spectra.
    pub async fn prepare(&mut self, bench: &mut Bench) -> anyhow::Result<()> {
        if !bench.machine.stage.home.is_empty() {
            (self.progress)(Progress::Note("homing the stage".into()));
            bench.stage.home().await.context("homing failed")?;
        }
        let (ms, avg) = (self.acquire.integration_ms, self.acquire.averages);
        if let Some(p) = bench.machine.reference.position_mm {
            bench
                .stage
                .move_to(p[0], p[1])
                .await
                .context("moving to the reference piece")?;
            bench
                .stage
                .wait_idle()
                .await
                .context("moving to the reference piece")?;
        } else if !bench.is_simulated() || bench.virtual_wafer().is_none() {
            let ask = self.prompt.as_ref().context(
                "the machine file gives no [reference] position_mm and there is nobody to ask: \
                 add the position of an on-chuck reference piece, or run interactively",
            )?;
            ask(&format!(
                "Place the {} reference under the probe, then press Enter",
                self.reference_material
            ))?;
        }
        let dark = bench
            .spectrometer
            .dark(ms, avg)
            .await
            .context("dark spectrum")?;
        let reference = bench
            .spectrometer
            .reference(ms, avg)
            .await
            .context("reference spectrum")?;
        let tag = chrono::Local::now().format("%H%M%S%3f").to_string();
        let dark_file = format!("spectra/dark-{tag}.csv");
        let ref_file = format!("spectra/reference-{tag}.csv");
        self.store(
            &dark_file,
            &RawSpectrum {
                sample: dark.clone(),
                dark: dark.clone(),
                reference: dark.clone(),
            },
        )?;
        self.store(
            &ref_file,
            &RawSpectrum {
                sample: reference.clone(),
                dark: dark.clone(),
                reference: reference.clone(),
            },
        )?;
        self.log(&Event::ReferenceTaken {
            time: now(),
            dark: dark_file,
            reference: ref_file,
        })?;
        (self.progress)(Progress::Note(format!(
            "dark and {} reference taken",
            self.reference_material
        )));
        if let Some(note) = self.fitter.coverage_note(&reference.wavelength_nm) {
            (self.progress)(Progress::Note(format!("warning: spectrometer: {note}")));
        }
        self.dark = Some(dark);
        self.reference = Some(reference);
        Ok(())
    }

    /// Writes a raw spectrum file (relative path in the run folder) atomically.
    fn store(&self, rel: &str, raw: &RawSpectrum) -> anyhow::Result<()> {
        let mut bytes = Vec::new();
        write_counts_csv(&mut bytes, raw, &[])?;
        let path = self.folder.root.join(rel);
        super::files::write_atomic(&path, &bytes)
            .with_context(|| format!("cannot write {}", path.display()))
    }

    /// Measures `sites` in the order given (attempt numbers from `next_attempt`), then the ones
    /// that came back invalid again, up to the recipe's retries. Journals every step.
    pub async fn measure(
        &mut self,
        bench: &mut Bench,
        sites: &[Site],
        mut next_attempt: impl FnMut(usize) -> u32,
    ) -> Outcome {
        let mut todo: Vec<Site> = sites.to_vec();
        for pass in 0..=self.acquire.retries {
            if todo.is_empty() {
                break;
            }
            (self.progress)(Progress::Pass {
                pass,
                sites: todo.len(),
            });
            match self.pass(bench, &todo, &mut next_attempt).await {
                Ok(invalid) => todo.retain(|s| invalid.contains(&s.number)),
                Err(PassEnd::Interrupted) => {
                    return self
                        .stopped(bench, "interrupted by the user (Ctrl-C)")
                        .await
                }
                Err(PassEnd::Fault(e)) => {
                    let reason = crate::error_text::chain_text(&e);
                    return match self.stopped(bench, &reason).await {
                        Outcome::Failed(f) => Outcome::Failed(f),
                        _ => Outcome::Failed(e),
                    };
                }
            }
            if !todo.is_empty() && pass < self.acquire.retries {
                let list: Vec<String> = todo.iter().map(|s| s.number.to_string()).collect();
                (self.progress)(Progress::Note(format!(
                    "measuring again: site {}",
                    list.join(", ")
                )));
            }
        }
        Outcome::Finished
    }

    /// Journals a stop and halts the stage.
    async fn stopped(&mut self, bench: &mut Bench, reason: &str) -> Outcome {
        tracing::warn!(%reason, "run stopped");
        let _ = bench.stage.stop().await;
        if let Err(e) = self.log(&Event::RunStopped {
            time: now(),
            reason: reason.to_string(),
        }) {
            return Outcome::Failed(e);
        }
        if self.cancelled() {
            Outcome::Interrupted
        } else {
            Outcome::Failed(anyhow::anyhow!("{reason}"))
        }
    }

    /// One pass over `sites`; returns the numbers of the sites whose attempt came back invalid.
    async fn pass(
        &mut self,
        bench: &mut Bench,
        sites: &[Site],
        next_attempt: &mut impl FnMut(usize) -> u32,
    ) -> Result<Vec<usize>, PassEnd> {
        let mut invalid = Vec::new();
        let mut pending: Option<Pending> = None;
        let scale = bench.time_scale();
        for site in sites {
            if self.cancelled() {
                self.finish(pending.take(), &mut invalid).await?;
                return Err(PassEnd::Interrupted);
            }
            let stage_p = bench
                .stage_position(site)
                .map_err(|o| PassEnd::Fault(anyhow::anyhow!("{o}")))?;
            let mut cancel = self.cancel.clone();
            tokio::select! {
                r = bench.move_to_site(site) => { r.map_err(|e| PassEnd::Fault(e.into()))?; }
                _ = cancel.wait_for(|c| *c) => {
                    self.finish(pending.take(), &mut invalid).await?;
                    return Err(PassEnd::Interrupted);
                }
            }
            tokio::time::sleep(Duration::from_secs_f64(
                self.acquire.settle_ms / 1000.0 / scale,
            ))
            .await;
            let counts = bench
                .spectrometer
                .acquire(self.acquire.integration_ms, self.acquire.averages)
                .await
                .with_context(|| format!("site {}: acquisition failed", site.number))
                .map_err(PassEnd::Fault)?;
            let attempt = next_attempt(site.number);
            let raw = RawSpectrum {
                sample: counts,
                dark: self.dark.clone().unwrap_or_default(),
                reference: self.reference.clone().unwrap_or_default(),
            };
            let rel = format!("spectra/site-{:04}-a{attempt}.csv", site.number);
            self.store(&rel, &raw).map_err(PassEnd::Fault)?;
            self.log(&Event::SiteMeasured {
                time: now(),
                site: site.number,
                attempt,
                x_mm: site.x_mm,
                y_mm: site.y_mm,
                stage_x_mm: stage_p[0],
                stage_y_mm: stage_p[1],
                spectrum: rel,
            })
            .map_err(PassEnd::Fault)?;
            // The fit of the previous site has had the whole move to finish.
            self.finish(pending.take(), &mut invalid).await?;
            let fitter = self.fitter.clone();
            let material = self.reference_material.clone();
            let job = tokio::task::spawn_blocking(move || {
                fitter.fit_raw(&raw, &material).map_err(|e| e.to_string())
            });
            pending = Some((site.number, attempt, job));
        }
        self.finish(pending.take(), &mut invalid).await?;
        Ok(invalid)
    }

    /// Waits for a fit in flight and journals its result.
    async fn finish(
        &mut self,
        pending: Option<Pending>,
        invalid: &mut Vec<usize>,
    ) -> Result<(), PassEnd> {
        let Some((site, attempt, job)) = pending else {
            return Ok(());
        };
        let result = job.await.map_err(|e| e.to_string()).and_then(|r| r);
        match result {
            Ok(fit) => {
                let (valid, flag) = judge(&fit, &self.accept);
                if !valid {
                    invalid.push(site);
                }
                let thickness_nm = fit.thickness_nm();
                tracing::info!(site, attempt, thickness_nm, gof = fit.gof, %flag, "site fitted");
                self.log(&Event::SiteFitted {
                    time: now(),
                    site,
                    attempt,
                    fit,
                    valid,
                    flag: flag.clone(),
                })
                .map_err(PassEnd::Fault)?;
                (self.progress)(Progress::Site {
                    site,
                    attempt,
                    thickness_nm,
                    valid,
                    flag,
                });
            }
            Err(reason) => {
                tracing::warn!(site, attempt, %reason, "site not fitted");
                invalid.push(site);
                self.log(&Event::SiteFailed {
                    time: now(),
                    site,
                    attempt,
                    reason: reason.clone(),
                })
                .map_err(PassEnd::Fault)?;
                (self.progress)(Progress::Site {
                    site,
                    attempt,
                    thickness_nm: f64::NAN,
                    valid: false,
                    flag: reason,
                });
            }
        }
        Ok(())
    }
}

/// Why a pass ended early.
enum PassEnd {
    Interrupted,
    Fault(anyhow::Error),
}
