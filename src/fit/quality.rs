//! Fit quality: goodness of fit, the noise a spectrum shows by itself, reduced χ², residual
//! structure, and the flag names of a result.

use super::lanes;

/// Goodness of fit below the recipe's `min_gof`.
pub const POOR_FIT: &str = "poor-fit";
/// A fitted thickness ended on its search bound: the true value may lie outside.
pub const AT_BOUND: &str = "at-bound";
/// Another thickness fits within the noise.
pub const AMBIGUOUS: &str = "ambiguous";
/// The best solution, or one within the noise of it, lies outside the search range: the
/// number reported (held at the bound) is not the film's.
pub const OUTSIDE_RANGE: &str = "outside-range";
/// The residual is far above the spectrum's own noise and smooth: the model lacks a term
/// (an unmodelled layer, a wrong index, an instrument effect).
pub const RESIDUAL_STRUCTURE: &str = "residual-structure";
/// Too little light for a trustworthy fit.
pub const LOW_SIGNAL: &str = "low-signal";
/// Part of the spectrum was clipped by the detector.
pub const SATURATED: &str = "saturated";
/// The thickness is below what the window can resolve (Fourier method).
pub const BELOW_RESOLUTION: &str = "below-resolution";
/// No thickness could be extracted at all (too few fringes, no usable pixels).
pub const NO_FIT: &str = "no-fit";

/// Every flag a fit can raise: the one source of their spelling, used as written in
/// `sites.csv` (joined by `;`), `summary.json` and on the map and report pages.
pub const ALL_FLAGS: [&str; 9] = [
    POOR_FIT,
    AT_BOUND,
    AMBIGUOUS,
    OUTSIDE_RANGE,
    RESIDUAL_STRUCTURE,
    LOW_SIGNAL,
    SATURATED,
    BELOW_RESOLUTION,
    NO_FIT,
];

/// Flags that make a site invalid whatever its goodness of fit.
/// (`poor-fit` also stands when the gof passes but the residual is far above the noise.)
pub const INVALIDATING: [&str; 5] = [NO_FIT, SATURATED, LOW_SIGNAL, OUTSIDE_RANGE, POOR_FIT];

/// Smallest noise σ (reflectance) assumed: a spectrometer's digitisation and stray light
/// keep real spectra above about 10⁻⁴ of full scale (common practice), and a smaller floor
/// would make tiny model imperfections look significant on noise-free synthetic spectra.
pub const NOISE_FLOOR: f64 = 2e-4;
/// Reduced χ² above which a fit is poor whatever its gof: the residual is 5× the noise.
pub const MAX_REDUCED_CHI2: f64 = 25.0;
/// Reduced χ² above which a smooth residual is reported as structure.
pub const STRUCTURE_REDUCED_CHI2: f64 = 4.0;
/// Lag-1 autocorrelation of the residual above which it counts as smooth (white noise ≈ 0).
pub const STRUCTURE_AUTOCORRELATION: f64 = 0.5;

/// Noise σ of one series from its own pixel-to-pixel scatter: the median absolute third
/// difference, which removes any quadratic trend, scaled to a Gaussian σ
/// (third difference of white noise has variance 20σ²; median |x| = 0.6745σ for a Gaussian).
/// Signal that varies within a few pixels inflates it.
pub fn scatter_sigma(values: &[f64]) -> f64 {
    match abs_third_differences(values) {
        Some(mut d3) => {
            let k = d3.len() / 2;
            as_sigma(*d3.select_nth_unstable(k).1)
        }
        None => f64::NAN,
    }
}

/// |third differences| of a series (at least 8 values) as bit patterns: for non-negative
/// doubles the integer order is the numeric order (NaN last, as total_cmp has it), and
/// integers compare faster.
fn abs_third_differences(values: &[f64]) -> Option<Vec<u64>> {
    if values.len() < 8 {
        return None;
    }
    let n = values.len() - 3;
    let (a, b, c, e) = (
        &values[..n],
        &values[1..n + 1],
        &values[2..n + 2],
        &values[3..],
    );
    Some(
        a.iter()
            .zip(b)
            .zip(c)
            .zip(e)
            .map(|(((a, b), c), e)| (e - 3.0 * c + 3.0 * b - a).abs().to_bits())
            .collect(),
    )
}

/// A median |third difference| (as bits) scaled to a Gaussian σ.
fn as_sigma(median_bits: u64) -> f64 {
    f64::from_bits(median_bits) / (0.6745 * 20f64.sqrt())
}

/// The noise σ of a measured spectrum, estimated from the spectrum itself: the smaller of
/// the scatter of the spectrum and the scatter of the fit's residual (the model takes out
/// fringes too dense for differences to remove), never below [`NOISE_FLOOR`].
pub fn noise_sigma(measured: &[f64], residuals: &[f64]) -> f64 {
    let s = smaller_scatter(measured, residuals);
    if s.is_nan() {
        NOISE_FLOOR
    } else {
        s.max(NOISE_FLOOR)
    }
}

/// `scatter_sigma(measured).min(scatter_sigma(residuals))`, with the spectrum's median
/// sought near the residual's: a fit's residual differs from the spectrum by the smooth
/// model, whose third differences are small, so the two medians are usually close. Counting
/// the spectrum's values below and inside a bracket of ±1 % around the residual's median
/// settles the smaller one, selecting only among the few inside (or among all of them, when
/// the spectrum's median lies below the bracket).
fn smaller_scatter(measured: &[f64], residuals: &[f64]) -> f64 {
    let (Some(mut m), Some(mut r)) = (
        abs_third_differences(measured),
        abs_third_differences(residuals),
    ) else {
        return scatter_sigma(measured).min(scatter_sigma(residuals));
    };
    let k = m.len() / 2;
    let r_mid = r.len() / 2;
    let r_median = *r.select_nth_unstable(r_mid).1;
    let a = f64::from_bits(r_median);
    let with_residual = |m_median: u64| as_sigma(m_median).min(as_sigma(r_median));
    if !a.is_finite() || m.len() != r.len() {
        return with_residual(*m.select_nth_unstable(k).1);
    }
    // Compared as doubles: the same order for these non-negative values (NaN above all, as
    // its bits are), and baseline x86-64 compares doubles in vector lanes but not u64s.
    let (lo, hi) = (a * 0.99, a * 1.01);
    let value = |x: &u64| f64::from_bits(*x);
    let below: usize = m.iter().map(|x| usize::from(value(x) < lo)).sum();
    let inside: usize = m
        .iter()
        .map(|x| usize::from((value(x) >= lo) & (value(x) <= hi)))
        .sum();
    let (lo, hi) = (lo.to_bits(), hi.to_bits());
    if k < below {
        with_residual(*m.select_nth_unstable(k).1)
    } else if k >= below + inside {
        // The spectrum's median lies above the bracket, so above the residual's.
        as_sigma(r_median)
    } else {
        let mut few: Vec<u64> = m
            .iter()
            .copied()
            .filter(|x| (lo..=hi).contains(x))
            .collect();
        with_residual(*few.select_nth_unstable(k - below).1)
    }
}

/// χ² per degree of freedom in units of the noise variance (≈ 1 when the model explains
/// everything but the noise).
pub fn reduced_chi2(chi2: f64, pixels: usize, params: usize, noise_sigma: f64) -> f64 {
    chi2 / ((pixels as f64 - params as f64).max(1.0) * noise_sigma * noise_sigma)
}

/// Lag-1 autocorrelation of a residual: ≈ 0 for white noise, near 1 for a smooth misfit.
pub fn lag1_autocorrelation(residuals: &[f64]) -> f64 {
    let ss = lanes::sum(residuals.len(), |i| residuals[i] * residuals[i]);
    if !(ss > 0.0) {
        return 0.0;
    }
    let n = residuals.len().saturating_sub(1);
    lanes::sum(n, |i| residuals[i] * residuals[i + 1]) / ss
}

/// Goodness of fit in 0..1: the coefficient of determination 1 − χ²/Σ(R_m − mean)²,
/// clamped (common practice in reflectometry).
pub fn gof(chi2: f64, measured: &[f64]) -> f64 {
    let n = measured.len() as f64;
    if n == 0.0 {
        return 0.0;
    }
    let mean = lanes::sum(measured.len(), |i| measured[i]) / n;
    let tss = lanes::sum(measured.len(), |i| {
        (measured[i] - mean) * (measured[i] - mean)
    });
    if !(tss > 0.0) {
        return if chi2 <= 0.0 { 1.0 } else { 0.0 };
    }
    (1.0 - chi2 / tss).clamp(0.0, 1.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gof_is_one_for_a_perfect_fit_and_zero_for_the_mean() {
        let m = [0.1, 0.3, 0.2, 0.4];
        assert_eq!(gof(0.0, &m), 1.0);
        let tss = 0.05; // Σ (m − 0.25)² = 0.0225 + 0.0025 + 0.0025 + 0.0225
        assert!((gof(tss, &m)).abs() < 1e-12);
        assert!((gof(tss / 2.0, &m) - 0.5).abs() < 1e-12);
        assert_eq!(gof(1.0, &m), 0.0);
    }

    #[test]
    fn scatter_sees_the_noise_and_not_a_smooth_trend() {
        use rand::SeedableRng;
        use rand_distr::{Distribution, Normal};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let noise = Normal::new(0.0, 0.003).unwrap();
        let smooth: Vec<f64> = (0..2000)
            .map(|i| 0.3 + 0.1 * (i as f64 / 300.0).sin())
            .collect();
        let noisy: Vec<f64> = smooth.iter().map(|v| v + noise.sample(&mut rng)).collect();
        let s = scatter_sigma(&noisy);
        assert!((s - 0.003).abs() < 0.0003, "{s}");
        assert!(scatter_sigma(&smooth) < 1e-6);
        assert_eq!(noise_sigma(&smooth, &smooth), NOISE_FLOOR);
        let white: Vec<f64> = noisy.iter().zip(&smooth).map(|(a, b)| a - b).collect();
        assert!(lag1_autocorrelation(&white).abs() < 0.1);
        let trend: Vec<f64> = smooth.iter().map(|v| v - 0.3).collect();
        assert!(lag1_autocorrelation(&trend) > 0.99);
        assert!((reduced_chi2(0.009 * 0.009 * 101.0, 102, 1, 0.009) - 1.0).abs() < 1e-12);
    }

    proptest::proptest! {
        /// The bracketed search gives the smaller of the two scatters exactly, whether the
        /// residual is the spectrum less a smooth model (medians close), a rougher or a
        /// smoother series than the spectrum, or holds NaN.
        #[test]
        fn noise_is_the_smaller_scatter_exactly(
            seed in 0u64..1_000_000,
            n in 8usize..400,
            model_scale in proptest::sample::select(vec![0.0, 1e-4, 0.05, 1.0]),
            residual_noise in proptest::sample::select(vec![0.5, 0.999, 1.0, 1.001, 2.0]),
            nan_at in proptest::option::of(0usize..400),
        ) {
            use rand::SeedableRng;
            use rand_distr::{Distribution, Normal};
            let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
            let unit = Normal::new(0.0, 1.0).unwrap();
            let model: Vec<f64> = (0..n).map(|i| model_scale * (i as f64 / 7.0).sin()).collect();
            let mut noise: Vec<f64> = (0..n).map(|_| 0.003 * unit.sample(&mut rng)).collect();
            if let Some(j) = nan_at.filter(|j| *j < n) {
                noise[j] = f64::NAN;
            }
            let measured: Vec<f64> = model.iter().zip(&noise).map(|(m, e)| 0.3 + m + e).collect();
            let residuals: Vec<f64> = noise.iter().map(|e| residual_noise * e).collect();
            let want = scatter_sigma(&measured).min(scatter_sigma(&residuals));
            let got = smaller_scatter(&measured, &residuals);
            proptest::prop_assert!(got.to_bits() == want.to_bits() || (got.is_nan() && want.is_nan()), "{} {}", got, want);
        }
    }
}
