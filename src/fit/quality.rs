//! Fit quality: goodness of fit, σ from the covariance, and the flag names of a result.

/// Goodness of fit below the recipe's `min_gof`.
pub const POOR_FIT: &str = "poor-fit";
/// A fitted thickness ended on its search bound: the true value may lie outside.
pub const AT_BOUND: &str = "at-bound";
/// Another thickness fits within the noise.
pub const AMBIGUOUS: &str = "ambiguous";
/// Too little light for a trustworthy fit.
pub const LOW_SIGNAL: &str = "low-signal";
/// Part of the spectrum was clipped by the detector.
pub const SATURATED: &str = "saturated";
/// The thickness is below what the window can resolve (Fourier method).
pub const BELOW_RESOLUTION: &str = "below-resolution";
/// No thickness could be extracted at all (too few fringes, no usable pixels).
pub const NO_FIT: &str = "no-fit";

/// Flags that make a site invalid whatever its goodness of fit.
pub const INVALIDATING: [&str; 3] = [NO_FIT, SATURATED, LOW_SIGNAL];

/// Goodness of fit in 0..1: the coefficient of determination 1 − χ²/Σ(R_m − mean)²,
/// clamped (common practice in reflectometry).
pub fn gof(chi2: f64, measured: &[f64]) -> f64 {
    let n = measured.len() as f64;
    if n == 0.0 {
        return 0.0;
    }
    let mean = measured.iter().sum::<f64>() / n;
    let tss: f64 = measured.iter().map(|m| (m - mean) * (m - mean)).sum();
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
}
