//! The `model` method: a global grid search over every fitted thickness, dense enough that
//! no fringe-order minimum falls between grid points, then Levenberg–Marquardt from the best
//! local minima; σ from the covariance scaled by the residual variance; every other minimum
//! within noise of the best is reported as a rival.

use super::instrument::Slit;
use super::kernel::{GridAxes, Prepared, Scored};
use super::lanes;
use super::lm::{self, Problem, Settings};
use super::quality;
use std::cell::RefCell;

/// What to fit: thicknesses of every layer (`base`, nm), which of them vary, their bounds
/// and grid steps, and which systematic terms are fitted too: an intensity scale s and a
/// tilt t of it across the window, the model being s·(1 + t·u)·R with u running from −1 at
/// the first pixel to +1 at the last.
#[derive(Debug, Clone)]
pub struct Setup<'a> {
    pub prep: &'a Prepared,
    /// Measured reflectance at every pixel of `prep`.
    pub measured: &'a [f64],
    pub base: Vec<f64>,
    pub fitted: Vec<usize>,
    pub lower: Vec<f64>,
    pub upper: Vec<f64>,
    pub steps: Vec<f64>,
    pub scale: bool,
    pub tilt: bool,
    /// The spectrometer's slit function and the stack prepared on its fine grid: the model
    /// of pixel j is then the slit-weighted average of the fine grid's reflectance (the
    /// grid search still uses `prep`, the unconvolved model, which has its minima at the
    /// same fringe phases).
    pub slit: Option<(&'a Prepared, &'a Slit)>,
}

/// The outcome of a model fit.
#[derive(Debug, Clone)]
pub struct ModelFit {
    /// Thickness of every layer (fitted ones replaced).
    pub thickness: Vec<f64>,
    /// σ of each fitted thickness.
    pub sigma: Vec<f64>,
    pub scale: f64,
    /// The fitted tilt t (0 when not fitted).
    pub tilt: f64,
    pub chi2: f64,
    /// Number of fitted parameters (thicknesses and systematic terms).
    pub params: usize,
    /// The covariance s²(JᵀJ)⁻¹ of every fitted parameter (thicknesses, then scale and
    /// tilt when fitted), row-major; `None` when JᵀJ is singular.
    pub covariance: Option<Vec<f64>>,
    /// The noise σ the spectrum shows by itself ([`quality::noise_sigma`]).
    pub noise_sigma: f64,
    /// Measured minus modelled reflectance at every pixel.
    pub residuals: Vec<f64>,
    /// Other local minima that fit within the noise of the best (Δχ² < 9 noise variances).
    pub rivals: Vec<Minimum>,
    /// The fitted dispersion coefficients when they were fitted too (see
    /// [`super::dispersion`]; they follow the systematic terms in the covariance).
    pub dispersion: Vec<f64>,
}

/// A local minimum of χ²: the fitted layers' thicknesses and its χ² on every pixel.
#[derive(Debug, Clone)]
pub struct Minimum {
    pub thickness: Vec<f64>,
    pub chi2: f64,
}

/// The pixels a grid search and the first refinements score, and the share of the whole
/// spectrum each stands for (mean 1), so that their weighted χ² estimates the whole
/// spectrum's: about [`SearchPixels::PER_FRINGE`] pixels per fringe of the thickest stack
/// searched at every wavelength, instead of everywhere as many as the bluest fringes need.
#[derive(Debug, Clone, PartialEq)]
pub struct SearchPixels {
    pub index: Vec<usize>,
    pub weight: Vec<f64>,
    /// √weight, the factor on each residual.
    root: Vec<f64>,
}

impl SearchPixels {
    /// Pixels per fringe of the thickest stack searched.
    pub const PER_FRINGE: f64 = 5.0;

    /// Every pixel, each of weight 1.
    pub fn all(n: usize) -> SearchPixels {
        SearchPixels::from_index((0..n).collect(), n)
    }

    /// Pixels chosen along the window so that the round-trip phase of the stack at `d`
    /// (nm, the thickest searched) changes by at most 2π/[`SearchPixels::PER_FRINGE`]
    /// between neighbours, and no two are further apart than 1/`min_count` of the window;
    /// each weighted by the pixels it stands for.
    pub fn by_phase(prep: &Prepared, d: &[f64], min_count: usize) -> SearchPixels {
        let n = prep.len();
        if n < 2 {
            return SearchPixels::all(n);
        }
        let phase: Vec<f64> = (0..n).map(|j| prep.round_trip_phase(j, d)).collect();
        let lam = &prep.wavelength_nm;
        let max_phase = std::f64::consts::TAU / SearchPixels::PER_FRINGE;
        let max_gap = (lam[n - 1] - lam[0]).abs() / min_count.max(1) as f64;
        let too_far = |a: usize, b: usize| {
            (phase[a] - phase[b]).abs() > max_phase || (lam[a] - lam[b]).abs() > max_gap
        };
        let mut index = vec![0];
        let mut last = 0;
        for j in 1..n {
            // Take the last pixel still close enough to the previous one.
            if too_far(last, j) && j - 1 > last {
                index.push(j - 1);
                last = j - 1;
            }
            if too_far(last, j) {
                index.push(j);
                last = j;
            }
        }
        SearchPixels::from_index(index, n)
    }

    /// Weights from the pixels between midpoints (the first and last reach the window's
    /// ends), scaled to mean 1.
    fn from_index(index: Vec<usize>, n: usize) -> SearchPixels {
        let k = index.len();
        let edge = |i: usize| -> f64 {
            match i {
                0 => -0.5,
                i if i == k => n as f64 - 0.5,
                i => 0.5 * (index[i - 1] + index[i]) as f64,
            }
        };
        let weight: Vec<f64> = (0..k)
            .map(|i| (edge(i + 1) - edge(i)) * k as f64 / n as f64)
            .collect();
        let root = weight.iter().map(|w| w.sqrt()).collect();
        SearchPixels {
            index,
            weight,
            root,
        }
    }

    /// Number of pixels.
    pub fn len(&self) -> usize {
        self.index.len()
    }

    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.index.is_empty()
    }
}

/// Least-squares problem over a pixel subset, each residual times √weight.
struct Lsq<'a> {
    setup: &'a Setup<'a>,
    pixels: &'a [usize],
    /// √weight of each pixel; `None` for weights of 1.
    root: Option<&'a [f64]>,
    /// R and dR/dd of every pixel, kept between evaluations.
    scratch: RefCell<(Vec<f64>, Vec<f64>)>,
}

impl Lsq<'_> {
    fn thickness(&self, x: &[f64]) -> Vec<f64> {
        let mut d = self.setup.base.clone();
        for (a, l) in self.setup.fitted.iter().enumerate() {
            d[*l] = x[a];
        }
        d
    }
}

impl Problem for Lsq<'_> {
    fn params(&self) -> usize {
        self.setup.params()
    }
    fn residuals(&self) -> usize {
        self.pixels.len()
    }
    fn eval(&self, x: &[f64], res: &mut [f64], jac: &mut [f64]) -> f64 {
        let d = self.thickness(x);
        let p = self.params();
        let nf = self.setup.fitted.len();
        let (s, t) = self.setup.systematic(x);
        let lam = &self.setup.prep.wavelength_nm;
        let (l0, l1) = (lam[0], lam[lam.len() - 1]);
        let nl = d.len();
        let mut grad = vec![0.0; nl];
        let smeared = self
            .setup
            .slit
            .map(|(fine, slit)| smeared_model(fine, slit, &d));
        let chi2 = |res: &[f64]| lanes::sum(res.len(), |i| res[i] * res[i]);
        // Without a slit, R and dR/dd of every pixel at once (vector lanes), into buffers
        // kept from one evaluation to the next.
        let mut scratch = self.scratch.borrow_mut();
        let (r_all, g_all) = &mut *scratch;
        // Every layer fitted, in order, nothing else: the Jacobian is dR/dd itself.
        let plain = smeared.is_none()
            && !self.setup.scale
            && !self.setup.tilt
            && self.setup.fitted.iter().copied().eq(0..nl);
        if plain {
            r_all.resize(self.pixels.len(), 0.0);
            self.setup
                .prep
                .reflectance_grad_many(self.pixels, &d, r_all, jac);
        } else if smeared.is_none() {
            r_all.resize(self.pixels.len(), 0.0);
            g_all.resize(self.pixels.len() * nl, 0.0);
            self.setup
                .prep
                .reflectance_grad_many(self.pixels, &d, r_all, g_all);
        }
        if smeared.is_none() && !self.setup.scale && !self.setup.tilt {
            // The model is R itself: residuals and Jacobian rows straight from the lanes.
            let (m, r_all): (&[f64], &[f64]) = (self.setup.measured, r_all);
            if self.pixels.len() == m.len() {
                // Every pixel, in order.
                for ((res, r), m) in res.iter_mut().zip(r_all).zip(m) {
                    *res = r - m;
                }
            } else {
                for ((res, r), &j) in res.iter_mut().zip(r_all).zip(self.pixels) {
                    *res = r - m[j];
                }
            }
            if !plain {
                for (row, g) in jac.chunks_exact_mut(p).zip(g_all.chunks_exact(nl)) {
                    for (a, l) in self.setup.fitted.iter().enumerate() {
                        row[a] = g[*l];
                    }
                }
            }
            if let Some(root) = self.root {
                for (i, f) in root.iter().enumerate() {
                    res[i] *= f;
                    jac[i * p..(i + 1) * p].iter_mut().for_each(|v| *v *= f);
                }
            }
            return chi2(res);
        }
        for (i, &j) in self.pixels.iter().enumerate() {
            let r = match (&smeared, self.setup.slit) {
                (Some((fr, fg)), Some((_, slit))) => {
                    for (l, g) in grad.iter_mut().enumerate() {
                        *g = slit.apply_strided(j, fg, nl, l);
                    }
                    slit.apply(j, fr)
                }
                _ => {
                    grad.copy_from_slice(&g_all[i * nl..(i + 1) * nl]);
                    r_all[i]
                }
            };
            let u = tilt_coordinate(lam[j], l0, l1);
            let f = s * (1.0 + t * u);
            let root = self.root.map_or(1.0, |w| w[i]);
            res[i] = root * (f * r - self.setup.measured[j]);
            let row = &mut jac[i * p..(i + 1) * p];
            for (a, l) in self.setup.fitted.iter().enumerate() {
                row[a] = root * f * grad[*l];
            }
            let mut a = nf;
            if self.setup.scale {
                row[a] = root * (1.0 + t * u) * r;
                a += 1;
            }
            if self.setup.tilt {
                row[a] = root * s * u * r;
            }
        }
        chi2(res)
    }
}

/// R and dR/dd (layers fastest) at every point of the slit's fine grid.
fn smeared_model(fine: &Prepared, slit: &Slit, d: &[f64]) -> (Vec<f64>, Vec<f64>) {
    let n = slit.fine_nm.len();
    let mut r = vec![0.0; n];
    let mut g = vec![0.0; n * d.len()];
    for k in 0..n {
        r[k] = fine.reflectance_grad(k, d, &mut g[k * d.len()..(k + 1) * d.len()]);
    }
    (r, g)
}

/// Where a wavelength lies in the window, −1 at `first` to +1 at `last`: the coordinate of
/// the tilt term.
pub fn tilt_coordinate(wavelength_nm: f64, first: f64, last: f64) -> f64 {
    (2.0 * wavelength_nm - first - last) / (last - first).max(f64::MIN_POSITIVE)
}

impl Setup<'_> {
    /// Fitted parameters: thicknesses, then the scale and the tilt when they are fitted.
    pub fn params(&self) -> usize {
        self.fitted.len() + usize::from(self.scale) + usize::from(self.tilt)
    }

    /// The scale and tilt at `x` (1 and 0 when not fitted).
    fn systematic(&self, x: &[f64]) -> (f64, f64) {
        let nf = self.fitted.len();
        let s = if self.scale { x[nf] } else { 1.0 };
        let t = if self.tilt {
            x[nf + usize::from(self.scale)]
        } else {
            0.0
        };
        (s, t)
    }
}

/// χ² at every point of the search grid, with the grid's shape.
struct Grid {
    counts: Vec<usize>,
    chi2: Vec<f64>,
    lower: Vec<f64>,
    steps: Vec<f64>,
    upper: Vec<f64>,
}

impl Grid {
    fn value(&self, idx: &[usize]) -> Vec<f64> {
        idx.iter()
            .enumerate()
            .map(|(a, i)| (self.lower[a] + *i as f64 * self.steps[a]).min(self.upper[a]))
            .collect()
    }

    /// The grid point refined along each axis by the parabola through it and its two
    /// neighbours (a better start for Levenberg–Marquardt, at no cost), and the χ² the
    /// parabolas predict there.
    fn refined(&self, idx: &[usize]) -> (Vec<f64>, f64) {
        let mut v = self.value(idx);
        let f0 = self.chi2[self.flatten(idx)];
        let mut predicted = f0;
        for a in 0..idx.len() {
            if idx[a] == 0 || idx[a] + 1 >= self.counts[a] {
                continue;
            }
            let mut n = idx.to_vec();
            n[a] = idx[a] - 1;
            let fm = self.chi2[self.flatten(&n)];
            n[a] = idx[a] + 1;
            let fp = self.chi2[self.flatten(&n)];
            let curv = fm - 2.0 * f0 + fp;
            if curv > 0.0 {
                let off = (0.5 * (fm - fp) / curv).clamp(-0.5, 0.5);
                v[a] = (v[a] + off * self.steps[a]).clamp(self.lower[a], self.upper[a]);
                predicted -= 0.5 * curv * off * off;
            }
        }
        (v, predicted.max(0.0))
    }

    fn unflatten(&self, mut flat: usize) -> Vec<usize> {
        let mut idx = vec![0; self.counts.len()];
        for a in (0..self.counts.len()).rev() {
            idx[a] = flat % self.counts[a];
            flat /= self.counts[a];
        }
        idx
    }

    fn flatten(&self, idx: &[usize]) -> usize {
        idx.iter().zip(&self.counts).fold(0, |f, (i, c)| f * c + i)
    }

    /// Flat-index distance between neighbours along each axis.
    fn strides(&self) -> Vec<usize> {
        let mut strides = vec![1; self.counts.len()];
        for a in (0..self.counts.len().saturating_sub(1)).rev() {
            strides[a] = strides[a + 1] * self.counts[a + 1];
        }
        strides
    }

    /// Grid points lower than every axis neighbour, best first.
    fn local_minima(&self) -> Vec<usize> {
        let strides = self.strides();
        let dims = self.counts.len();
        // The grid index of f, kept by counting (the last axis fastest), not by division.
        let mut idx = vec![0usize; dims];
        let mut out = Vec::new();
        for (f, &v) in self.chi2.iter().enumerate() {
            let minimum = (0..dims).all(|a| {
                let (st, i) = (strides[a], idx[a]);
                let lower_ok = i == 0 || self.chi2[f - st] >= v;
                let upper_ok = i + 1 == self.counts[a] || self.chi2[f + st] > v;
                lower_ok && upper_ok
            });
            if minimum {
                out.push(f);
            }
            for a in (0..dims).rev() {
                idx[a] += 1;
                if idx[a] < self.counts[a] {
                    break;
                }
                idx[a] = 0;
            }
        }
        out.sort_by(|a, b| self.chi2[*a].total_cmp(&self.chi2[*b]));
        out
    }
}

/// Grid step counts for the setup (at least 2 points per axis).
fn counts(setup: &Setup) -> Vec<usize> {
    (0..setup.fitted.len())
        .map(|a| (((setup.upper[a] - setup.lower[a]) / setup.steps[a]).ceil() as usize + 1).max(2))
        .collect()
}

fn grid_search(setup: &Setup, search: &SearchPixels) -> Grid {
    let mut setup_steps = setup.clone();
    let counts = counts(setup);
    for (a, c) in counts.iter().enumerate() {
        setup_steps.steps[a] = (setup.upper[a] - setup.lower[a]) / (c - 1) as f64;
    }
    let setup = &setup_steps;
    let scaled = setup.scale || setup.tilt;
    let axes = GridAxes {
        layers: &setup.fitted,
        first: &setup.lower,
        step: &setup.steps,
        counts: &counts,
    };
    let scored = Scored {
        pixels: &search.index,
        weights: &search.weight,
        measured: setup.measured,
    };
    let sums = setup.prep.grid_sums(&axes, &scored, &setup.base, scaled);
    let chi2 = if scaled {
        // χ² at the best scale s = Σ R R_m / Σ R² (a small tilt moves no basin).
        let smm: f64 = search
            .index
            .iter()
            .zip(&search.weight)
            .map(|(j, w)| w * setup.measured[*j].powi(2))
            .sum();
        sums.srm
            .iter()
            .zip(&sums.srr)
            .map(|(rm, rr)| (smm - rm * rm / rr.max(1e-300)).max(0.0))
            .collect()
    } else {
        sums.sse
    };
    Grid {
        counts,
        chi2,
        lower: setup.lower.clone(),
        steps: setup.steps.clone(),
        upper: setup.upper.clone(),
    }
}

/// Range of the fitted intensity scale: a reference 5× off is no longer a scale error.
pub const SCALE_LIMITS: [f64; 2] = [0.2, 5.0];
/// Largest fitted tilt: ±50 % across the window.
pub const TILT_LIMIT: f64 = 0.5;
/// Candidates refined on the search pixels before the final polish.
const CANDIDATES: usize = 12;
/// Δχ² (in units of the noise variance) below which a second minimum is "within noise":
/// a 3σ likelihood-ratio distinction for one parameter (common practice).
pub const AMBIGUITY_DCHI2: f64 = 9.0;

/// Fits the model: grid search on `search_pixels`, LM refinement there, then LM on every
/// pixel from the best, and from every other minimum that may come within noise of it.
/// `None` when the grid holds no finite χ² (a material whose index is not finite over the
/// window).
pub fn fit(setup: &Setup, search: &SearchPixels) -> Option<ModelFit> {
    let all = setup.prep.every_pixel();
    let search_pixels = &search.index[..];
    let grid = grid_search(setup, search);
    let nf = setup.fitted.len();
    let np = setup.params();
    let x0 = |v: Vec<f64>| -> Vec<f64> {
        let mut x = v;
        if setup.scale {
            x.push(1.0);
        }
        if setup.tilt {
            x.push(0.0);
        }
        x
    };
    let (mut lo, mut hi) = (setup.lower.clone(), setup.upper.clone());
    if setup.scale {
        lo.push(SCALE_LIMITS[0]);
        hi.push(SCALE_LIMITS[1]);
    }
    if setup.tilt {
        lo.push(-TILT_LIMIT);
        hi.push(TILT_LIMIT);
    }
    let coarse = Settings {
        max_iterations: 15,
        rel_tol: 1e-6,
        x_tol: 0.01,
        ..Settings::default()
    };
    let sub = Lsq {
        setup,
        pixels: search_pixels,
        root: Some(&search.root),
        scratch: RefCell::default(),
    };
    let full = Lsq {
        setup,
        pixels: all,
        root: None,
        scratch: RefCell::default(),
    };
    let same_pixels = search_pixels.len() == all.len();
    let dof = |n: usize| (n as f64 - np as f64).max(1.0);
    // The noise variance the subset's χ² differences are judged against, before the noise
    // is known: the best's residual variance, at least the floor.
    let floor2 = quality::NOISE_FLOOR * quality::NOISE_FLOOR;
    let var_sub = |chi2: f64| (chi2 / dof(search_pixels.len())).max(floor2);
    // Refine the best local minima on the search pixels, most promising first. A basin
    // whose predicted χ² is far above the best refined one can neither win nor be within
    // noise of it: skip it (the prediction is rough, hence the generous margin).
    // The best CANDIDATES minima, and every further one nearly as low: on a narrow window
    // neighbouring orders look alike and the grid's sampling alone may rank the true one
    // far down.
    let minima = grid.local_minima();
    let lowest = minima.first().map_or(0.0, |f| grid.chi2[*f]);
    let mut starts: Vec<(Vec<f64>, f64)> = minima
        .iter()
        .enumerate()
        .take_while(|(k, f)| *k < CANDIDATES || grid.chi2[**f] <= 4.0 * lowest)
        .map(|(_, f)| grid.refined(&grid.unflatten(*f)))
        .collect();
    starts.sort_by(|a, b| a.1.total_cmp(&b.1));
    let distinct = |a: &[f64], b: &[f64], tol: &dyn Fn(usize) -> f64| {
        (0..nf).any(|i| (a[i] - b[i]).abs() >= tol(i))
    };
    let mut refined: Vec<lm::Solution> = Vec::new();
    for (start, predicted) in starts {
        if let Some(best) = refined.first() {
            if predicted > 4.0 * best.chi2 + 4.0 * AMBIGUITY_DCHI2 * var_sub(best.chi2) {
                continue;
            }
        }
        let s = lm::minimise(&sub, &x0(start), &lo, &hi, coarse);
        let tol = |a: usize| (0.2 * setup.steps[a]).max(0.5);
        if refined.iter().all(|r| distinct(&r.x, &s.x, &tol)) {
            refined.push(s);
            refined.sort_by(|a, b| a.chi2.total_cmp(&b.chi2));
        }
    }
    // The polish starts at a minimum already refined on the search pixels.
    let fine = Settings {
        x_tol: 1e-4,
        initial_damping: 1e-6,
        ..Settings::default()
    };
    let polish = |s: &lm::Solution| {
        if same_pixels {
            s.clone()
        } else {
            lm::minimise(&full, &s.x, &lo, &hi, fine)
        }
    };
    let first = refined.first().filter(|r| r.chi2.is_finite())?;
    let best = if same_pixels {
        lm::minimise(&full, &first.x, &lo, &hi, fine)
    } else {
        polish(first)
    };
    let s2 = best.chi2 / dof(all.len());
    let noise = quality::noise_sigma(setup.measured, &best.residuals);
    // Differences of χ² are judged against the larger of the noise and the residual
    // variance: a model that misses a term cannot tell orders apart more finely than it fits.
    let var = s2.max(noise * noise);
    // Every other minimum that the subset says may come within noise is polished on every
    // pixel; those that do are rivals of the best.
    let rivals: Vec<Minimum> = refined[1..]
        .iter()
        .filter(|r| {
            same_pixels || r.chi2 - first.chi2 < 4.0 * AMBIGUITY_DCHI2 * var_sub(first.chi2)
        })
        .map(polish)
        .filter(|r| r.chi2 - best.chi2 < AMBIGUITY_DCHI2 * var && distinct(&r.x, &best.x, &|_| 0.5))
        .map(|r| Minimum {
            thickness: r.x[..nf].to_vec(),
            chi2: r.chi2,
        })
        .collect();
    let covariance: Option<Vec<f64>> = best
        .inv_jtj
        .as_ref()
        .map(|inv| inv.iter().map(|v| v * s2).collect());
    let sigma = (0..nf)
        .map(|a| match &covariance {
            Some(c) => c[a * np + a].max(0.0).sqrt(),
            None => f64::NAN,
        })
        .collect();
    Some(ModelFit {
        thickness: full.thickness(&best.x),
        sigma,
        scale: setup.systematic(&best.x).0,
        tilt: setup.systematic(&best.x).1,
        chi2: best.chi2,
        params: np,
        covariance,
        noise_sigma: noise,
        residuals: best.residuals,
        rivals,
        dispersion: Vec::new(),
    })
}

/// The residuals and Jacobian of the model at `x` on all pixels, for tests of the analytic
/// derivatives: (residuals, row-major Jacobian).
pub fn residuals_and_jacobian(setup: &Setup, x: &[f64]) -> (Vec<f64>, Vec<f64>) {
    let all = setup.prep.every_pixel();
    let p = Lsq {
        setup,
        pixels: all,
        root: None,
        scratch: RefCell::default(),
    };
    let mut r = vec![0.0; all.len()];
    let mut j = vec![0.0; all.len() * p.params()];
    p.eval(x, &mut r, &mut j);
    (r, j)
}
