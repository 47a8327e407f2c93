//! Fitting workers: a subscriber of the run events that starts a fit on a blocking thread as
//! soon as a spectrum is acquired, so fitting runs while the stage moves to the next site.
//! The sequencer collects finished fits and journals them.

use super::stream::{RunEvent, Subscriber};
use crate::fit::{FitResult, Fitter};
use crate::spectrum::RawSpectrum;
use std::collections::VecDeque;
use std::sync::{Arc, Mutex};
use tokio::task::JoinHandle;

/// A fit on its way: site, attempt and the worker computing it.
pub struct Pending {
    pub site: usize,
    pub attempt: u32,
    pub job: JoinHandle<Result<FitResult, String>>,
}

impl Pending {
    /// Waits for the fit; a worker that panicked becomes a failed fit with the reason.
    pub async fn result(self) -> Result<FitResult, String> {
        self.job
            .await
            .map_err(|e| format!("the fit stopped unexpectedly: {e}"))
            .and_then(|r| r)
    }
}

/// The workers of one session; clones share the queue of fits in flight.
#[derive(Clone)]
pub struct FitWorkers {
    fitter: Arc<Fitter>,
    reference_material: String,
    queue: Arc<Mutex<VecDeque<Pending>>>,
}

impl FitWorkers {
    /// Workers fitting with `fitter`, references taken on `reference_material`.
    pub fn new(fitter: Arc<Fitter>, reference_material: String) -> FitWorkers {
        FitWorkers {
            fitter,
            reference_material,
            queue: Arc::default(),
        }
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, VecDeque<Pending>> {
        self.queue.lock().unwrap_or_else(|e| e.into_inner())
    }

    /// Takes every fit in flight but the newest (it has the next move to finish).
    pub fn take_older(&self) -> Vec<Pending> {
        let mut q = self.lock();
        let keep = q.len().min(1);
        let n = q.len() - keep;
        q.drain(..n).collect()
    }

    /// Takes every fit in flight, oldest first.
    pub fn take_all(&self) -> Vec<Pending> {
        self.lock().drain(..).collect()
    }

    /// Starts fitting `raw` as `site`, `attempt` (a new spectrum, or a stored one normalised
    /// again by an interpolated reference); its result queues behind the fits in flight.
    pub fn start(&self, site: usize, attempt: u32, raw: Arc<RawSpectrum>) {
        let fitter = self.fitter.clone();
        let material = self.reference_material.clone();
        let job = tokio::task::spawn_blocking(move || {
            fitter.fit_raw(&raw, &material).map_err(|e| e.to_string())
        });
        self.lock().push_back(Pending { site, attempt, job });
    }
}

impl Subscriber for FitWorkers {
    fn on_event(&mut self, event: &RunEvent) -> anyhow::Result<()> {
        if let RunEvent::Acquired { site, attempt, raw } = event {
            self.start(*site, *attempt, raw.clone());
        }
        Ok(())
    }
}
