//! The centring probe on a bench: move (soft limits checked by the stage before any line is
//! sent), wait for motion to end, settle, acquire, and reduce the spectrum to one number: the
//! mean counts above the dark taken when the probe was made.

use super::{CentringError, EdgeProbe};
use crate::bench::spectrometer::{acquire_retrying, AcquireKind};
use crate::bench::{Bench, StageError};
use crate::spectrum::Counts;
use futures::future::BoxFuture;

/// Acquisition settings of the centring readings.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ProbeSettings {
    pub integration_ms: f64,
    pub averages: u32,
    pub settle_ms: f64,
}

/// An [`EdgeProbe`] on a bench's stage and spectrometer.
pub struct BenchProbe<'a> {
    bench: &'a mut Bench,
    dark: Counts,
    settings: ProbeSettings,
}

impl<'a> BenchProbe<'a> {
    /// Takes the dark the readings are corrected by, then reads with `settings`.
    pub async fn new(
        bench: &'a mut Bench,
        settings: ProbeSettings,
    ) -> Result<BenchProbe<'a>, CentringError> {
        let dark = acquire_retrying(
            bench.spectrometer.as_mut(),
            AcquireKind::Dark,
            settings.integration_ms,
            settings.averages,
            None,
        )
        .await?;
        Ok(BenchProbe {
            bench,
            dark,
            settings,
        })
    }
}

/// Mean counts of `sample` above `dark`, over the pixels both have.
pub fn mean_signal(sample: &Counts, dark: &Counts) -> f64 {
    let n = sample.counts.len().min(dark.counts.len()).max(1);
    sample
        .counts
        .iter()
        .zip(&dark.counts)
        .map(|(s, d)| s - d)
        .sum::<f64>()
        / n as f64
}

impl EdgeProbe for BenchProbe<'_> {
    fn signal(&mut self, p: [f64; 2]) -> BoxFuture<'_, Result<Option<f64>, CentringError>> {
        Box::pin(async move {
            match self.bench.stage.move_to(p[0], p[1]).await {
                Err(StageError::OutsideTravel { .. }) => return Ok(None),
                r => r?,
            }
            self.bench.stage.wait_idle().await?;
            // The wait is computed first: a `&Bench` held across it would not be `Send`.
            let settle = self.bench.settle_time(self.settings.settle_ms);
            tokio::time::sleep(settle).await;
            let s = self.settings;
            let pixels = Some(self.dark.counts.len());
            let spectrometer = self.bench.spectrometer.as_mut();
            let sample = acquire_retrying(
                spectrometer,
                AcquireKind::Sample,
                s.integration_ms,
                s.averages,
                pixels,
            )
            .await?;
            Ok(Some(mean_signal(&sample, &self.dark)))
        })
    }
}
