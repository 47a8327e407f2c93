//! Fitting a material's dispersion coefficients together with thicknesses: the formula's
//! fitted coefficients ([`Coefficients`]), the model of one spectrum with its derivatives by
//! thickness (analytic, from the kernel) and by coefficient (central differences)
//! ([`SiteModel`]), and the per-site Levenberg–Marquardt fit ([`fit_site`]). The joint fit
//! over many spectra is [`super::shared`].

use super::instrument::Slit;
use super::kernel::{Channel, Prepared};
use super::lm::{self, Problem, Settings};
use super::model::tilt_coordinate;
use crate::optics::{coefficients, library, Material, MaterialSpec};
use std::path::Path;

/// A material's formula and which of its coefficients vary, with their ranges.
#[derive(Debug, Clone)]
pub struct Coefficients {
    pub material: String,
    pub spec: MaterialSpec,
    pub names: Vec<String>,
    pub lower: Vec<f64>,
    pub upper: Vec<f64>,
}

impl Coefficients {
    /// The fitted coefficients of a recipe material; `None` when none is fitted.
    pub fn of(material: &str, spec: &MaterialSpec) -> Option<Coefficients> {
        let fit = spec.fit_spec()?;
        if fit.fit.is_empty() {
            return None;
        }
        let names = fit.fit.to_vec();
        let (lower, upper) = names
            .iter()
            .map(|n| {
                let [lo, hi] = coefficients::limits(spec, n);
                (lo, hi)
            })
            .unzip();
        Some(Coefficients {
            material: material.to_string(),
            spec: spec.clone(),
            names,
            lower,
            upper,
        })
    }

    /// The starting values, as written in the recipe.
    pub fn start(&self) -> Vec<f64> {
        self.names
            .iter()
            .map(|n| coefficients::get(&self.spec, n).unwrap_or(0.0))
            .collect()
    }

    /// The formula with these values, nothing marked as fitted.
    pub fn spec_at(&self, values: &[f64]) -> MaterialSpec {
        let mut s = coefficients::fixed(&self.spec);
        for (n, v) in self.names.iter().zip(values) {
            coefficients::set(&mut s, n, *v);
        }
        s
    }

    /// The material with these values.
    pub fn material_at(&self, values: &[f64]) -> Material {
        // Cauchy and Sellmeier read no file: the folder is never used.
        library::from_spec(&self.material, &self.spec_at(values), Path::new("."))
            .unwrap_or_else(|_| Material::constant(self.material.clone(), f64::NAN, 0.0))
    }

    /// Central-difference step of coefficient `i` at `value`: a millionth of its typical size.
    fn step(&self, i: usize, value: f64) -> f64 {
        let typical = match self.names[i].as_str() {
            "a" | "beta" => 1.0,
            "b" => 0.01,
            n if n.starts_with('b') => 0.1,
            _ => 0.001,
        };
        1e-6 * value.abs().max(typical)
    }
}

/// The stack of a recipe with one material's coefficients free: everything needed to model
/// one spectrum on its pixel grid.
#[derive(Debug, Clone)]
pub struct SiteModel<'a> {
    pub ambient: &'a Material,
    pub layers: Vec<Material>,
    pub substrate: &'a Material,
    pub channels: &'a [Channel],
    pub coefficients: &'a Coefficients,
    /// Thickness of every layer (fitted ones are replaced).
    pub base: Vec<f64>,
    /// Indices of the fitted layers.
    pub fitted: Vec<usize>,
    pub scale: bool,
    pub tilt: bool,
    pub pixels_nm: Vec<f64>,
    /// The spectrometer's slit, if any: the model is computed on its fine grid.
    pub slit: Option<Slit>,
}

/// R at every pixel and its derivatives: by each fitted thickness and by each coefficient.
struct Curves {
    r: Vec<f64>,
    by_thickness: Vec<Vec<f64>>,
    by_coefficient: Vec<Vec<f64>>,
}

impl SiteModel<'_> {
    /// Local parameters of a site: fitted thicknesses, then scale and tilt when fitted.
    pub fn local_params(&self) -> usize {
        self.fitted.len() + usize::from(self.scale) + usize::from(self.tilt)
    }

    /// The starting local parameters for thicknesses `d` of every layer.
    pub fn local_start(&self, d: &[f64]) -> Vec<f64> {
        let mut x: Vec<f64> = self.fitted.iter().map(|&i| d[i]).collect();
        if self.scale {
            x.push(1.0);
        }
        if self.tilt {
            x.push(0.0);
        }
        x
    }

    /// Thickness of every layer at local parameters `x`.
    pub fn thickness(&self, x: &[f64]) -> Vec<f64> {
        let mut d = self.base.clone();
        for (a, &l) in self.fitted.iter().enumerate() {
            d[l] = x[a];
        }
        d
    }

    fn stack_at(&self, p: &[f64]) -> Vec<Material> {
        let m = self.coefficients.material_at(p);
        self.layers
            .iter()
            .map(|l| {
                if l.name() == self.coefficients.material {
                    m.clone()
                } else {
                    l.clone()
                }
            })
            .collect()
    }

    fn grid(&self) -> &[f64] {
        self.slit.as_ref().map_or(&self.pixels_nm, |s| &s.fine_nm)
    }

    fn prepared(&self, p: &[f64]) -> Prepared {
        Prepared::new(
            self.ambient,
            &self.stack_at(p),
            self.substrate,
            self.channels,
            self.grid(),
        )
    }

    fn to_pixels(&self, fine: Vec<f64>) -> Vec<f64> {
        match &self.slit {
            Some(s) => s.convolve(&fine),
            None => fine,
        }
    }

    fn curves(&self, p: &[f64], d: &[f64]) -> Curves {
        let prep = self.prepared(p);
        let n = prep.len();
        let mut r = vec![0.0; n];
        let mut by_thickness = vec![vec![0.0; n]; self.fitted.len()];
        let mut g = vec![0.0; d.len()];
        for k in 0..n {
            r[k] = prep.reflectance_grad(k, d, &mut g);
            for (a, &l) in self.fitted.iter().enumerate() {
                by_thickness[a][k] = g[l];
            }
        }
        let by_coefficient = (0..p.len())
            .map(|i| {
                let h = self.coefficients.step(i, p[i]);
                let at = |delta: f64| {
                    let mut q = p.to_vec();
                    q[i] += delta;
                    let prep = self.prepared(&q);
                    (0..n).map(|k| prep.reflectance(k, d)).collect::<Vec<f64>>()
                };
                let (up, down) = (at(h), at(-h));
                self.to_pixels(
                    up.iter()
                        .zip(&down)
                        .map(|(u, v)| (u - v) / (2.0 * h))
                        .collect(),
                )
            })
            .collect();
        Curves {
            r: self.to_pixels(r),
            by_thickness: by_thickness
                .into_iter()
                .map(|c| self.to_pixels(c))
                .collect(),
            by_coefficient,
        }
    }

    /// Residuals (model − measured) of one spectrum at local parameters `x` and
    /// coefficients `p`, with the Jacobian by local parameters (`jl`, row-major, pixels ×
    /// [`Self::local_params`]) and by coefficients (`jp`, pixels × coefficients). Returns χ².
    pub fn eval(
        &self,
        measured: &[f64],
        x: &[f64],
        p: &[f64],
        res: &mut [f64],
        jl: &mut [f64],
        jp: &mut [f64],
    ) -> f64 {
        let nf = self.fitted.len();
        let nl = self.local_params();
        let m = p.len();
        let s = if self.scale { x[nf] } else { 1.0 };
        let t = if self.tilt {
            x[nf + usize::from(self.scale)]
        } else {
            0.0
        };
        let c = self.curves(p, &self.thickness(x));
        let lam = &self.pixels_nm;
        let (l0, l1) = (lam[0], lam[lam.len() - 1]);
        let mut chi2 = 0.0;
        for j in 0..lam.len() {
            let u = tilt_coordinate(lam[j], l0, l1);
            let f = s * (1.0 + t * u);
            res[j] = f * c.r[j] - measured[j];
            chi2 += res[j] * res[j];
            let row = &mut jl[j * nl..(j + 1) * nl];
            for (cell, by) in row.iter_mut().zip(&c.by_thickness) {
                *cell = f * by[j];
            }
            let mut a = nf;
            if self.scale {
                row[a] = (1.0 + t * u) * c.r[j];
                a += 1;
            }
            if self.tilt {
                row[a] = s * u * c.r[j];
            }
            for i in 0..m {
                jp[j * m + i] = f * c.by_coefficient[i][j];
            }
        }
        chi2
    }
}

/// Limits of the local parameters: the thickness search ranges, then the ranges of the
/// scale and tilt ([`super::model`]'s).
pub fn local_limits(model: &SiteModel, thickness: &[(f64, f64)]) -> (Vec<f64>, Vec<f64>) {
    let (mut lo, mut hi): (Vec<f64>, Vec<f64>) = thickness.iter().copied().unzip();
    if model.scale {
        lo.push(super::model::SCALE_LIMITS[0]);
        hi.push(super::model::SCALE_LIMITS[1]);
    }
    if model.tilt {
        lo.push(-super::model::TILT_LIMIT);
        hi.push(super::model::TILT_LIMIT);
    }
    (lo, hi)
}

/// One spectrum as a dense least-squares problem over [local parameters, coefficients].
struct SiteLsq<'a> {
    model: &'a SiteModel<'a>,
    measured: &'a [f64],
}

impl Problem for SiteLsq<'_> {
    fn params(&self) -> usize {
        self.model.local_params() + self.model.coefficients.names.len()
    }
    fn residuals(&self) -> usize {
        self.measured.len()
    }
    fn eval(&self, x: &[f64], res: &mut [f64], jac: &mut [f64]) -> f64 {
        let nl = self.model.local_params();
        let m = x.len() - nl;
        let n = self.measured.len();
        let (mut jl, mut jp) = (vec![0.0; n * nl], vec![0.0; n * m]);
        let chi2 = self
            .model
            .eval(self.measured, &x[..nl], &x[nl..], res, &mut jl, &mut jp);
        let p = nl + m;
        for j in 0..n {
            jac[j * p..j * p + nl].copy_from_slice(&jl[j * nl..(j + 1) * nl]);
            jac[j * p + nl..(j + 1) * p].copy_from_slice(&jp[j * m..(j + 1) * m]);
        }
        chi2
    }
}

/// A per-site dispersion fit: local parameters, coefficients and the covariance of all.
#[derive(Debug, Clone)]
pub struct SiteFit {
    /// Local parameters (fitted thicknesses, scale, tilt).
    pub local: Vec<f64>,
    pub coefficients: Vec<f64>,
    pub chi2: f64,
    /// s²(JᵀJ)⁻¹ over [local, coefficients], row-major; `None` when singular.
    pub covariance: Option<Vec<f64>>,
    pub residuals: Vec<f64>,
}

impl SiteFit {
    /// Number of parameters.
    pub fn params(&self) -> usize {
        self.local.len() + self.coefficients.len()
    }

    /// σ of parameter `a` (NaN without a covariance).
    pub fn sigma(&self, a: usize) -> f64 {
        self.cov(a, a).max(0.0).sqrt()
    }

    /// Covariance of parameters `a` and `b`.
    pub fn cov(&self, a: usize, b: usize) -> f64 {
        let p = self.params();
        self.covariance.as_ref().map_or(f64::NAN, |c| c[a * p + b])
    }

    /// Correlation of parameters `a` and `b`.
    pub fn correlation(&self, a: usize, b: usize) -> f64 {
        self.cov(a, b) / (self.cov(a, a) * self.cov(b, b)).sqrt()
    }
}

/// Fits one spectrum's local parameters and the coefficients by Levenberg–Marquardt from
/// `local0` (the thickness search's answer at the nominal coefficients) and `p0`.
pub fn fit_site(
    model: &SiteModel,
    measured: &[f64],
    local0: &[f64],
    p0: &[f64],
    local_limits: (&[f64], &[f64]),
) -> SiteFit {
    let problem = SiteLsq { model, measured };
    let c = model.coefficients;
    let x0: Vec<f64> = local0.iter().chain(p0).copied().collect();
    let lo: Vec<f64> = local_limits.0.iter().chain(&c.lower).copied().collect();
    let hi: Vec<f64> = local_limits.1.iter().chain(&c.upper).copied().collect();
    let settings = Settings {
        max_iterations: 100,
        rel_tol: 1e-12,
        x_tol: 1e-9,
        ..Settings::default()
    };
    let s = lm::minimise(&problem, &x0, &lo, &hi, settings);
    let nl = local0.len();
    let dof = (measured.len() as f64 - x0.len() as f64).max(1.0);
    let s2 = s.chi2 / dof;
    SiteFit {
        local: s.x[..nl].to_vec(),
        coefficients: s.x[nl..].to_vec(),
        chi2: s.chi2,
        covariance: s.inv_jtj.map(|c| c.iter().map(|v| v * s2).collect()),
        residuals: s.residuals,
    }
}

/// n at `wavelength_nm` of a material (real part).
pub fn n_at(material: &Material, wavelength_nm: f64) -> f64 {
    material.index(wavelength_nm).re
}
