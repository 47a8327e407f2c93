//! Dispersion formulas as plain functions of the vacuum wavelength in µm.
//!
//! Sellmeier: n² = 1 + Σ bᵢ λ²/(λ² − cᵢ) with cᵢ in µm² (I. H. Malitson, JOSA 55, 1205 (1965)
//! uses this form; refractiveindex.info "formula 1" lists √cᵢ). Cauchy: n = a + b/λ² + c/λ⁴.

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
    fn cauchy_reduces_to_a_at_long_wavelength() {
        assert!((cauchy_n(1.6, 0.012, 0.0, 1e6) - 1.6).abs() < 1e-12);
        assert!((cauchy_n(1.6, 0.01, 0.0, 0.5) - 1.64).abs() < 1e-12);
    }
}
