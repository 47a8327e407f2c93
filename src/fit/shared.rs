//! One dispersion for many spectra: Levenberg–Marquardt over a few local parameters per
//! site (thickness, scale, tilt) and a few shared coefficients, on block-structured normal
//! equations. JᵀJ has a block Aₛ per site, couplings Bₛ to the shared block and the shared
//! block C = Σ Cₛ; eliminating the site blocks leaves the Schur complement
//! S = C − Σ Bₛᵀ Aₛ⁻¹ Bₛ (m × m), so a step costs O(sites) small solves instead of one
//! solve of (sites·k + m)² (the reduced camera system of bundle adjustment; B. Triggs et
//! al., "Bundle Adjustment — A Modern Synthesis", 2000).

use super::dispersion::SiteModel;
use super::{FitError, Fitter, Term};
use crate::optics::MaterialSpec;
use crate::spectrum::Spectrum;
use nalgebra::{DMatrix, DVector};

/// One spectrum of the joint fit and the range of its local parameters.
pub struct Site<'a> {
    pub model: SiteModel<'a>,
    pub measured: Vec<f64>,
    pub lower: Vec<f64>,
    pub upper: Vec<f64>,
}

/// The joint solution and its covariance blocks (already scaled by the residual variance).
#[derive(Debug, Clone)]
pub struct SharedFit {
    pub locals: Vec<Vec<f64>>,
    pub coefficients: Vec<f64>,
    pub chi2: f64,
    /// Residuals summed over sites, and parameters fitted.
    pub pixels: usize,
    pub params: usize,
    /// Covariance of the coefficients (m × m, row-major); `None` when singular.
    pub coefficient_cov: Option<Vec<f64>>,
    /// Covariance of the mean of the sites' first local parameter (the mean thickness) with
    /// each coefficient, and its variance.
    pub mean_thickness_cov: Vec<f64>,
    pub mean_thickness_var: f64,
    /// σ of each site's local parameters.
    pub local_sigma: Vec<Vec<f64>>,
    pub iterations: usize,
}

impl SharedFit {
    /// σ of coefficient `i`.
    pub fn sigma(&self, i: usize) -> f64 {
        let m = self.coefficients.len();
        self.coefficient_cov
            .as_ref()
            .map_or(f64::NAN, |c| c[i * m + i].max(0.0).sqrt())
    }

    /// Correlation of coefficient `i` with the mean thickness.
    pub fn correlation_with_thickness(&self, i: usize) -> f64 {
        self.mean_thickness_cov[i] / (self.mean_thickness_var * self.sigma(i).powi(2)).sqrt()
    }
}

/// Normal-equation blocks of one site.
struct Blocks {
    a: DMatrix<f64>,
    b: DMatrix<f64>,
    c: DMatrix<f64>,
    gl: DVector<f64>,
    gp: DVector<f64>,
    chi2: f64,
}

fn blocks(site: &Site, x: &[f64], p: &[f64]) -> Blocks {
    let n = site.measured.len();
    let (k, m) = (x.len(), p.len());
    let mut res = vec![0.0; n];
    let (mut jl, mut jp) = (vec![0.0; n * k], vec![0.0; n * m]);
    let chi2 = site
        .model
        .eval(&site.measured, x, p, &mut res, &mut jl, &mut jp);
    let jl = DMatrix::from_row_slice(n, k, &jl);
    let jp = DMatrix::from_row_slice(n, m, &jp);
    let r = DVector::from_vec(res);
    Blocks {
        a: jl.tr_mul(&jl),
        b: jl.tr_mul(&jp),
        c: jp.tr_mul(&jp),
        gl: jl.tr_mul(&r),
        gp: jp.tr_mul(&r),
        chi2,
    }
}

fn damped(m: &DMatrix<f64>, lambda: f64) -> DMatrix<f64> {
    let mut d = m.clone();
    for i in 0..m.nrows() {
        d[(i, i)] += lambda * m[(i, i)].max(1e-30);
    }
    d
}

/// A step: (local steps, coefficient step), or `None` when a block is singular.
fn step(bl: &[Blocks], lambda: f64) -> Option<(Vec<DVector<f64>>, DVector<f64>)> {
    let m = bl.first()?.c.nrows();
    let mut s = DMatrix::zeros(m, m);
    let mut rhs = DVector::zeros(m);
    let mut inv_a = Vec::with_capacity(bl.len());
    for b in bl {
        s += &b.c;
        rhs -= &b.gp;
    }
    let s_diag = damped(&s, lambda) - &s;
    s += s_diag;
    for b in bl {
        let ai = if b.a.nrows() == 0 {
            DMatrix::zeros(0, 0)
        } else {
            damped(&b.a, lambda).try_inverse()?
        };
        let bt_ai = b.b.transpose() * &ai;
        s -= &bt_ai * &b.b;
        rhs += &bt_ai * &b.gl;
        inv_a.push(ai);
    }
    let dp = s.cholesky()?.solve(&rhs);
    let dl = bl
        .iter()
        .zip(&inv_a)
        .map(|(b, ai)| ai * (-(&b.gl) - &b.b * &dp))
        .collect();
    Some((dl, dp))
}

fn clamp(x: &mut [f64], lo: &[f64], hi: &[f64]) {
    for i in 0..x.len() {
        x[i] = x[i].clamp(lo[i], hi[i]);
    }
}

/// Fits every site's local parameters and the shared coefficients, from `locals0` and `p0`,
/// the coefficients kept in `[p_lower, p_upper]`.
pub fn fit(
    sites: &[Site],
    locals0: &[Vec<f64>],
    p0: &[f64],
    p_lower: &[f64],
    p_upper: &[f64],
) -> SharedFit {
    let mut x: Vec<Vec<f64>> = locals0.to_vec();
    for (xs, s) in x.iter_mut().zip(sites) {
        clamp(xs, &s.lower, &s.upper);
    }
    let mut p = p0.to_vec();
    clamp(&mut p, p_lower, p_upper);
    let eval_all = |x: &[Vec<f64>], p: &[f64]| -> Vec<Blocks> {
        sites
            .iter()
            .zip(x)
            .map(|(s, xs)| blocks(s, xs, p))
            .collect()
    };
    let total = |bl: &[Blocks]| bl.iter().map(|b| b.chi2).sum::<f64>();
    let mut bl = eval_all(&x, &p);
    let mut chi2 = total(&bl);
    let mut lambda = 1e-3;
    let mut iterations = 0;
    while iterations < 100 {
        iterations += 1;
        let mut improved = false;
        for _ in 0..12 {
            let Some((dl, dp)) = step(&bl, lambda) else {
                lambda *= 10.0;
                continue;
            };
            let mut xt = x.clone();
            for ((xs, d), s) in xt.iter_mut().zip(&dl).zip(sites) {
                for (v, dv) in xs.iter_mut().zip(d.iter()) {
                    *v += dv;
                }
                clamp(xs, &s.lower, &s.upper);
            }
            let mut pt: Vec<f64> = p.iter().zip(dp.iter()).map(|(a, b)| a + b).collect();
            clamp(&mut pt, p_lower, p_upper);
            let moved = xt
                .iter()
                .flatten()
                .zip(x.iter().flatten())
                .any(|(a, b)| (a - b).abs() > 1e-9)
                || pt
                    .iter()
                    .zip(&p)
                    .any(|(a, b)| (a - b).abs() > 1e-12 * a.abs().max(1e-3));
            if !moved {
                break;
            }
            let bt = eval_all(&xt, &pt);
            let c = total(&bt);
            if c < chi2 {
                let rel = (chi2 - c) / chi2.max(1e-300);
                (x, p, bl, chi2) = (xt, pt, bt, c);
                lambda = (lambda * 0.3).max(1e-12);
                improved = rel > 1e-12;
                break;
            }
            lambda *= 4.0;
        }
        if !improved {
            break;
        }
    }
    covariance(sites, x, p, &bl, chi2, iterations)
}

/// The covariance blocks at the solution (undamped), scaled by χ²/(pixels − parameters).
fn covariance(
    sites: &[Site],
    locals: Vec<Vec<f64>>,
    p: Vec<f64>,
    bl: &[Blocks],
    chi2: f64,
    iterations: usize,
) -> SharedFit {
    let m = p.len();
    let pixels: usize = sites.iter().map(|s| s.measured.len()).sum();
    let params = locals.iter().map(Vec::len).sum::<usize>() + m;
    let s2 = chi2 / (pixels as f64 - params as f64).max(1.0);
    let mut schur = DMatrix::zeros(m, m);
    let mut inv_a = Vec::new();
    for b in bl {
        schur += &b.c;
        let ai = if b.a.nrows() == 0 {
            Some(DMatrix::zeros(0, 0))
        } else {
            b.a.clone().try_inverse()
        };
        if let Some(ai) = &ai {
            schur -= b.b.transpose() * ai * &b.b;
        }
        inv_a.push(ai);
    }
    let s_inv = schur.try_inverse();
    let n = sites.len().max(1) as f64;
    // u = Σ row 0 of Aₛ⁻¹Bₛ: the mean thickness's coupling to the coefficients.
    let mut u = DVector::zeros(m);
    let mut diag = 0.0;
    let mut local_sigma = Vec::new();
    for (b, ai) in bl.iter().zip(&inv_a) {
        let k = b.a.nrows();
        match (ai, &s_inv) {
            (Some(ai), Some(si)) => {
                let w = ai * &b.b;
                if k > 0 {
                    u += w.row(0).transpose();
                    diag += ai[(0, 0)];
                }
                let var = ai + &w * si * w.transpose();
                local_sigma.push((0..k).map(|i| (var[(i, i)] * s2).max(0.0).sqrt()).collect());
            }
            _ => local_sigma.push(vec![f64::NAN; k]),
        }
    }
    let (mean_thickness_cov, mean_thickness_var) = match &s_inv {
        Some(si) => {
            let c = -(si * &u) / n;
            let var = (diag + (u.transpose() * si * &u)[(0, 0)]) / (n * n);
            (c.iter().map(|v| v * s2).collect(), var * s2)
        }
        None => (vec![f64::NAN; m], f64::NAN),
    };
    SharedFit {
        locals,
        coefficients: p,
        chi2,
        pixels,
        params,
        coefficient_cov: s_inv.map(|s| {
            let mut v = vec![0.0; m * m];
            for i in 0..m {
                for j in 0..m {
                    v[i * m + j] = s[(i, j)] * s2;
                }
            }
            v
        }),
        mean_thickness_cov,
        mean_thickness_var,
        local_sigma,
        iterations,
    }
}

/// The dispersion one material shares across many spectra, as journalled and reported.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct SharedDispersion {
    pub material: String,
    /// The formula at the fitted values, nothing left to fit (a ready `[materials.NAME]`).
    pub spec: MaterialSpec,
    /// Each fitted coefficient (`MATERIAL.NAME`) with σ and its correlation with the mean
    /// thickness.
    pub coefficients: Vec<Term>,
    /// Spectra fitted jointly.
    pub spectra: usize,
    /// χ² per degree of freedom of the joint fit (reflectance²).
    pub residual_variance: f64,
    /// The first fitted layer's thickness of each spectrum in the joint fit, nm.
    pub thickness_nm: Vec<f64>,
    /// Its σ (including the coefficients' uncertainty), nm.
    pub thickness_sigma_nm: Vec<f64>,
}

/// Fits one dispersion of the recipe's fitted material to many spectra, a thickness (and
/// scale, tilt when the recipe fits them) per spectrum, starting from `seeds` (the fitted
/// layers' thicknesses of each spectrum at the nominal coefficients). With `known_nm`, the
/// first fitted layer's thickness is held at that value in every spectrum.
pub fn fit_spectra(
    fitter: &Fitter,
    spectra: &[Spectrum],
    seeds: &[Vec<f64>],
    known_nm: Option<f64>,
) -> Result<SharedDispersion, FitError> {
    let c = fitter
        .fitted_coefficients()
        .ok_or_else(|| FitError::Method {
            method: "dispersion",
            message: "no material has fitted coefficients (mark some with fit = [\"a\", \"b\"])"
                .into(),
        })?;
    if spectra.is_empty() {
        return Err(FitError::Method {
            method: "dispersion",
            message: "no spectrum to fit".into(),
        });
    }
    let mut sites = Vec::new();
    let mut locals0 = Vec::new();
    for (s, seed) in spectra.iter().zip(seeds) {
        let w = fitter.windowed(s)?.into_owned();
        let mut model = fitter.site_model(c, &w.wavelength_nm, fitter.stack_thickness(seed));
        let mut limits = fitter.search_limits(&w);
        if let Some(d) = known_nm {
            model.base[model.fitted[0]] = d;
            model.fitted.remove(0);
            limits.remove(0);
        }
        let (lower, upper) = super::dispersion::local_limits(&model, &limits);
        locals0.push(model.local_start(&model.base));
        sites.push(Site {
            model,
            measured: w.reflectance,
            lower,
            upper,
        });
    }
    let f = fit(&sites, &locals0, &c.start(), &c.lower, &c.upper);
    let thickness_nm = sites
        .iter()
        .zip(&f.locals)
        .map(|(s, x)| s.model.thickness(x)[fitter.fitted_layers()[0]])
        .collect();
    let thickness_sigma_nm = f
        .local_sigma
        .iter()
        .map(|v| {
            if known_nm.is_some() {
                0.0
            } else {
                v.first().copied().unwrap_or(f64::NAN)
            }
        })
        .collect();
    Ok(SharedDispersion {
        material: c.material.clone(),
        spec: c.spec_at(&f.coefficients),
        coefficients: c
            .names
            .iter()
            .enumerate()
            .map(|(i, n)| Term {
                name: format!("{}.{n}", c.material),
                value: f.coefficients[i],
                sigma: f.sigma(i),
                correlation_with_thickness: f.correlation_with_thickness(i),
            })
            .collect(),
        spectra: spectra.len(),
        residual_variance: f.chi2 / (f.pixels as f64 - f.params as f64).max(1.0),
        thickness_nm,
        thickness_sigma_nm,
    })
}
