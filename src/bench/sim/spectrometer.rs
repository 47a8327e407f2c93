//! The virtual spectrometer: lamp (blackbody) × detector response × the reflectance of what
//! lies under the probe at the stage's current position, with integration-time scaling, dark
//! offset and current, shot and read noise, digitiser saturation, and a seeded generator;
//! optionally a slit function and a sample level and tilt off the reference's.
//!
//! Per frame and pixel, in counts: `offset + dark·t + S + noise`, with the signal
//! `S = R(λ)·rate(λ)·t`, shot noise of `(S + dark·t)·g` electrons (g electrons per count) and
//! Gaussian read noise; each frame is rounded and clipped to `[0, full scale]`, and frames are
//! averaged. It takes as long (in virtual time) as the frames would.
//!
//! The lamp drifts with virtual time: its output changes by `lamp_drift_pct_per_hour`, and a
//! slow spectral tilt (`lamp_tilt_pct_per_hour`) raises one end of the range against the
//! other, so references taken at different times differ as on a real bench.

use super::clock::SimClock;
use super::mechanics::MechanicsHandle;
use super::wafer::SampleModel;
use crate::bench::chuck::ChuckTransform;
use crate::bench::machine::SimSpectrometerSpec;
use crate::bench::spectrometer::{check_settings, Spectrometer, SpectrometerError};
use crate::bench::stage::PositionHandle;
use crate::fit::instrument::Slit;
use crate::fit::model::tilt_coordinate;
use crate::spectrum::Counts;
use futures::future::BoxFuture;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use std::sync::{Arc, Mutex};

/// Second radiation constant c₂ = hc/k, nm·K (CODATA 2018: 1.438777 × 10⁻² m·K).
pub const C2_NM_K: f64 = 1.438_777e7;

/// Planck spectral radiance up to a constant factor: λ⁻⁵ / (exp(c₂/λT) − 1).
pub fn planck_relative(wavelength_nm: f64, temperature_k: f64) -> f64 {
    let l = wavelength_nm;
    1.0 / (l.powi(5) * ((C2_NM_K / (l * temperature_k)).exp() - 1.0))
}

/// Relative response of a silicon array detector: a smooth shape of our own (rising past
/// 360 nm, peaking near 650 nm, falling towards the band edge), not a measured curve.
pub fn detector_response(wavelength_nm: f64) -> f64 {
    let blue = 1.0 / (1.0 + (-(wavelength_nm - 360.0) / 15.0).exp());
    let bell = (-((wavelength_nm - 650.0) / 280.0).powi(2)).exp();
    blue * bell
}

/// What the virtual probe sees.
pub enum Target {
    /// The sample model at the stage position (mapped to the wafer frame).
    Sample,
    Dark,
    Reference,
}

/// The virtual spectrometer.
pub struct VirtualSpectrometer {
    spec: SimSpectrometerSpec,
    wavelength_nm: Vec<f64>,
    /// Counts per ms for a perfect mirror, per pixel.
    rate: Vec<f64>,
    sample: Arc<dyn SampleModel>,
    reference: Vec<f64>,
    position: PositionHandle,
    /// Where the wafer really lies (a reload moves it).
    transform: Arc<Mutex<ChuckTransform>>,
    /// Where the carriage really stops against the reported position (virtual stage only).
    mechanics: Option<MechanicsHandle>,
    rng: ChaCha8Rng,
    clock: SimClock,
    /// The slit function, when the spec gives a resolution.
    slit: Option<Slit>,
}

impl VirtualSpectrometer {
    /// A virtual spectrometer looking at `sample` where `position` (stage frame) says the
    /// probe is, with `reference` the model of the reference piece.
    pub fn new(
        spec: &SimSpectrometerSpec,
        sample: Arc<dyn SampleModel>,
        reference: &dyn SampleModel,
        position: PositionHandle,
        transform: ChuckTransform,
        seed: u64,
        clock: SimClock,
    ) -> VirtualSpectrometer {
        let n = spec.pixels.max(2);
        let [a, b] = spec.wavelength_nm;
        let wavelength_nm: Vec<f64> = (0..n)
            .map(|i| a + (b - a) * i as f64 / (n - 1) as f64)
            .collect();
        let shape: Vec<f64> = wavelength_nm
            .iter()
            .map(|&l| planck_relative(l, spec.lamp_k) * detector_response(l))
            .collect();
        let peak = shape
            .iter()
            .cloned()
            .fold(0.0, f64::max)
            .max(f64::MIN_POSITIVE);
        let rate = shape
            .iter()
            .map(|s| spec.peak_counts_per_ms * s / peak)
            .collect();
        let reference = reference.reflectance(0.0, 0.0, &wavelength_nm);
        let slit =
            (spec.resolution_nm > 0.0).then(|| Slit::gaussian(&wavelength_nm, spec.resolution_nm));
        VirtualSpectrometer {
            spec: spec.clone(),
            wavelength_nm,
            rate,
            sample,
            reference,
            position,
            transform: Arc::new(Mutex::new(transform)),
            mechanics: None,
            rng: ChaCha8Rng::seed_from_u64(seed),
            clock,
            slit,
        }
    }

    /// The same spectrometer looking where the virtual stage's carriage really stops.
    pub fn with_mechanics(mut self, mechanics: MechanicsHandle) -> VirtualSpectrometer {
        self.mechanics = Some(mechanics);
        self
    }

    /// The handle on where the wafer really lies: a reload sets it.
    pub fn placement_handle(&self) -> Arc<Mutex<ChuckTransform>> {
        self.transform.clone()
    }

    /// The detector's wavelength axis, nm.
    pub fn wavelengths(&self) -> &[f64] {
        &self.wavelength_nm
    }

    /// Mean signal counts per ms (above the dark level) for a reflectance, per pixel.
    pub fn signal_rate(&self, reflectance: &[f64]) -> Vec<f64> {
        self.rate
            .iter()
            .zip(reflectance)
            .map(|(r, q)| r * q.max(0.0))
            .collect()
    }

    /// The lamp's output relative to its start, per pixel, after `hours` of virtual time:
    /// `(1 + drift·h)·(1 + tilt·h·u)` with `u` running from −1 (blue end) to +1 (red end).
    pub fn lamp_factor(&self, hours: f64) -> Vec<f64> {
        let s = &self.spec;
        let [a, b] = s.wavelength_nm;
        let level = 1.0 + s.lamp_drift_pct_per_hour / 100.0 * hours;
        let tilt = s.lamp_tilt_pct_per_hour / 100.0 * hours;
        self.wavelength_nm
            .iter()
            .map(|&l| {
                let u = (2.0 * (l - a) / (b - a).max(f64::MIN_POSITIVE)) - 1.0;
                (level * (1.0 + tilt * u)).max(0.0)
            })
            .collect()
    }

    /// The sample's reflectance as the detector sees it against the reference: through the
    /// slit function, at the spec's level and tilt.
    fn imperfect(&self, reflectance: impl Fn(&[f64]) -> Vec<f64>) -> Vec<f64> {
        let seen = match &self.slit {
            Some(slit) => slit.convolve(&reflectance(&slit.fine_nm)),
            None => reflectance(&self.wavelength_nm),
        };
        let (first, last) = (
            self.wavelength_nm[0],
            self.wavelength_nm[self.wavelength_nm.len() - 1],
        );
        let (scale, tilt) = (self.spec.sample_scale, self.spec.sample_tilt);
        seen.iter()
            .zip(&self.wavelength_nm)
            .map(|(r, l)| scale * (1.0 + tilt * tilt_coordinate(*l, first, last)) * r)
            .collect()
    }

    /// Draws one acquisition (pure apart from the generator; no waiting).
    pub fn render(
        &mut self,
        target: Target,
        integration_ms: f64,
        averages: u32,
    ) -> Result<Counts, SpectrometerError> {
        check_settings(integration_ms, averages)?;
        let refl = match target {
            Target::Dark => vec![0.0; self.wavelength_nm.len()],
            Target::Reference => self.reference.clone(),
            Target::Sample => {
                let p = self.position.get().ok_or_else(|| {
                    SpectrometerError::Settings("the stage position is unknown (moving or not yet homed): wait for motion to end before acquiring".into())
                })?;
                let e = self.mechanics.as_ref().map_or([0.0; 2], |m| m.offset());
                let transform = *self.transform.lock().unwrap_or_else(|e| e.into_inner());
                let w = transform.to_wafer(p[0] + e[0], p[1] + e[1]);
                self.imperfect(|l| self.sample.reflectance(w[0], w[1], l))
            }
        };
        let s = &self.spec;
        let t = integration_ms;
        let dark = s.dark_counts_per_ms * t;
        let read = Normal::new(0.0, 1.0).expect("unit normal");
        let lamp = self.lamp_factor(self.clock.now() / 3600.0);
        let mut sum = vec![0.0; refl.len()];
        for _ in 0..averages {
            for (i, acc) in sum.iter_mut().enumerate() {
                let signal = self.rate[i] * lamp[i] * refl[i].max(0.0) * t;
                let var = (signal + dark) / s.electrons_per_count + s.read_noise_counts.powi(2);
                let v =
                    s.dark_offset_counts + dark + signal + var.sqrt() * read.sample(&mut self.rng);
                *acc += v.round().clamp(0.0, s.full_scale_counts);
            }
        }
        Ok(Counts {
            wavelength_nm: self.wavelength_nm.clone(),
            counts: sum.into_iter().map(|v| v / averages as f64).collect(),
        })
    }

    async fn take(
        &mut self,
        target: Target,
        integration_ms: f64,
        averages: u32,
    ) -> Result<Counts, SpectrometerError> {
        let c = self.render(target, integration_ms, averages)?;
        self.clock
            .sleep(integration_ms * averages as f64 / 1000.0)
            .await;
        Ok(c)
    }
}

impl Spectrometer for VirtualSpectrometer {
    fn acquire(
        &mut self,
        integration_ms: f64,
        averages: u32,
    ) -> BoxFuture<'_, Result<Counts, SpectrometerError>> {
        Box::pin(self.take(Target::Sample, integration_ms, averages))
    }
    fn dark(
        &mut self,
        integration_ms: f64,
        averages: u32,
    ) -> BoxFuture<'_, Result<Counts, SpectrometerError>> {
        Box::pin(self.take(Target::Dark, integration_ms, averages))
    }
    fn reference(
        &mut self,
        integration_ms: f64,
        averages: u32,
    ) -> BoxFuture<'_, Result<Counts, SpectrometerError>> {
        Box::pin(self.take(Target::Reference, integration_ms, averages))
    }
    fn describe(&self) -> String {
        format!(
            "virtual spectrometer {}–{} nm, {} pixels, {} K lamp",
            self.spec.wavelength_nm[0],
            self.spec.wavelength_nm[1],
            self.spec.pixels,
            self.spec.lamp_k
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_lamp_drifts_and_tilts_with_virtual_time() {
        let spec = SimSpectrometerSpec {
            lamp_drift_pct_per_hour: 3.0,
            lamp_tilt_pct_per_hour: 1.0,
            ..SimSpectrometerSpec::default()
        };
        use crate::bench::sim::wafer::BareSample;
        let lib = crate::optics::MaterialLibrary::builtin();
        let m = |n: &str| lib.require(n).unwrap().clone();
        let si = || BareSample::new(m("air"), m("si"));
        let v = VirtualSpectrometer::new(
            &spec,
            Arc::new(si()),
            &si(),
            PositionHandle::default(),
            ChuckTransform::from_spec(&Default::default()),
            1,
            SimClock::new(1.0),
        );
        assert!(v.lamp_factor(0.0).iter().all(|f| *f == 1.0));
        let f = v.lamp_factor(2.0);
        // 3 %/h for 2 h: +6 % overall; tilt 1 %/h: ∓2 % at the ends.
        assert!((f[0] - 1.06 * 0.98).abs() < 1e-12, "{}", f[0]);
        assert!((f[f.len() - 1] - 1.06 * 1.02).abs() < 1e-12);
    }

    #[test]
    fn planck_peak_follows_wien() {
        // Wien's displacement law: λ_max·T = 2.897772 × 10⁶ nm·K (CODATA 2018).
        let t = 3000.0;
        let (mut best, mut at) = (0.0, 0.0);
        for i in 0..40_000 {
            let l = 300.0 + i as f64 * 0.05;
            let b = planck_relative(l, t);
            if b > best {
                best = b;
                at = l;
            }
        }
        assert!((at - 2.897_772e6 / t).abs() < 0.1, "peak at {at} nm");
    }
}
