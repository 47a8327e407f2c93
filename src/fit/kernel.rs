//! The fitters' fast forward model: the stack's reflectance and its thickness derivatives on
//! one wavelength grid, from per-pixel quantities computed once per grid.
//!
//! Same physics as [`crate::optics::tmm`] (N = n + ik, tilted admittances, unpolarised light
//! and cone averages as weighted channels), written as the equivalent Airy recursion of
//! interface coefficients, which gives dR/dd analytically. From the substrate up:
//! Γ_L = ρ_L, w_l = Γ_l·z_l with z_l = exp(iβ_l d_l), β_l = 4π N_l cos θ_l / λ, and
//! Γ_{l−1} = (ρ_{l−1} + w_l)/(1 + ρ_{l−1} w_l); r = Γ_0, R = |r|².

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

    /// χ² terms of a sweep: layer `k` takes `d0 + i·step` (i < n) while the others keep
    /// `d`; for each i, accumulates over `pixels` the sums Σ R² and Σ R·R_m (written to
    /// `srr`, `srm`) and Σ (R − R_m)² (`sse`). Phase factors advance by multiplication, so
    /// the inner loop has no transcendental functions.
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
        let n = sse.len();
        let l_n = self.layers;
        let mut acc = vec![0.0; n];
        for &j in pixels {
            acc.iter_mut().for_each(|a| *a = 0.0);
            for c in 0..self.channels.len() {
                let (rho, beta) = self.block(j, c);
                // Γ just below layer k (index k+1 in media numbering).
                let mut g = rho[l_n];
                for l in (k + 2..=l_n).rev() {
                    let w = g * phase(beta[l - 1], d[l - 1]);
                    g = (rho[l - 1] + w) / (1.0 + rho[l - 1] * w);
                }
                // Möbius map [[a, b], [c, e]] of the interface above layer k and every layer
                // above it, acting on w_k: r = (a w + b)/(c w + e).
                let (mut a, mut b, mut cc, mut e) = (
                    Complex64::new(1.0, 0.0),
                    rho[k],
                    rho[k],
                    Complex64::new(1.0, 0.0),
                );
                for l in (1..=k).rev() {
                    // Compose T_{l−1}(z_l · ·) ∘ current.
                    let zl = phase(beta[l - 1], d[l - 1]);
                    let (ra, rb, rc, re) =
                        (zl, rho[l - 1], rho[l - 1] * zl, Complex64::new(1.0, 0.0));
                    let na = ra * a + rb * cc;
                    let nb = ra * b + rb * e;
                    let nc = rc * a + re * cc;
                    let ne = rc * b + re * e;
                    a = na;
                    b = nb;
                    cc = nc;
                    e = ne;
                }
                let rot = (I * beta[k] * step).exp();
                let weight = self.channels[c];
                // Four interleaved phase chains, each advanced by rot⁴, so that successive
                // candidates do not wait on one another's multiplication.
                let w0 = g * (I * beta[k] * d0).exp();
                let mut w4 = [w0, w0 * rot, w0 * rot * rot, w0 * rot * rot * rot];
                let rot4 = (rot * rot) * (rot * rot);
                // |r|² = |a w + b|²/|c w + e|²: one real division, no complex one.
                let r2 = |w: Complex64| (a * w + b).norm_sqr() / (cc * w + e).norm_sqr();
                let mut chunks = acc.chunks_exact_mut(4);
                for chunk in &mut chunks {
                    for (slot, w) in chunk.iter_mut().zip(w4.iter_mut()) {
                        *slot += weight * r2(*w);
                        *w *= rot4;
                    }
                }
                for (slot, w) in chunks.into_remainder().iter_mut().zip(w4.iter()) {
                    *slot += weight * r2(*w);
                }
            }
            let m = measured[j];
            for i in 0..n {
                let r = acc[i];
                let diff = r - m;
                sse[i] += diff * diff;
                srr[i] += r * r;
                srm[i] += r * m;
            }
        }
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
