//! The Cramér–Rao bound of a thickness from the measured noise level.
//!
//! Model: the normalised reflectance at pixel i is y_i = R(λ_i; d) + e_i with independent
//! e_i ~ N(0, σ_n²). The log-likelihood is −Σ (y_i − R_i(d))²/(2σ_n²) + const, so the Fisher
//! information of d is I(d) = Σ_i (∂R_i/∂d)²/σ_n², and any unbiased estimator has
//!
//! ```text
//! var(d̂) ≥ 1/I(d) = σ_n² / Σ_i (∂R(λ_i; d)/∂d)²
//! ```
//!
//! (Kay, *Fundamentals of Statistical Signal Processing*, vol. 1: Estimation Theory, 1993,
//! ch. 3: the bound for a signal in white Gaussian noise). The other parameters of the stack
//! are held at their fitted values (with more free parameters the bound can only grow).
//!
//! The noise level is measured, not assumed: σ_n² is the per-pixel variance of the
//! normalised spectra taken in a row at one site (static repeats share their dark and
//! reference, so what scatters is the sample's own noise), pooled over the groups and
//! averaged over the pixels of the fit window. ∂R/∂d is a central difference of the model.

use crate::fit::{FitResult, Fitter};

/// Step of the central difference, nm: far below a fringe, far above rounding.
const STEP_NM: f64 = 0.01;

/// ∂R/∂d of the first fitted layer at the thickness of `fit`, per wavelength.
pub fn slope(fitter: &Fitter, fit: &FitResult, wavelengths_nm: &[f64]) -> Vec<f64> {
    let at = |delta: f64| {
        let mut f = fit.clone();
        if let Some(l) = f.layers.first_mut() {
            l.thickness_nm += delta;
        }
        fitter.model_reflectance(&f, wavelengths_nm)
    };
    let (up, down) = (at(STEP_NM), at(-STEP_NM));
    up.iter()
        .zip(&down)
        .map(|(u, d)| (u - d) / (2.0 * STEP_NM))
        .collect()
}

/// The bound on σ(d̂): √(σ_n² / Σ slope²); `None` when nothing constrains d.
pub fn bound_nm(noise_variance: f64, slope: &[f64]) -> Option<f64> {
    let information: f64 = slope.iter().map(|s| s * s).sum();
    (information > 0.0 && noise_variance.is_finite() && noise_variance >= 0.0)
        .then(|| (noise_variance / information).sqrt())
}

/// The bound with pixel i's own noise variance σ_i²: var(d̂) ≥ 1/Σ_i (∂R_i/∂d)²/σ_i²
/// (Kay 1993, ch. 3: the Fisher information of a Gaussian with known covariance
/// C = diag(σ_i²) is (∂μ/∂d)ᵀC⁻¹(∂μ/∂d)). With a detector that sees much less light at one end
/// this is well below [`bound_nm`]; only a fit weighting each pixel by 1/σ_i² reaches it.
pub fn bound_per_pixel_nm(variance: &[f64], slope: &[f64]) -> Option<f64> {
    let information: f64 = slope
        .iter()
        .zip(variance)
        .filter(|(_, v)| **v > 0.0)
        .map(|(g, v)| g * g / v)
        .sum();
    (information > 0.0).then(|| (1.0 / information).sqrt())
}

/// The σ of an unweighted least-squares estimate of d with pixel noise σ_i² (linearised:
/// d̂ − d = Σ g_i e_i / Σ g_i², so var = Σ g_i² σ_i² / (Σ g_i²)²).
pub fn unweighted_sigma_nm(variance: &[f64], slope: &[f64]) -> Option<f64> {
    let s2: f64 = slope.iter().map(|g| g * g).sum();
    let num: f64 = slope.iter().zip(variance).map(|(g, v)| g * g * v).sum();
    (s2 > 0.0).then(|| (num / (s2 * s2)).sqrt())
}

/// Measured noise variance: per-pixel variance over the spectra of each group (spectra taken
/// in a row on one pixel axis), pooled over groups by degrees of freedom and averaged over
/// the pixels. `None` without a group of two spectra.
pub fn noise_variance(groups: &[Vec<Vec<f64>>]) -> Option<f64> {
    let mut sum = 0.0;
    let mut dof = 0usize;
    let mut pixels = 0usize;
    for g in groups.iter().filter(|g| g.len() >= 2) {
        let n = g[0].len();
        if n == 0 || g.iter().any(|s| s.len() != n) {
            continue;
        }
        if pixels != 0 && pixels != n {
            continue;
        }
        pixels = n;
        for i in 0..n {
            let m = g.iter().map(|s| s[i]).sum::<f64>() / g.len() as f64;
            sum += g.iter().map(|s| (s[i] - m).powi(2)).sum::<f64>();
        }
        dof += g.len() - 1;
    }
    (dof > 0).then(|| sum / (dof * pixels) as f64)
}

/// Per-pixel variance of the normalised spectra, pooled over the groups of two or more
/// spectra on one pixel axis (the first such group's).
pub fn pixel_variance(groups: &[Vec<Vec<f64>>]) -> Option<Vec<f64>> {
    let n = groups.iter().find(|g| g.len() >= 2)?[0].len();
    let mut sum = vec![0.0; n];
    let mut dof = 0;
    for g in groups
        .iter()
        .filter(|g| g.len() >= 2 && g.iter().all(|s| s.len() == n))
    {
        for i in 0..n {
            let m = g.iter().map(|s| s[i]).sum::<f64>() / g.len() as f64;
            sum[i] += g.iter().map(|s| (s[i] - m).powi(2)).sum::<f64>();
        }
        dof += g.len() - 1;
    }
    Some(sum.into_iter().map(|v| v / dof as f64).collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_bound_of_a_straight_line_slope() {
        // y_i = a·d + e_i over N pixels: var(d̂) ≥ σ²/(N a²) (Kay 1993, ch. 3, the DC level
        // in white Gaussian noise, scaled by a).
        let slope = vec![0.5; 100];
        let b = bound_nm(0.01, &slope).unwrap();
        assert!((b - (0.01f64 / (100.0 * 0.25)).sqrt()).abs() < 1e-15);
        assert_eq!(bound_nm(0.01, &[0.0; 5]), None);
    }

    #[test]
    fn pooled_noise_of_known_groups() {
        // Group 1: pixel values (1, 3) and (3, 5): per-pixel SS 2 + 2 = 4, 1 dof.
        // Group 2: (0, 0), (0, 0), (3, 3): per-pixel SS 6 + 6 = 12, 2 dof.
        // σ² = (4 + 12)/(3 dof · 2 pixels) = 8/3.
        let g = vec![
            vec![vec![1.0, 3.0], vec![3.0, 5.0]],
            vec![vec![0.0, 0.0], vec![0.0, 0.0], vec![3.0, 3.0]],
            vec![vec![9.0, 9.0]],
        ];
        assert!((noise_variance(&g).unwrap() - 8.0 / 3.0).abs() < 1e-12);
        assert_eq!(noise_variance(&g[2..]), None);
        assert_eq!(pixel_variance(&g[..2]).unwrap(), vec![8.0 / 3.0; 2]);
    }

    #[test]
    fn flat_noise_makes_the_three_forms_agree_and_uneven_noise_parts_them() {
        let slope = [1.0, 2.0, 3.0];
        let flat = [0.5; 3];
        let b = bound_nm(0.5, &slope).unwrap();
        assert!((bound_per_pixel_nm(&flat, &slope).unwrap() - b).abs() < 1e-15);
        assert!((unweighted_sigma_nm(&flat, &slope).unwrap() - b).abs() < 1e-15);
        // Uneven: the weighted bound is lowest; Cauchy–Schwarz puts the unweighted σ above it.
        let uneven = [0.01, 1.0, 4.0];
        let w = bound_per_pixel_nm(&uneven, &slope).unwrap();
        let u = unweighted_sigma_nm(&uneven, &slope).unwrap();
        // 1/√(1/0.01 + 4/1 + 9/4) = 1/√106.25; √((0.01 + 4 + 36)/14²).
        assert!((w - 1.0 / 106.25f64.sqrt()).abs() < 1e-12);
        assert!((u - (40.01f64 / 196.0).sqrt()).abs() < 1e-12);
        assert!(w < u);
    }
}
