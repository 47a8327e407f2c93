//! Dispersion formulas as plain functions of the vacuum wavelength in µm.
//!
//! Sellmeier: n² = 1 + Σ bᵢ λ²/(λ² − cᵢ) with cᵢ in µm² (I. H. Malitson, JOSA 55, 1205 (1965)
//! uses this form; refractiveindex.info "formula 1" lists √cᵢ). Cauchy: n = a + b/λ² + c/λ⁴.

use serde::{Deserialize, Serialize};

/// hc in eV·nm (CODATA 2018: h = 4.135667696e−15 eV·s, c = 299 792 458 m/s).
pub const HC_EV_NM: f64 = 1_239.841_984;

/// A weak-absorption tail of Urbach's exponential form (F. Urbach, Phys. Rev. 92, 1324
/// (1953), there for the absorption coefficient below the band edge), written for the
/// extinction coefficient: k(λ) = k0·exp(β·(E − E0)) with the photon energy E = hc/λ.
/// `k0` is k at the reference energy `e0_ev`, `beta_per_ev` the slope (1/eV); E0 is fixed,
/// k0 and β may be fitted.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Urbach {
    pub k0: f64,
    pub beta_per_ev: f64,
    pub e0_ev: f64,
}

impl Urbach {
    /// k at the vacuum wavelength (nm).
    pub fn k(&self, wavelength_nm: f64) -> f64 {
        self.k0 * (self.beta_per_ev * (HC_EV_NM / wavelength_nm - self.e0_ev)).exp()
    }
}

/// n² from the Sellmeier form; NaN-free only away from the poles λ² = cᵢ.
pub fn sellmeier_n2(b: &[f64], c: &[f64], lambda_um: f64) -> f64 {
    let l2 = lambda_um * lambda_um;
    1.0 + b
        .iter()
        .zip(c)
        .map(|(bi, ci)| bi * l2 / (l2 - ci))
        .sum::<f64>()
}

/// Wavelengths (µm) of the Sellmeier poles, √cᵢ for positive cᵢ.
pub fn sellmeier_poles_um(c: &[f64]) -> Vec<f64> {
    c.iter()
        .filter(|ci| **ci > 0.0)
        .map(|ci| ci.sqrt())
        .collect()
}

/// n from the Cauchy form.
pub fn cauchy_n(a: f64, b: f64, c: f64, lambda_um: f64) -> f64 {
    let l2 = lambda_um * lambda_um;
    a + b / l2 + c / (l2 * l2)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn malitson_fused_silica_at_587_6_nm() {
        // Malitson (1965) coefficients; n(587.6 nm) ≈ 1.4585 (from memory, the d-line index).
        let b = [0.6961663, 0.4079426, 0.8974794];
        let c = [
            0.0684043f64.powi(2),
            0.1162414f64.powi(2),
            9.896161f64.powi(2),
        ];
        let n = sellmeier_n2(&b, &c, 0.5876).sqrt();
        assert!((n - 1.4585).abs() < 2e-4, "n = {n}");
    }

    #[test]
    fn urbach_tail_is_k0_at_e0_and_grows_e_fold_per_one_over_beta() {
        // The form of Urbach (1953): k(E0) = k0, and k rises by e per 1/β eV of photon energy.
        let u = Urbach {
            k0: 1e-3,
            beta_per_ev: 4.0,
            e0_ev: 2.0,
        };
        let l0 = HC_EV_NM / 2.0;
        assert!((u.k(l0) - 1e-3).abs() < 1e-15);
        let l1 = HC_EV_NM / 2.25;
        assert!((u.k(l1) / 1e-3 - std::f64::consts::E).abs() < 1e-12);
    }

    #[test]
    fn cauchy_reduces_to_a_at_long_wavelength() {
        assert!((cauchy_n(1.6, 0.012, 0.0, 1e6) - 1.6).abs() < 1e-12);
        assert!((cauchy_n(1.6, 0.01, 0.0, 0.5) - 1.64).abs() < 1e-12);
    }
}
