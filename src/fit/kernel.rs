//! The fitters' fast forward model: the stack's reflectance and its thickness derivatives on
//! one wavelength grid, from per-pixel quantities computed once per grid.
//!
//! Same physics as [`crate::optics::tmm`] (N = n + ik, tilted admittances, unpolarised light
//! and cone averages as weighted channels), written as the equivalent Airy recursion of
//! interface coefficients, which gives dR/dd analytically. From the substrate up:
//! Γ_L = ρ_L, w_l = Γ_l·z_l with z_l = exp(iβ_l d_l), β_l = 4π N_l cos θ_l / λ, and
//! Γ_{l−1} = (ρ_{l−1} + w_l)/(1 + ρ_{l−1} w_l); r = Γ_0, R = |r|².

use super::lanes::{self, Cv, Fv, W};
use crate::optics::tmm::{admittance, cos_theta, AngleSample, Polarisation};
use crate::optics::Material;
use num_complex::Complex64;

/// One polarisation at one angle of incidence, with its share of the light.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Channel {
    pub theta_rad: f64,
    pub pol: Polarisation,
    pub weight: f64,
}

/// Channels for unpolarised light over the given angle samples (one channel at exactly
/// normal incidence, where s and p coincide).
pub fn channels(samples: &[AngleSample]) -> Vec<Channel> {
    let mut out = Vec::new();
    for s in samples {
        if s.theta_rad == 0.0 {
            out.push(Channel {
                theta_rad: 0.0,
                pol: Polarisation::S,
                weight: s.weight,
            });
        } else {
            for pol in [Polarisation::S, Polarisation::P] {
                out.push(Channel {
                    theta_rad: s.theta_rad,
                    pol,
                    weight: 0.5 * s.weight,
                });
            }
        }
    }
    out
}

/// The per-pixel constants of a stack on one wavelength grid.
#[derive(Debug, Clone)]
pub struct Prepared {
    pub wavelength_nm: Vec<f64>,
    layers: usize,
    channels: Vec<f64>,
    /// For pixel j, channel c: ρ_0..ρ_L then β_1..β_L, at `(j·C + c)·(2L + 1)`.
    coeff: Vec<Complex64>,
}

/// Most layers a fitted stack may have (fixed-size buffers keep the inner loops allocation-free).
pub const MAX_LAYERS: usize = 16;

const I: Complex64 = Complex64 { re: 0.0, im: 1.0 };

impl Prepared {
    /// Computes the interface coefficients and phase constants of ambient | layers | substrate.
    pub fn new(
        ambient: &Material,
        layers: &[Material],
        substrate: &Material,
        channels: &[Channel],
        wavelength_nm: &[f64],
    ) -> Prepared {
        let l = layers.len();
        assert!(
            l <= MAX_LAYERS,
            "the fitter checks the layer count before preparing"
        );
        let stride = 2 * l + 1;
        let mut coeff = Vec::with_capacity(wavelength_nm.len() * channels.len() * stride);
        let mut etas = vec![Complex64::new(0.0, 0.0); l + 2];
        let mut cosines = vec![Complex64::new(0.0, 0.0); l + 2];
        for &w in wavelength_nm {
            let n0 = Complex64::new(ambient.index(w).re, 0.0);
            let media: Vec<Complex64> = std::iter::once(n0)
                .chain(layers.iter().map(|m| m.index(w)))
                .chain(std::iter::once(substrate.index(w)))
                .collect();
            for ch in channels {
                let inv = n0.re * ch.theta_rad.sin();
                for (k, n) in media.iter().enumerate() {
                    cosines[k] = cos_theta(*n, inv);
                    etas[k] = admittance(*n, cosines[k], ch.pol);
                }
                for k in 0..=l {
                    coeff.push((etas[k] - etas[k + 1]) / (etas[k] + etas[k + 1]));
                }
                for k in 1..=l {
                    coeff.push(4.0 * std::f64::consts::PI * media[k] * cosines[k] / w);
                }
            }
        }
        Prepared {
            wavelength_nm: wavelength_nm.to_vec(),
            layers: l,
            channels: channels.iter().map(|c| c.weight).collect(),
            coeff,
        }
    }

    /// Number of pixels.
    pub fn len(&self) -> usize {
        self.wavelength_nm.len()
    }

    /// Whether there are no pixels.
    pub fn is_empty(&self) -> bool {
        self.wavelength_nm.is_empty()
    }

    /// Number of layers in the stack.
    pub fn layers(&self) -> usize {
        self.layers
    }

    fn block(&self, pixel: usize, channel: usize) -> (&[Complex64], &[Complex64]) {
        let stride = 2 * self.layers + 1;
        let start = (pixel * self.channels.len() + channel) * stride;
        let b = &self.coeff[start..start + stride];
        b.split_at(self.layers + 1)
    }

    /// R at one pixel for layer thicknesses `d` (nm, top first).
    pub fn reflectance(&self, pixel: usize, d: &[f64]) -> f64 {
        (0..self.channels.len())
            .map(|c| {
                let (rho, beta) = self.block(pixel, c);
                let mut g = rho[self.layers];
                for l in (1..=self.layers).rev() {
                    let w = g * phase(beta[l - 1], d[l - 1]);
                    g = (rho[l - 1] + w) / (1.0 + rho[l - 1] * w);
                }
                self.channels[c] * g.norm_sqr()
            })
            .sum()
    }

    /// R at one pixel and dR/dd_l for every layer (written into `grad`, one per layer).
    pub fn reflectance_grad(&self, pixel: usize, d: &[f64], grad: &mut [f64]) -> f64 {
        // Buffers sized to the stack: zeroing 16-entry arrays per pixel would cost as much
        // as the arithmetic for the usual one to three layers.
        if self.layers <= 4 {
            self.grad_with::<4>(pixel, d, grad)
        } else {
            self.grad_with::<MAX_LAYERS>(pixel, d, grad)
        }
    }

    fn grad_with<const M: usize>(&self, pixel: usize, d: &[f64], grad: &mut [f64]) -> f64 {
        let l_n = self.layers;
        grad.iter_mut().for_each(|g| *g = 0.0);
        let mut total = 0.0;
        let mut w = [Complex64::new(0.0, 0.0); M];
        let mut z = [Complex64::new(0.0, 0.0); M];
        let mut inv_den = [Complex64::new(0.0, 0.0); M];
        for c in 0..self.channels.len() {
            let (rho, beta) = self.block(pixel, c);
            let mut g = rho[l_n];
            for l in (1..=l_n).rev() {
                z[l - 1] = phase(beta[l - 1], d[l - 1]);
                w[l - 1] = g * z[l - 1];
                inv_den[l - 1] = (1.0 + rho[l - 1] * w[l - 1]).inv();
                g = (rho[l - 1] + w[l - 1]) * inv_den[l - 1];
            }
            let r = g;
            let weight = self.channels[c];
            total += weight * r.norm_sqr();
            // Top-down chain rule: dr/dd_l = P·g'_l·w_l·iβ_l, P = Π_{m<l} g'_m z_m.
            let mut p = Complex64::new(1.0, 0.0);
            for l in 1..=l_n {
                let inv = inv_den[l - 1];
                let gprime = (1.0 - rho[l - 1] * rho[l - 1]) * inv * inv;
                let dr = p * gprime * w[l - 1] * I * beta[l - 1];
                grad[l - 1] += weight * 2.0 * (r.conj() * dr).re;
                p *= gprime * z[l - 1];
            }
        }
        total
    }

    /// R and dR/dd_l at each of `pixels` (`r[i]`, and `grad[i·L + l]` for L layers), four
    /// pixels at a time in vector lanes, with the branch-free [`lanes::sin_cos`]: the same
    /// recursion as [`Prepared::reflectance_grad`].
    pub fn reflectance_grad_many(
        &self,
        pixels: &[usize],
        d: &[f64],
        r: &mut [f64],
        grad: &mut [f64],
    ) {
        let l_n = self.layers;
        lanes::with_avx2(
            #[inline(always)]
            || {
                if l_n <= 4 {
                    self.grad_lanes::<4>(pixels, d, r, grad)
                } else {
                    self.grad_lanes::<MAX_LAYERS>(pixels, d, r, grad)
                }
            },
        )
    }

    #[inline(always)]
    fn grad_lanes<const M: usize>(
        &self,
        pixels: &[usize],
        d: &[f64],
        r_out: &mut [f64],
        grad_out: &mut [f64],
    ) {
        let l_n = self.layers;
        for (block, chunk) in pixels.chunks(W).enumerate() {
            // A short last block repeats its last pixel; only real lanes are written back.
            let idx: [usize; W] = std::array::from_fn(|i| chunk[i.min(chunk.len() - 1)]);
            let mut total = [0.0; W];
            let mut grad = [[0.0; W]; M];
            let mut rho = [Cv::ZERO; M];
            let mut beta = [Cv::ZERO; M];
            let mut w = [Cv::ZERO; M];
            let mut z = [Cv::ZERO; M];
            let mut inv_den = [Cv::ZERO; M];
            for c in 0..self.channels.len() {
                let mut g = Cv::ZERO;
                for (i, &j) in idx.iter().enumerate() {
                    let (rh, be) = self.block(j, c);
                    g.set(i, rh[l_n]);
                    for l in 0..l_n {
                        rho[l].set(i, rh[l]);
                        beta[l].set(i, be[l]);
                    }
                }
                for l in (0..l_n).rev() {
                    z[l] = phase_lanes(beta[l], d[l]);
                    w[l] = g * z[l];
                    inv_den[l] = (Cv::ONE + rho[l] * w[l]).inv();
                    g = (rho[l] + w[l]) * inv_den[l];
                }
                let r = g;
                let weight = [self.channels[c]; W];
                let norm = r.norm_sqr();
                for i in 0..W {
                    total[i] += weight[i] * norm[i];
                }
                // Top-down chain rule: dr/dd_l = P·g'_l·w_l·iβ_l, P = Π_{m<l} g'_m z_m.
                let mut p = Cv::ONE;
                for l in 0..l_n {
                    let inv = inv_den[l];
                    let gprime = (Cv::ONE - rho[l] * rho[l]) * inv * inv;
                    let dr = p * gprime * w[l] * beta[l].times_i();
                    let re = r.re_conj_mul(dr);
                    for i in 0..W {
                        grad[l][i] += weight[i] * 2.0 * re[i];
                    }
                    p = p * (gprime * z[l]);
                }
            }
            for i in 0..chunk.len() {
                let at = block * W + i;
                r_out[at] = total[i];
                for l in 0..l_n {
                    grad_out[at * l_n + l] = grad[l][i];
                }
            }
        }
    }

    /// χ² terms of a sweep: layer `k` takes `d0 + i·step` (i < n) while the others keep
    /// `d`; for each i, accumulates over `pixels` the sums Σ R² and Σ R·R_m (written to
    /// `srr`, `srm`) and Σ (R − R_m)² (`sse`). Phase factors advance by multiplication, so
    /// the inner loop has no transcendental functions, and W pixels share one set of vector
    /// lanes.
    #[allow(clippy::too_many_arguments)]
    pub fn sweep(
        &self,
        pixels: &[usize],
        measured: &[f64],
        d: &[f64],
        k: usize,
        d0: f64,
        step: f64,
        sse: &mut [f64],
        srr: &mut [f64],
        srm: &mut [f64],
    ) {
        lanes::with_avx2(
            #[inline(always)]
            || {
                if self.layers <= 4 {
                    self.sweep_lanes::<4>(pixels, measured, d, k, d0, step, sse, srr, srm)
                } else {
                    self.sweep_lanes::<MAX_LAYERS>(pixels, measured, d, k, d0, step, sse, srr, srm)
                }
            },
        )
    }

    // Lane loops index several arrays by the lane number on purpose.
    #[allow(clippy::too_many_arguments, clippy::needless_range_loop)]
    #[inline(always)]
    fn sweep_lanes<const M: usize>(
        &self,
        pixels: &[usize],
        measured: &[f64],
        d: &[f64],
        k: usize,
        d0: f64,
        step: f64,
        sse: &mut [f64],
        srr: &mut [f64],
        srm: &mut [f64],
    ) {
        let n = sse.len();
        let l_n = self.layers;
        let channels = self.channels.len();
        // Σ (R − R_m)², Σ R², Σ R·R_m of each candidate, lane by lane (summed at the end).
        let mut sums = vec![[[0.0; W]; 3]; n];
        // For W pixels at once and each channel: the Möbius map [[a, b], [c, e]] of the
        // interface above layer k and every layer above it, acting on w_k (r = (a w + b)/
        // (c w + e)), the current candidate's w_k and the rotation to the next candidate.
        let mut coef = vec![[Cv::ZERO; 6]; channels];
        for chunk in pixels.chunks(W) {
            let idx: [usize; W] = std::array::from_fn(|i| chunk[i.min(chunk.len() - 1)]);
            // Lanes past the end repeat the last pixel with R and R_m forced to 0, so they add
            // nothing to any sum.
            let m: Fv = std::array::from_fn(|i| {
                if i < chunk.len() {
                    measured[idx[i]]
                } else {
                    0.0
                }
            });
            let mut lossless = true;
            for (c, coef) in coef.iter_mut().enumerate() {
                let mut rho = [Cv::ZERO; M];
                let mut beta = [Cv::ZERO; M];
                // Γ just below layer k, starting from the substrate's interface.
                let mut g = Cv::ZERO;
                for (i, &j) in idx.iter().enumerate() {
                    let (rh, be) = self.block(j, c);
                    g.set(i, rh[l_n]);
                    for l in 0..l_n {
                        rho[l].set(i, rh[l]);
                        beta[l].set(i, be[l]);
                    }
                }
                for l in (k + 1..l_n).rev() {
                    let w = g * phase_lanes(beta[l], d[l]);
                    g = (rho[l] + w) * (Cv::ONE + rho[l] * w).inv();
                }
                let (mut a, mut b, mut cc, mut e) = (Cv::ONE, rho[k], rho[k], Cv::ONE);
                for l in (0..k).rev() {
                    // Compose T_l(z_l · ·) ∘ current, T_l = [[1, ρ_l], [ρ_l, 1]].
                    let zl = phase_lanes(beta[l], d[l]);
                    let rc = rho[l] * zl;
                    let na = zl * a + rho[l] * cc;
                    let nb = zl * b + rho[l] * e;
                    let nc = rc * a + cc;
                    let ne = rc * b + e;
                    (a, b, cc, e) = (na, nb, nc, ne);
                }
                for i in chunk.len()..W {
                    a.set(i, Complex64::new(0.0, 0.0));
                    b.set(i, Complex64::new(0.0, 0.0));
                }
                lossless &= beta[k].im.iter().all(|v| *v == 0.0);
                *coef = [
                    a,
                    b,
                    cc,
                    e,
                    g * phase_lanes(beta[k], d0),
                    phase_lanes(beta[k], step),
                ];
            }
            if lossless {
                // |w| stays |w_0| as the candidates rotate it (u = rotⁱ on the unit circle):
                // |a w + b|² = |a|²|w_0|² + |b|² + Re(2 a w_0 b̄ · u), and the same for the
                // denominator, so each candidate costs two real dot products and a division.
                for coef in coef.iter_mut() {
                    let [a, b, cc, e, w0, rot] = *coef;
                    let ww = w0.norm_sqr();
                    let kn = map_add(map_mul(a.norm_sqr(), ww), b.norm_sqr());
                    let kd = map_add(map_mul(cc.norm_sqr(), ww), e.norm_sqr());
                    let p = (a * w0 * b.conj()).scale([2.0; W]);
                    let q = (cc * w0 * e.conj()).scale([2.0; W]);
                    *coef = [
                        Cv {
                            re: kn,
                            im: [0.0; W],
                        },
                        Cv {
                            re: kd,
                            im: [0.0; W],
                        },
                        p,
                        q,
                        Cv::ONE,
                        rot,
                    ];
                }
                for sum in sums.iter_mut() {
                    let mut r = [0.0; W];
                    for (coef, weight) in coef.iter_mut().zip(&self.channels) {
                        let [kn, kd, p, q, u, rot] = *coef;
                        for i in 0..W {
                            let num = kn.re[i] + (p.re[i] * u.re[i] - p.im[i] * u.im[i]);
                            let den = kd.re[i] + (q.re[i] * u.re[i] - q.im[i] * u.im[i]);
                            r[i] += weight * (num / den);
                        }
                        coef[4] = u * rot;
                    }
                    accumulate(sum, &r, &m);
                }
            } else {
                for sum in sums.iter_mut() {
                    let mut r = [0.0; W];
                    for (coef, weight) in coef.iter_mut().zip(&self.channels) {
                        let [a, b, cc, e, w, rot] = *coef;
                        // |r|² = |a w + b|²/|c w + e|²: one real division, no complex one.
                        let num = (a * w + b).norm_sqr();
                        let den = (cc * w + e).norm_sqr();
                        for i in 0..W {
                            r[i] += weight * (num[i] / den[i]);
                        }
                        coef[4] = w * rot;
                    }
                    accumulate(sum, &r, &m);
                }
            }
        }
        for (i, sum) in sums.iter().enumerate() {
            sse[i] += sum[0].iter().sum::<f64>();
            srr[i] += sum[1].iter().sum::<f64>();
            srm[i] += sum[2].iter().sum::<f64>();
        }
    }
}

/// Adds one candidate's (R − R_m)², R², R·R_m, lane by lane.
#[inline(always)]
fn accumulate(sum: &mut [Fv; 3], r: &Fv, m: &Fv) {
    for i in 0..W {
        let diff = r[i] - m[i];
        sum[0][i] += diff * diff;
        sum[1][i] += r[i] * r[i];
        sum[2][i] += r[i] * m[i];
    }
}

#[inline(always)]
fn map_mul(a: Fv, b: Fv) -> Fv {
    std::array::from_fn(|i| a[i] * b[i])
}

#[inline(always)]
fn map_add(a: Fv, b: Fv) -> Fv {
    std::array::from_fn(|i| a[i] + b[i])
}

/// exp(iβd) in every lane, with the real exponential skipped for lossless lanes.
#[inline(always)]
fn phase_lanes(beta: Cv, d: f64) -> Cv {
    let (sin, cos) = lanes::sin_cos(beta.re.map(|b| b * d));
    if beta.im.iter().all(|b| *b == 0.0) {
        Cv { re: cos, im: sin }
    } else {
        let a = beta.im.map(|b| (-b * d).exp());
        Cv { re: cos, im: sin }.scale(a)
    }
}

/// exp(iβd), with the real exponential skipped for a lossless layer (Im β = 0).
#[inline]
fn phase(beta: Complex64, d: f64) -> Complex64 {
    let (sin, cos) = (beta.re * d).sin_cos();
    if beta.im == 0.0 {
        Complex64::new(cos, sin)
    } else {
        let a = (-beta.im * d).exp();
        Complex64::new(a * cos, a * sin)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::optics::{cone_samples, reflectance, MaterialLibrary, Stack};

    fn setup(theta: f64, na: f64) -> (Prepared, Stack, Vec<f64>) {
        let lib = MaterialLibrary::builtin();
        let m = |n: &str| lib.get(n).unwrap().clone();
        let w: Vec<f64> = (0..60).map(|i| 400.0 + 10.0 * i as f64).collect();
        let samples = cone_samples(theta, na, 6);
        let p = Prepared::new(
            &m("air"),
            &[m("si3n4"), m("si"), m("sio2")],
            &m("si"),
            &channels(&samples),
            &w,
        );
        let s = Stack::bare(m("air"), m("si"))
            .with_layer(m("si3n4"), 150.0)
            .with_layer(m("si"), 20.0)
            .with_layer(m("sio2"), 900.0);
        (p, s, w)
    }

    #[test]
    fn agrees_with_the_characteristic_matrix() {
        for (theta, na) in [(0.0, 0.0), (12.0, 0.0), (0.0, 0.25), (8.0, 0.2)] {
            let (p, s, w) = setup(theta, na);
            let reference = {
                let samples = cone_samples(theta, na, 6);
                // same angle samples as the kernel
                w.iter()
                    .map(|l| {
                        samples
                            .iter()
                            .map(|a| {
                                let st = reflectance(&s, &[*l], a.theta_rad.to_degrees(), 0.0)[0];
                                a.weight * st
                            })
                            .sum::<f64>()
                    })
                    .collect::<Vec<_>>()
            };
            for j in 0..w.len() {
                let r = p.reflectance(j, &[150.0, 20.0, 900.0]);
                assert!(
                    (r - reference[j]).abs() < 1e-12,
                    "θ={theta} NA={na} λ={}: {r} vs {}",
                    w[j],
                    reference[j]
                );
            }
        }
    }

    #[test]
    fn many_pixels_in_lanes_match_one_pixel_at_a_time() {
        // Three layers, one of them absorbing (Si), oblique and conical light (several
        // channels), 60 pixels (a part-filled last block of lanes), and a pixel subset.
        for (theta, na) in [(0.0, 0.0), (10.0, 0.0), (8.0, 0.2)] {
            let (p, _, w) = setup(theta, na);
            for d in [[150.0, 20.0, 900.0], [1.0, 0.0, 14_000.0], [80.0, 3.0, 0.5]] {
                for pixels in [(0..w.len()).collect::<Vec<_>>(), vec![3, 17, 18, 40, 59]] {
                    let mut r = vec![0.0; pixels.len()];
                    let mut g = vec![0.0; pixels.len() * 3];
                    p.reflectance_grad_many(&pixels, &d, &mut r, &mut g);
                    for (i, &j) in pixels.iter().enumerate() {
                        let mut want = [0.0; 3];
                        let rj = p.reflectance_grad(j, &d, &mut want);
                        assert!((r[i] - rj).abs() < 1e-13, "θ={theta} d={d:?} j={j}");
                        for l in 0..3 {
                            let tol = 1e-12 * want[l].abs().max(1e-3);
                            assert!((g[i * 3 + l] - want[l]).abs() < tol, "{l}: {g:?} {want:?}");
                        }
                    }
                }
            }
        }
    }

    #[test]
    fn sweep_matches_direct_evaluation() {
        let (p, _, w) = setup(10.0, 0.0);
        let d = [150.0, 20.0, 900.0];
        let measured: Vec<f64> = (0..w.len())
            .map(|j| p.reflectance(j, &[140.0, 20.0, 905.0]))
            .collect();
        let pixels: Vec<usize> = (0..w.len()).collect();
        for k in 0..3 {
            let n = 7;
            let (mut sse, mut srr, mut srm) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
            p.sweep(
                &pixels,
                &measured,
                &d,
                k,
                d[k] - 30.0,
                10.0,
                &mut sse,
                &mut srr,
                &mut srm,
            );
            for (i, sse_i) in sse.iter().enumerate() {
                let mut di = d;
                di[k] = d[k] - 30.0 + 10.0 * i as f64;
                let direct: f64 = pixels
                    .iter()
                    .map(|j| (p.reflectance(*j, &di) - measured[*j]).powi(2))
                    .sum();
                assert!(
                    (sse_i - direct).abs() < 1e-10 * direct.max(1e-6),
                    "k={k} i={i}: {} vs {direct}",
                    sse[i]
                );
            }
        }
    }
}
