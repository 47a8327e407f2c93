//! Radial profile: thickness against radius, fitted by a low-order even polynomial.
//!
//! v(r) = c₀ + c₂ρ² + c₄ρ⁴ with ρ = r / r_norm (r_norm = the usable radius, so every
//! coefficient is in nm and reads as "how much thicker at the edge"). Only even powers: a
//! radially symmetric film is smooth through the centre, so odd powers would describe a cusp.
//! The number of terms follows the data: one per distinct radius, at most three, never more
//! than the sites allow.

use serde::{Deserialize, Serialize};

/// Most terms used (c₀, c₂, c₄).
pub const MAX_TERMS: usize = 3;

/// A fitted radial profile.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RadialFit {
    /// Radius that ρ is taken relative to, mm.
    pub r_norm_mm: f64,
    /// Coefficients of ρ⁰, ρ², ρ⁴, … in nm.
    pub coefficients_nm: Vec<f64>,
    /// Value of the fit at the centre, nm.
    pub centre_nm: f64,
    /// Value of the fit at r_norm, nm.
    pub edge_nm: f64,
    /// Root-mean-square of the site residuals about the fit, nm.
    pub rms_residual_nm: f64,
}

impl RadialFit {
    /// Least-squares fit to `(radius_mm, value)` points; `None` without any finite point.
    pub fn fit(points: &[(f64, f64)], r_norm_mm: f64) -> Option<RadialFit> {
        let pts: Vec<(f64, f64)> = points
            .iter()
            .copied()
            .filter(|(r, v)| r.is_finite() && v.is_finite())
            .collect();
        if pts.is_empty() || r_norm_mm.is_nan() || r_norm_mm <= 0.0 {
            return None;
        }
        let terms = distinct_radii(&pts, r_norm_mm)
            .min(MAX_TERMS)
            .min(pts.len());
        let rho2 = |r: f64| (r / r_norm_mm).powi(2);
        let a = nalgebra::DMatrix::from_fn(pts.len(), terms, |i, k| rho2(pts[i].0).powi(k as i32));
        let b = nalgebra::DVector::from_iterator(pts.len(), pts.iter().map(|p| p.1));
        let c = a.svd(true, true).solve(&b, 1e-12).ok()?;
        let mut fit = RadialFit {
            r_norm_mm,
            coefficients_nm: c.iter().copied().collect(),
            centre_nm: c[0],
            edge_nm: 0.0,
            rms_residual_nm: 0.0,
        };
        fit.edge_nm = fit.eval(r_norm_mm);
        let ss: f64 = pts.iter().map(|&(r, v)| (v - fit.eval(r)).powi(2)).sum();
        fit.rms_residual_nm = (ss / pts.len() as f64).sqrt();
        Some(fit)
    }

    /// The fitted value at radius `r_mm`.
    pub fn eval(&self, r_mm: f64) -> f64 {
        let rho2 = (r_mm / self.r_norm_mm).powi(2);
        self.coefficients_nm
            .iter()
            .rev()
            .fold(0.0, |acc, c| acc * rho2 + c)
    }
}

/// Number of distinct radii, radii closer than 0.5 % of r_norm counting as one.
fn distinct_radii(points: &[(f64, f64)], r_norm: f64) -> usize {
    let mut r: Vec<f64> = points.iter().map(|p| p.0).collect();
    r.sort_by(f64::total_cmp);
    let tol = 0.005 * r_norm;
    1 + r.windows(2).filter(|w| w[1] - w[0] > tol).count()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn recovers_an_exact_even_quartic() {
        // v = 1000 + 20ρ² − 8ρ⁴ sampled at five radii (computed here).
        let f = |r: f64| {
            let p = (r / 70.0).powi(2);
            1000.0 + 20.0 * p - 8.0 * p * p
        };
        let pts: Vec<_> = [0.0, 17.5, 35.0, 52.5, 70.0]
            .iter()
            .map(|&r| (r, f(r)))
            .collect();
        let fit = RadialFit::fit(&pts, 70.0).unwrap();
        assert_eq!(fit.coefficients_nm.len(), 3);
        for (got, want) in fit.coefficients_nm.iter().zip([1000.0, 20.0, -8.0]) {
            assert!((got - want).abs() < 1e-9, "{got} vs {want}");
        }
        assert!((fit.edge_nm - 1012.0).abs() < 1e-9);
        assert!(fit.rms_residual_nm < 1e-9);
    }

    #[test]
    fn terms_follow_the_distinct_radii() {
        // Two radii: only c0 + c2 can be told apart; a single site gives a constant.
        let pts = [(0.0, 10.0), (50.0, 14.0), (50.0, 16.0)];
        let fit = RadialFit::fit(&pts, 50.0).unwrap();
        assert_eq!(fit.coefficients_nm.len(), 2);
        assert!((fit.centre_nm - 10.0).abs() < 1e-12 && (fit.edge_nm - 15.0).abs() < 1e-12);
        assert!((fit.rms_residual_nm - (2.0f64 / 3.0).sqrt()).abs() < 1e-12);
        let one = RadialFit::fit(&[(3.0, 7.0)], 50.0).unwrap();
        assert_eq!(one.coefficients_nm, vec![7.0]);
        assert!(RadialFit::fit(&[], 50.0).is_none());
    }
}
