//! A material: a named dispersion model that gives the complex index N = n + ik at a vacuum
//! wavelength (k > 0 absorbs), with the wavelength range its source covers.

use super::dispersion::{cauchy_n, sellmeier_n2, Urbach};
use super::table::NkTable;
use num_complex::Complex64;
use std::sync::Arc;

/// How a material's index is computed (λ in µm in every formula, as in DESIGN.md §3).
#[derive(Debug, Clone, PartialEq)]
pub enum Dispersion {
    /// Constant n and k.
    Constant { n: f64, k: f64 },
    /// n = a + b/λ² + c/λ⁴ with constant k.
    Cauchy { a: f64, b: f64, c: f64, k: f64 },
    /// n² = 1 + Σ bᵢ λ²/(λ² − cᵢ), cᵢ in µm², k = 0.
    Sellmeier { b: Vec<f64>, c: Vec<f64> },
    /// Tabulated n, k with natural cubic spline interpolation.
    Table(Arc<NkTable>),
}

/// A named material (cheap to clone: tables are shared).
#[derive(Debug, Clone, PartialEq)]
pub struct Material {
    name: String,
    dispersion: Dispersion,
    range_nm: Option<(f64, f64)>,
    source: String,
    /// A weak-absorption tail added to k.
    tail: Option<Urbach>,
}

impl Material {
    /// A material from its dispersion; a table's own range becomes the material's range.
    pub fn new(name: impl Into<String>, dispersion: Dispersion) -> Material {
        let range_nm = match &dispersion {
            Dispersion::Table(t) => Some(t.range_nm()),
            _ => None,
        };
        Material {
            name: name.into(),
            dispersion,
            range_nm,
            source: String::new(),
            tail: None,
        }
    }

    /// A constant-index material.
    pub fn constant(name: impl Into<String>, n: f64, k: f64) -> Material {
        Material::new(name, Dispersion::Constant { n, k })
    }

    /// Sets the wavelength range (nm) over which the source is valid.
    pub fn with_range_nm(mut self, from: f64, to: f64) -> Material {
        self.range_nm = Some((from, to));
        self
    }

    /// Sets the citation of the data.
    pub fn with_source(mut self, source: impl Into<String>) -> Material {
        self.source = source.into();
        self
    }

    /// Adds an Urbach absorption tail to k (see [`Urbach`]).
    pub fn with_tail(mut self, tail: Option<Urbach>) -> Material {
        self.tail = tail;
        self
    }

    /// The material's name.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// The dispersion model.
    pub fn dispersion(&self) -> &Dispersion {
        &self.dispersion
    }

    /// Where the data comes from (empty for user materials).
    pub fn source(&self) -> &str {
        &self.source
    }

    /// Complex index N = n + ik at the vacuum wavelength (nm).
    pub fn index(&self, wavelength_nm: f64) -> Complex64 {
        let n = self.model_index(wavelength_nm);
        match &self.tail {
            Some(t) => Complex64::new(n.re, n.im + t.k(wavelength_nm)),
            None => n,
        }
    }

    fn model_index(&self, wavelength_nm: f64) -> Complex64 {
        let l_um = wavelength_nm / 1000.0;
        match &self.dispersion {
            Dispersion::Constant { n, k } => Complex64::new(*n, *k),
            Dispersion::Cauchy { a, b, c, k } => Complex64::new(cauchy_n(*a, *b, *c, l_um), *k),
            Dispersion::Sellmeier { b, c } => {
                // Below a pole n² may turn negative; the square root of a complex n² keeps
                // the result defined (an evanescent, purely imaginary index) instead of NaN.
                Complex64::new(sellmeier_n2(b, c, l_um), 0.0).sqrt()
            }
            Dispersion::Table(t) => {
                let (n, k) = t.nk(wavelength_nm);
                Complex64::new(n, k)
            }
        }
    }

    /// The published (or tabulated) wavelength range in nm, if the material has one.
    pub fn range_nm(&self) -> Option<(f64, f64)> {
        self.range_nm
    }

    /// A warning when `[from, to]` nm reaches outside the material's range, else `None`.
    pub fn range_warning(&self, from: f64, to: f64) -> Option<String> {
        let (lo, hi) = self.range_nm?;
        (from < lo || to > hi).then(|| {
            let held = if matches!(self.dispersion, Dispersion::Table(_)) {
                "the table's end values are held outside it"
            } else {
                "the formula is extrapolated"
            };
            format!(
                "material {}: the window {from}–{to} nm leaves its published range {lo}–{hi} nm; {held}",
                self.name
            )
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cauchy_with_constant_k() {
        let m = Material::new(
            "r",
            Dispersion::Cauchy {
                a: 1.6,
                b: 0.01,
                c: 0.0,
                k: 0.002,
            },
        );
        let n = m.index(500.0);
        assert!((n.re - 1.64).abs() < 1e-12 && (n.im - 0.002).abs() < 1e-15);
    }

    #[test]
    fn range_warning_only_outside() {
        let m = Material::constant("x", 1.5, 0.0).with_range_nm(400.0, 900.0);
        assert!(m.range_warning(420.0, 880.0).is_none());
        let w = m.range_warning(380.0, 880.0).unwrap();
        assert!(w.contains("400–900"), "{w}");
        assert!(Material::constant("y", 1.0, 0.0)
            .range_warning(1.0, 1e5)
            .is_none());
    }
}
