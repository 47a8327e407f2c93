//! The `fourier` method: the spectrum resampled uniformly in x = 2 n(λ) cos θ(λ)/λ, where a
//! film's fringes are R ∝ cos(2π d x), so the thickness is the frequency of the fringe
//! pattern (J. Cheng et al., Chin. Phys. Lett. 35, 050701 (2018), for the method in
//! reflectometry). Quadratic detrend, Hann window, zero-padding, real FFT, and a Gaussian
//! (log-parabolic) sub-bin interpolation of the peak.

use crate::spectrum::{noise_sigma, quadratic_fit};
use realfft::{RealFftPlanner, RealToComplex};
use std::sync::{Arc, Mutex};

/// FFT plans kept across spectra (planning a 32k-point transform costs about as much as
/// running it). Shareable between threads.
#[derive(Default)]
pub struct Plans(Mutex<RealFftPlanner<f64>>);

impl std::fmt::Debug for Plans {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("Plans")
    }
}

impl Plans {
    fn forward(&self, n: usize) -> Arc<dyn RealToComplex<f64>> {
        match self.0.lock() {
            Ok(mut p) => p.plan_fft_forward(n),
            // A poisoned lock only means another thread panicked mid-plan: plan afresh.
            Err(_) => RealFftPlanner::<f64>::new().plan_fft_forward(n),
        }
    }
}

/// A Fourier thickness estimate.
#[derive(Debug, Clone, PartialEq)]
pub struct Estimate {
    pub thickness_nm: f64,
    /// Cramér–Rao-style σ from the noise and fringe amplitude.
    pub sigma_nm: f64,
    /// Smallest thickness the window resolves: the Hann main-lobe half-width, 2/Δx.
    pub resolution_nm: f64,
}

/// Zero-padding factor: the FFT grid is this many times finer than the window's resolution.
const PAD: usize = 16;

/// The fringe coordinate x = 2 n cos θ / λ (1/nm) at each pixel, for the film's real index
/// `n` and cosine `cos_t` inside it.
pub fn fringe_coordinate(wavelength_nm: &[f64], n: &[f64], cos_t: &[f64]) -> Vec<f64> {
    wavelength_nm
        .iter()
        .zip(n.iter().zip(cos_t))
        .map(|(w, (n, c))| 2.0 * n * c / w)
        .collect()
}

/// The smallest thickness the window resolves, 2/(x_max − x_min).
pub fn resolution_nm(x: &[f64]) -> f64 {
    let (lo, hi) = x
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(*v), b.max(*v))
        });
    2.0 / (hi - lo)
}

/// Estimates the thickness within `[min_nm, max_nm]` from reflectance `r` at fringe
/// coordinates `x` (one per pixel, monotonic). Errors say why no peak could be taken.
pub fn estimate(
    plans: &Plans,
    x: &[f64],
    r: &[f64],
    min_nm: f64,
    max_nm: f64,
) -> Result<Estimate, String> {
    let n = x.len();
    if n < 16 {
        return Err(format!("{n} pixels; the Fourier method needs at least 16"));
    }
    // Order by increasing x (wavelength order gives decreasing x).
    let mut pts: Vec<(f64, f64)> = x.iter().copied().zip(r.iter().copied()).collect();
    pts.sort_by(|a, b| a.0.total_cmp(&b.0));
    if pts.windows(2).any(|w| !(w[1].0 > w[0].0)) {
        return Err("2n(λ)cosθ/λ is not monotonic over the window: the dispersion model has a resonance inside it".into());
    }
    let (x0, x1) = (pts[0].0, pts[n - 1].0);
    let span = x1 - x0;
    let resolution = 2.0 / span;
    let lo = min_nm.max(resolution);
    if lo >= max_nm {
        return Err(format!(
            "the search range reaches only {max_nm} nm but this window resolves {resolution:.0} nm at the least: use the model method"
        ));
    }
    // Uniform resampling in x by linear interpolation.
    let m = n.next_power_of_two().max(256);
    let dx = span / (m - 1) as f64;
    let mut y = Vec::with_capacity(m);
    let mut k = 0;
    for i in 0..m {
        let xi = x0 + i as f64 * dx;
        while k + 2 < n && pts[k + 1].0 < xi {
            k += 1;
        }
        let (a, b) = (pts[k], pts[k + 1]);
        let t = ((xi - a.0) / (b.0 - a.0)).clamp(0.0, 1.0);
        y.push(a.1 + t * (b.1 - a.1));
    }
    // Detrend by a quadratic on u ∈ [−1, 1], then the Hann window.
    let u: Vec<f64> = (0..m)
        .map(|i| 2.0 * i as f64 / (m - 1) as f64 - 1.0)
        .collect();
    let q = quadratic_fit(&u, &y);
    let padded = PAD * m;
    let mut buf = vec![0.0; padded];
    let mut wsum = 0.0;
    for i in 0..m {
        let w = 0.5 - 0.5 * (2.0 * std::f64::consts::PI * i as f64 / (m - 1) as f64).cos();
        wsum += w;
        buf[i] = (y[i] - (q[0] + q[1] * u[i] + q[2] * u[i] * u[i])) * w;
    }
    let fft = plans.forward(padded);
    let mut spec = fft.make_output_vec();
    fft.process(&mut buf, &mut spec)
        .map_err(|e| format!("FFT failed: {e}"))?;
    let mag: Vec<f64> = spec.iter().map(|c| c.norm()).collect();
    // Bin k is the frequency k/(padded·dx) cycles per unit x, i.e. thickness in nm.
    let bin_nm = 1.0 / (padded as f64 * dx);
    // Bins are chosen in floating point and clamped before they become indices, so no
    // search range, however large or odd, can index outside the spectrum.
    let last = mag.len() - 2;
    let k_lo = (lo / bin_nm).ceil().max(1.0);
    let k_hi = (max_nm / bin_nm).floor().min(last as f64);
    if !(k_lo + 1.0 <= k_hi) {
        return Err(format!(
            "the search range [{lo}, {max_nm}] nm holds no Fourier bin (this window resolves thicknesses up to about {:.0} nm)",
            last as f64 * bin_nm
        ));
    }
    let (k_lo, k_hi) = (k_lo as usize, k_hi as usize);
    let kp = (k_lo..=k_hi)
        .max_by(|a, b| mag[*a].total_cmp(&mag[*b]))
        .unwrap_or(k_lo);
    let (a, b, c) = (
        mag[kp - 1].max(1e-300).ln(),
        mag[kp].max(1e-300).ln(),
        mag[kp + 1].max(1e-300).ln(),
    );
    let denom = a - 2.0 * b + c;
    let offset = if denom < 0.0 {
        (0.5 * (a - c) / denom).clamp(-0.5, 0.5)
    } else {
        0.0
    };
    // The sub-bin step may cross a bound of the range: hold it there (flagged at-bound).
    let thickness_nm = ((kp as f64 + offset) * bin_nm).clamp(lo, max_nm);
    // σ: CRLB for the frequency of a sinusoid in white noise, σ_f = √12 σ_n/(2π A √N Δx),
    // with A = 2|X|/Σw.
    let sigma_n = noise_sigma(r);
    let amplitude = 2.0 * mag[kp] / wsum;
    let sigma_nm = 12f64.sqrt() * sigma_n
        / (2.0 * std::f64::consts::PI * amplitude.max(1e-12) * (n as f64).sqrt() * span);
    Ok(Estimate {
        thickness_nm,
        sigma_nm,
        resolution_nm: resolution,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn recovers_the_frequency_of_a_pure_fringe_pattern() {
        // R = 0.3 + 0.1 cos(2π d x) over an oxide-like x range: the peak is at d.
        let w: Vec<f64> = (0..1500).map(|i| 420.0 + i as f64 * 0.4).collect();
        let x = fringe_coordinate(&w, &vec![1.46; w.len()], &vec![1.0; w.len()]);
        // Within 2 % at 1.6 fringes (near the resolution limit), 0.2 % with more fringes.
        for (d, tol) in [
            (800.0, 0.02),
            (1500.0, 0.002),
            (2345.6, 0.002),
            (9000.0, 0.002),
        ] {
            let r: Vec<f64> = x
                .iter()
                .map(|x| 0.3 + 0.1 * (2.0 * std::f64::consts::PI * d * x).cos())
                .collect();
            let e = estimate(&Plans::default(), &x, &r, 100.0, 20000.0).unwrap();
            eprintln!("{d}: {}", e.thickness_nm);
            assert!(
                (e.thickness_nm - d).abs() < tol * d,
                "{d}: {}",
                e.thickness_nm
            );
            assert!(e.resolution_nm > 400.0 && e.resolution_nm < 600.0);
        }
    }

    #[test]
    fn huge_search_ranges_are_refused_not_panicking() {
        let w: Vec<f64> = (0..500).map(|i| 420.0 + i as f64).collect();
        let x = fringe_coordinate(&w, &vec![1.46; w.len()], &vec![1.0; w.len()]);
        let r: Vec<f64> = x.iter().map(|x| 0.3 + 0.1 * (6000.0 * x).cos()).collect();
        for (lo, hi) in [
            (1e307, 1e308),
            (100.0, f64::INFINITY),
            (f64::NAN, 1e308),
            (1e5, 2e5),
        ] {
            let e = estimate(&Plans::default(), &x, &r, lo, hi);
            assert!(
                e.is_err() || e.unwrap().thickness_nm.is_finite(),
                "{lo} {hi}"
            );
        }
        let e = estimate(&Plans::default(), &x, &r, 1e307, 1e308).unwrap_err();
        assert!(e.contains("no Fourier bin"), "{e}");
    }

    #[test]
    fn explains_a_range_below_resolution() {
        let w: Vec<f64> = (0..500).map(|i| 420.0 + i as f64).collect();
        let x = fringe_coordinate(&w, &vec![1.46; w.len()], &vec![1.0; w.len()]);
        let e = estimate(&Plans::default(), &x, &vec![0.3; w.len()], 1.0, 200.0).unwrap_err();
        assert!(e.contains("model method"), "{e}");
    }
}
