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
    /// The same in vector lanes, W consecutive pixels at a time (the last block repeats the
    /// last pixel): block b, channel c at `(b·C + c)·(2L + 1)`.
    blocks: Vec<Cv>,
    /// For one lossless layer (real β in every pixel and channel), the closed form of each
    /// block and channel (at `b·C + c`); empty otherwise.
    airy: Vec<Airy>,
    /// 0, 1, …: every pixel, as the pixel list of a fit on all of them.
    every: Vec<usize>,
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
        let n = wavelength_nm.len();
        let per_pixel = channels.len() * stride;
        let mut blocks = Vec::with_capacity(n.div_ceil(W) * per_pixel);
        for b in 0..n.div_ceil(W) {
            for q in 0..per_pixel {
                let mut v = Cv::ZERO;
                for i in 0..W {
                    v.set(i, coeff[(b * W + i).min(n - 1) * per_pixel + q]);
                }
                blocks.push(v);
            }
        }
        let lossless_single = l == 1 && coeff.chunks_exact(stride).all(|c| c[2].im == 0.0);
        let airy = if lossless_single {
            blocks
                .chunks_exact(stride)
                .map(|b| Airy::new(b[0], b[1], b[2].re))
                .collect()
        } else {
            Vec::new()
        };
        Prepared {
            wavelength_nm: wavelength_nm.to_vec(),
            layers: l,
            channels: channels.iter().map(|c| c.weight).collect(),
            coeff,
            blocks,
            airy,
            every: (0..n).collect(),
        }
    }

    /// ρ_0..ρ_L (into `rho[..L]` and `sub`, the substrate's interface) and β_1..β_L of
    /// channel c for the pixels of `chunk` (at most W; lanes past its end repeat its last
    /// pixel): straight from `blocks` when the chunk is one of them.
    #[inline(always)]
    fn load_lanes(&self, chunk: &[usize], c: usize, rho: &mut [Cv], sub: &mut Cv, beta: &mut [Cv]) {
        let l_n = self.layers;
        let stride = 2 * l_n + 1;
        if let Some(block) = self.whole_block(chunk) {
            let start = (block * self.channels.len() + c) * stride;
            let b = &self.blocks[start..start + stride];
            rho[..l_n].copy_from_slice(&b[..l_n]);
            *sub = b[l_n];
            beta[..l_n].copy_from_slice(&b[l_n + 1..]);
            return;
        }
        for i in 0..W {
            let (rh, be) = self.block(chunk[i.min(chunk.len() - 1)], c);
            sub.set(i, rh[l_n]);
            for l in 0..l_n {
                rho[l].set(i, rh[l]);
                beta[l].set(i, be[l]);
            }
        }
    }

    /// The block of lanes `chunk` is, if it is one (consecutive pixels from a multiple of
    /// W, W of them or up to the last pixel).
    #[inline(always)]
    fn whole_block(&self, chunk: &[usize]) -> Option<usize> {
        let first = chunk[0];
        let whole = first.is_multiple_of(W)
            && chunk[chunk.len() - 1] == first + chunk.len() - 1
            && (chunk.len() == W || first + chunk.len() == self.len());
        whole.then_some(first / W)
    }

    /// Every pixel's index, in order.
    pub fn every_pixel(&self) -> &[usize] {
        &self.every
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

    /// The round-trip phase Σ Re β_l d_l of the stack at one pixel (first channel): one
    /// fringe of the spectrum is a change of 2π.
    pub fn round_trip_phase(&self, pixel: usize, d: &[f64]) -> f64 {
        let (_, beta) = self.block(pixel, 0);
        beta.iter().zip(d).map(|(b, d)| b.re * d).sum()
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
                // One and two layers, the usual stacks, with loops of known length that
                // the compiler unrolls into registers.
                match l_n {
                    1 if !self.airy.is_empty() => self.airy_lanes(pixels, d[0], r, grad),
                    1 => self.grad_lanes::<1, true>(pixels, d, r, grad),
                    2 => self.grad_lanes::<2, true>(pixels, d, r, grad),
                    3 | 4 => self.grad_lanes::<4, false>(pixels, d, r, grad),
                    _ => self.grad_lanes::<MAX_LAYERS, false>(pixels, d, r, grad),
                }
            },
        )
    }

    #[inline(always)]
    fn grad_lanes<const M: usize, const EXACT: bool>(
        &self,
        pixels: &[usize],
        d: &[f64],
        r_out: &mut [f64],
        grad_out: &mut [f64],
    ) {
        // EXACT: the stack has exactly M layers.
        let l_n = if EXACT { M } else { self.layers };
        let mut rho = [Cv::ZERO; M];
        let mut beta = [Cv::ZERO; M];
        let mut w = [Cv::ZERO; M];
        let mut z = [Cv::ZERO; M];
        let mut inv_den = [Cv::ZERO; M];
        for (block, chunk) in pixels.chunks(W).enumerate() {
            let mut total = [0.0; W];
            let mut grad = [[0.0; W]; M];
            for c in 0..self.channels.len() {
                let mut g = Cv::ZERO;
                self.load_lanes(chunk, c, &mut rho, &mut g, &mut beta);
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
                // Top-down chain rule: dr/dd_l = q_l·w_l·iβ_l with q_l = P_l·g'_l,
                // g'_l = (1 − ρ_l²)/(1 + ρ_l w_l)², P_0 = 1 and P_{l+1} = q_l·z_l; then
                // dR/dd_l = 2 Re(r̄ q_l w_l iβ_l) = −2 (Re(u) Im β_l + Im(u) Re β_l),
                // u = r̄ q_l w_l.
                let r_bar = r.conj();
                let mut q = Cv::ZERO;
                for l in 0..l_n {
                    let inv = inv_den[l];
                    let gprime = (Cv::ONE - rho[l] * rho[l]) * (inv * inv);
                    q = if l == 0 { gprime } else { q * gprime };
                    let u = r_bar * q * w[l];
                    for i in 0..W {
                        grad[l][i] -=
                            weight[i] * 2.0 * (u.re[i] * beta[l].im[i] + u.im[i] * beta[l].re[i]);
                    }
                    if l + 1 < l_n {
                        q = q * z[l];
                    }
                }
            }
            let at = block * W;
            if chunk.len() == W {
                r_out[at..at + W].copy_from_slice(&total);
            } else {
                r_out[at..at + chunk.len()].copy_from_slice(&total[..chunk.len()]);
            }
            for (i, out) in grad_out[at * l_n..(at + chunk.len()) * l_n]
                .chunks_exact_mut(l_n)
                .enumerate()
            {
                for (l, g) in out.iter_mut().enumerate() {
                    *g = grad[l][i];
                }
            }
        }
    }

    /// [`Prepared::reflectance_grad_many`] for one lossless layer, by its closed form
    /// ([`Airy`]): one sine/cosine, a few products and one division per pixel and channel.
    #[inline(always)]
    fn airy_lanes(&self, pixels: &[usize], d: f64, r_out: &mut [f64], grad_out: &mut [f64]) {
        let channels = self.channels.len();
        let (mut rho, mut beta) = ([Cv::ZERO; 1], [Cv::ZERO; 1]);
        for ((chunk, r_out), g_out) in pixels
            .chunks(W)
            .zip(r_out.chunks_mut(W))
            .zip(grad_out.chunks_mut(W))
        {
            let mut total = [0.0; W];
            let mut grad = [0.0; W];
            let block = self.whole_block(chunk);
            for (c, &weight) in self.channels.iter().enumerate() {
                let gathered;
                let airy = match block {
                    Some(b) => &self.airy[b * channels + c],
                    None => {
                        let mut sub = Cv::ZERO;
                        self.load_lanes(chunk, c, &mut rho, &mut sub, &mut beta);
                        gathered = Airy::new(rho[0], sub, beta[0].re);
                        &gathered
                    }
                };
                let (r, g) = airy.value_grad(d);
                for i in 0..W {
                    total[i] += weight * r[i];
                    grad[i] += weight * g[i];
                }
            }
            if let (Ok(r_out), Ok(g_out)) = (
                <&mut [f64; W]>::try_from(&mut *r_out),
                <&mut [f64; W]>::try_from(&mut *g_out),
            ) {
                // A whole block: fixed-size stores, lane by lane (a whole-array assignment
                // compiled to a call of memcpy here, once per block).
                #[allow(clippy::manual_memcpy)]
                for i in 0..W {
                    r_out[i] = total[i];
                    g_out[i] = grad[i];
                }
            } else {
                r_out.copy_from_slice(&total[..chunk.len()]);
                g_out.copy_from_slice(&grad[..chunk.len()]);
            }
        }
    }

    /// Weighted χ² sums at every point of a thickness grid: the axes move their layers
    /// while the others keep `d`. Pixels go through in blocks of W vector lanes; for each
    /// block the phase factors step from one grid point to the next by multiplication
    /// (along the outer axes) and by a three-term recurrence (along the longest, swept,
    /// axis, when its layer is lossless), so the loops have no transcendental functions.
    pub fn grid_sums(&self, axes: &GridAxes, scored: &Scored, d: &[f64], scaled: bool) -> GridSums {
        lanes::with_avx2(
            #[inline(always)]
            || match (self.layers <= 4, scaled) {
                (true, false) => self.grid_lanes::<4, false>(axes, scored, d),
                (true, true) => self.grid_lanes::<4, true>(axes, scored, d),
                (false, false) => self.grid_lanes::<MAX_LAYERS, false>(axes, scored, d),
                (false, true) => self.grid_lanes::<MAX_LAYERS, true>(axes, scored, d),
            },
        )
    }

    // Lane loops index several arrays by the lane number on purpose.
    #[allow(clippy::needless_range_loop)]
    #[inline(always)]
    fn grid_lanes<const M: usize, const SCALED: bool>(
        &self,
        axes: &GridAxes,
        scored: &Scored,
        d: &[f64],
    ) -> GridSums {
        let l_n = self.layers;
        let channels = self.channels.len();
        let dims = axes.counts.len();
        let sweep = (0..dims).max_by_key(|a| axes.counts[*a]).unwrap_or(0);
        let (k, n) = (axes.layers[sweep], axes.counts[sweep]);
        let total: usize = axes.counts.iter().product();
        let mut strides = vec![1; dims];
        for a in (0..dims.saturating_sub(1)).rev() {
            strides[a] = strides[a + 1] * axes.counts[a + 1];
        }
        let sums_per_point = if SCALED { 3 } else { 1 };
        // Lane by lane: Σ w(R − R_m)² of every grid point, then Σ w R² and Σ w R·R_m.
        let mut lane_sums = vec![[0.0; W]; total * sums_per_point];
        // Per channel: ρ_0..ρ_L, β_1..β_L, each layer's current phase factor z_l, and
        // each axis' first phase factor and step.
        let mut rho = vec![[Cv::ZERO; M]; channels];
        let mut beta = vec![[Cv::ZERO; M]; channels];
        let mut sub = vec![Cv::ZERO; channels];
        let mut z = vec![[Cv::ZERO; M]; channels];
        let mut z0 = vec![[Cv::ZERO; M]; channels];
        let mut rot = vec![[Cv::ZERO; M]; channels];
        let mut coef = vec![[Cv::ZERO; 6]; channels];
        let mut circle = vec![Circle::default(); channels];
        let mut scale = vec![[0.0; W]; channels];
        let mut outer = vec![0usize; dims];
        for (chunk, weights) in scored.pixels.chunks(W).zip(scored.weights.chunks(W)) {
            let idx: [usize; W] = std::array::from_fn(|i| chunk[i.min(chunk.len() - 1)]);
            // √w scales both R and R_m, so every sum carries w. Lanes past the end repeat
            // the last pixel with a weight of 0, so they add nothing to any sum.
            let root: Fv = std::array::from_fn(|i| weights.get(i).map_or(0.0, |w| w.sqrt()));
            let m: Fv = std::array::from_fn(|i| root[i] * scored.measured[idx[i]]);
            let mut lossless = true;
            for c in 0..channels {
                self.load_lanes(chunk, c, &mut rho[c], &mut sub[c], &mut beta[c]);
                for l in 0..l_n {
                    z[c][l] = phase_lanes(beta[c][l], d[l]);
                }
                for a in 0..dims {
                    let l = axes.layers[a];
                    z0[c][a] = phase_lanes(beta[c][l], axes.first[a]);
                    rot[c][a] = phase_lanes(beta[c][l], axes.step[a]);
                    z[c][l] = z0[c][a];
                }
                lossless &= lanes::all(beta[c][k].im.map(|v| v == 0.0));
                scale[c] = root.map(|r| r * self.channels[c]);
            }
            outer.iter_mut().for_each(|o| *o = 0);
            loop {
                for c in 0..channels {
                    // Γ just below layer k, from the substrate's interface up.
                    let mut g = sub[c];
                    for l in (k + 1..l_n).rev() {
                        let w = g * z[c][l];
                        g = (rho[c][l] + w) * (Cv::ONE + rho[c][l] * w).inv();
                    }
                    // The Möbius map [[a, b], [c, e]] of the interface above layer k and
                    // every layer above it, acting on w_k: r = (a w + b)/(c w + e).
                    let (mut a, mut b, mut cc, mut e) = (Cv::ONE, rho[c][k], rho[c][k], Cv::ONE);
                    for l in (0..k).rev() {
                        // Compose T_l(z_l · ·) ∘ current, T_l = [[1, ρ_l], [ρ_l, 1]].
                        let zl = z[c][l];
                        let rc = rho[c][l] * zl;
                        let na = zl * a + rho[c][l] * cc;
                        let nb = zl * b + rho[c][l] * e;
                        let nc = rc * a + cc;
                        let ne = rc * b + e;
                        (a, b, cc, e) = (na, nb, nc, ne);
                    }
                    coef[c] = [a, b, cc, e, g * z0[c][sweep], rot[c][sweep]];
                    if lossless {
                        circle[c] = Circle::new(&coef[c]);
                    }
                }
                let base: usize = (0..dims).map(|a| outer[a] * strides[a]).sum();
                let at = |i: usize| base + i * strides[sweep];
                if lossless {
                    // |w| stays |w_0| as the candidates rotate it by e^{iθ}: each of
                    // |a w + b|² and |c w + e|² is a constant plus a sinusoid in the
                    // candidate number (see [`Circle`]).
                    if let ([one], [scale]) = (&mut circle[..], &scale[..]) {
                        // One channel (normal incidence, no cone): its state stays in
                        // registers from one candidate to the next.
                        let mut state = *one;
                        for i in 0..n {
                            let r = state.value(scale);
                            state.advance();
                            accumulate::<SCALED>(&mut lane_sums, total, at(i), &r, &m);
                        }
                    } else {
                        for i in 0..n {
                            let mut r = [0.0; W];
                            for (circle, scale) in circle.iter_mut().zip(&scale) {
                                let v = circle.value(scale);
                                for l in 0..W {
                                    r[l] += v[l];
                                }
                                circle.advance();
                            }
                            accumulate::<SCALED>(&mut lane_sums, total, at(i), &r, &m);
                        }
                    }
                } else {
                    for i in 0..n {
                        let mut r = [0.0; W];
                        for (coef, scale) in coef.iter_mut().zip(&scale) {
                            let [a, b, cc, e, w, rot] = *coef;
                            // |r|² = |a w + b|²/|c w + e|²: one real division, no complex one.
                            let num = (a * w + b).norm_sqr();
                            let den = (cc * w + e).norm_sqr();
                            for l in 0..W {
                                r[l] += scale[l] * (num[l] / den[l]);
                            }
                            coef[4] = w * rot;
                        }
                        accumulate::<SCALED>(&mut lane_sums, total, at(i), &r, &m);
                    }
                }
                // The next grid line (mixed radix over the outer axes, the last fastest):
                // its layer's phase factor steps on, or starts again.
                let Some(a) = (0..dims)
                    .rev()
                    .find(|&a| a != sweep && outer[a] + 1 < axes.counts[a])
                else {
                    break;
                };
                for b in a + 1..dims {
                    if b != sweep {
                        outer[b] = 0;
                        for c in 0..channels {
                            z[c][axes.layers[b]] = z0[c][b];
                        }
                    }
                }
                outer[a] += 1;
                for c in 0..channels {
                    let l = axes.layers[a];
                    z[c][l] = z[c][l] * rot[c][a];
                }
            }
        }
        let reduce = |part: usize| -> Vec<f64> {
            lane_sums[part * total..(part + 1) * total]
                .iter()
                .map(|v| v.iter().sum())
                .collect()
        };
        GridSums {
            sse: reduce(0),
            srr: if SCALED { reduce(1) } else { Vec::new() },
            srm: if SCALED { reduce(2) } else { Vec::new() },
        }
    }
}

/// One lossless layer (β real) between the ambient and a substrate, for W pixels of one
/// channel: with z = e^{iβd} on the unit circle, r = (ρ + s z)/(1 + ρ s z) gives
/// R = (k_n + Re(P z))/(k_d + Re(Q z)), k_n = |ρ|² + |s|², k_d = 1 + |ρ s|², P = 2 ρ̄ s,
/// Q = 2 ρ s (|a + b|² = |a|² + |b|² + 2 Re(ā b)), and
/// dR/dd = β (R Im(Q z) − Im(P z)) / (k_d + Re(Q z)).
#[derive(Debug, Clone, Copy)]
struct Airy {
    kn: Fv,
    kd: Fv,
    p: Cv,
    q: Cv,
    beta: Fv,
}

impl Airy {
    /// From the ambient–layer coefficient ρ, the layer–substrate one s, and β.
    #[inline(always)]
    fn new(rho: Cv, sub: Cv, beta: Fv) -> Airy {
        let (rr, ss) = (rho.norm_sqr(), sub.norm_sqr());
        Airy {
            kn: map_add(rr, ss),
            kd: std::array::from_fn(|i| 1.0 + rr[i] * ss[i]),
            p: (rho.conj() * sub).scale([2.0; W]),
            q: (rho * sub).scale([2.0; W]),
            beta,
        }
    }

    /// R and dR/dd at thickness `d` in each lane.
    #[inline(always)]
    fn value_grad(&self, d: f64) -> (Fv, Fv) {
        let (sin, cos) = lanes::sin_cos(self.beta.map(|b| b * d));
        let z = Cv { re: cos, im: sin };
        let (pz, qz) = (self.p * z, self.q * z);
        let inv = map_add(self.kd, qz.re).map(|v| 1.0 / v);
        let r = map_mul(map_add(self.kn, pz.re), inv);
        let slope: Fv = std::array::from_fn(|i| (r[i] * qz.im[i] - pz.im[i]) * inv[i]);
        (r, map_mul(self.beta, slope))
    }
}

/// The axes of a thickness grid: for each, the layer it moves, its first value and step
/// (nm) and its number of points. The last axis varies fastest in the flat order.
#[derive(Debug, Clone, Copy)]
pub struct GridAxes<'a> {
    pub layers: &'a [usize],
    pub first: &'a [f64],
    pub step: &'a [f64],
    pub counts: &'a [usize],
}

/// The pixels a grid scores, the weight of each, and the measured reflectance (indexed by
/// pixel).
#[derive(Debug, Clone, Copy)]
pub struct Scored<'a> {
    pub pixels: &'a [usize],
    pub weights: &'a [f64],
    pub measured: &'a [f64],
}

/// Weighted sums at every grid point, in flat order: Σ w(R − R_m)², and for a scaled
/// search Σ w R² and Σ w R·R_m (empty otherwise).
#[derive(Debug, Clone, Default)]
pub struct GridSums {
    pub sse: Vec<f64>,
    pub srr: Vec<f64>,
    pub srm: Vec<f64>,
}

/// A lossless swept layer's numerator and denominator for W pixels, each a constant plus a
/// sinusoid in the candidate number: the constants, the sinusoids' current and previous
/// values, and 2 cos θ.
#[derive(Debug, Clone, Copy, Default)]
struct Circle {
    kn: Fv,
    kd: Fv,
    num: Fv,
    den: Fv,
    num_prev: Fv,
    den_prev: Fv,
    two_cos: Fv,
}

impl Circle {
    /// From the Möbius coefficients [a, b, c, e, w_0, e^{iθ}] of a grid line.
    #[inline(always)]
    fn new(coef: &[Cv; 6]) -> Circle {
        let [a, b, cc, e, w0, rot] = *coef;
        let ww = w0.norm_sqr();
        let p = (a * w0 * b.conj()).scale([2.0; W]);
        let q = (cc * w0 * e.conj()).scale([2.0; W]);
        // Re(p e^{−iθ}) and Re(q e^{−iθ}): the values one step before the first.
        let back = rot.conj();
        Circle {
            kn: map_add(map_mul(a.norm_sqr(), ww), b.norm_sqr()),
            kd: map_add(map_mul(cc.norm_sqr(), ww), e.norm_sqr()),
            num: p.re,
            den: q.re,
            num_prev: (p * back).re,
            den_prev: (q * back).re,
            two_cos: rot.re.map(|c| 2.0 * c),
        }
    }

    /// scale·R of the current candidate, R = (kn + num)/(kd + den).
    #[inline(always)]
    fn value(&self, scale: &Fv) -> Fv {
        std::array::from_fn(|l| {
            scale[l] * ((self.kn[l] + self.num[l]) / (self.kd[l] + self.den[l]))
        })
    }

    /// Moves to the next candidate.
    #[inline(always)]
    fn advance(&mut self) {
        for i in 0..W {
            let num = self.two_cos[i] * self.num[i] - self.num_prev[i];
            let den = self.two_cos[i] * self.den[i] - self.den_prev[i];
            self.num_prev[i] = self.num[i];
            self.den_prev[i] = self.den[i];
            self.num[i] = num;
            self.den[i] = den;
        }
    }
}

/// Adds one grid point's w(R − R_m)² and, when `SCALED`, w R² and w R·R_m, lane by lane
/// (`r` and `m` carry √w).
#[inline(always)]
fn accumulate<const SCALED: bool>(sums: &mut [Fv], total: usize, at: usize, r: &Fv, m: &Fv) {
    for i in 0..W {
        let diff = r[i] - m[i];
        sums[at][i] += diff * diff;
    }
    if SCALED {
        for i in 0..W {
            sums[total + at][i] += r[i] * r[i];
            sums[2 * total + at][i] += r[i] * m[i];
        }
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
    if lanes::all(beta.im.map(|b| b == 0.0)) {
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
    fn one_lossless_layer_closed_form_matches_the_recursion() {
        // SiO2 on Si (the closed form) against the recursion written out for one pixel
        // (`reflectance_grad`), at normal, oblique and conical light, over every pixel
        // (blocks from the table) and a subset (lanes gathered pixel by pixel); an absorbing
        // layer (Si) keeps a stack off the closed form.
        let lib = MaterialLibrary::builtin();
        let m = |n: &str| lib.get(n).unwrap().clone();
        let w: Vec<f64> = (0..61).map(|i| 400.0 + 10.0 * i as f64).collect();
        for (theta, na) in [(0.0, 0.0), (10.0, 0.0), (8.0, 0.2)] {
            let ch = channels(&cone_samples(theta, na, 6));
            let p = Prepared::new(&m("air"), &[m("sio2")], &m("si"), &ch, &w);
            assert!(!p.airy.is_empty(), "SiO2 is lossless here");
            for d in [0.0, 1.0, 437.5, 1234.0, 14_000.0] {
                for pixels in [(0..w.len()).collect::<Vec<_>>(), vec![3, 17, 18, 40, 60]] {
                    let mut r = vec![0.0; pixels.len()];
                    let mut g = vec![0.0; pixels.len()];
                    p.reflectance_grad_many(&pixels, &[d], &mut r, &mut g);
                    for (i, &j) in pixels.iter().enumerate() {
                        let mut want = [0.0];
                        let rj = p.reflectance_grad(j, &[d], &mut want);
                        assert!((r[i] - rj).abs() < 1e-13, "θ={theta} d={d} j={j}");
                        let tol = 1e-11 * want[0].abs().max(1e-3);
                        assert!((g[i] - want[0]).abs() < tol, "{}: {} {}", j, g[i], want[0]);
                    }
                }
            }
        }
        let ch = channels(&cone_samples(0.0, 0.0, 6));
        let absorbing = Prepared::new(&m("air"), &[m("si")], &m("sio2"), &ch, &w);
        assert!(absorbing.airy.is_empty());
    }

    #[test]
    fn grid_sums_match_direct_evaluation() {
        // Oblique light (two channels), an absorbing layer (Si, layer 1), uneven weights,
        // a last block of lanes only part filled, one to three axes, and a long swept axis
        // (the recurrence's rounding would show if it grew).
        let (p, _, w) = setup(10.0, 0.0);
        let d = [150.0, 20.0, 900.0];
        let measured: Vec<f64> = (0..w.len())
            .map(|j| p.reflectance(j, &[140.0, 20.0, 905.0]))
            .collect();
        let pixels: Vec<usize> = (0..w.len()).collect();
        let weights: Vec<f64> = pixels.iter().map(|j| 0.5 + (*j % 3) as f64).collect();
        let scored = Scored {
            pixels: &pixels,
            weights: &weights,
            measured: &measured,
        };
        // (fitted layers, first thickness, step, count) of each grid axis.
        type Axes<'a> = (&'a [usize], &'a [f64], &'a [f64], &'a [usize]);
        let cases: [Axes; 5] = [
            (&[2], &[600.0], &[10.0], &[300]),
            (&[1], &[5.0], &[1.0], &[40]),
            (&[0, 2], &[100.0, 850.0], &[25.0, 7.0], &[4, 30]),
            (&[2, 1], &[880.0, 10.0], &[9.0, 2.0], &[5, 12]),
            (
                &[0, 1, 2],
                &[120.0, 15.0, 870.0],
                &[20.0, 3.0, 11.0],
                &[3, 4, 6],
            ),
        ];
        for (layers, first, step, counts) in cases {
            let axes = GridAxes {
                layers,
                first,
                step,
                counts,
            };
            let sums = p.grid_sums(&axes, &scored, &d, true);
            let plain = p.grid_sums(&axes, &scored, &d, false);
            assert_eq!(
                plain.sse, sums.sse,
                "the sums of a scaled grid are extra ones"
            );
            assert!(plain.srr.is_empty() && plain.srm.is_empty());
            let total: usize = counts.iter().product();
            assert_eq!(sums.sse.len(), total);
            for f in 0..total {
                // The flat index's thicknesses, the last axis fastest.
                let mut di = d;
                let mut rest = f;
                for a in (0..counts.len()).rev() {
                    di[layers[a]] = first[a] + (rest % counts[a]) as f64 * step[a];
                    rest /= counts[a];
                }
                let terms = |g: &dyn Fn(f64, f64) -> f64| -> f64 {
                    pixels
                        .iter()
                        .zip(&weights)
                        .map(|(j, w)| w * g(p.reflectance(*j, &di), measured[*j]))
                        .sum()
                };
                let direct = terms(&|r, m| (r - m).powi(2));
                let (rr, rm) = (terms(&|r, _| r * r), terms(&|r, m| r * m));
                let close = |a: f64, b: f64| (a - b).abs() < 1e-10 * b.abs().max(1e-6);
                assert!(
                    close(sums.sse[f], direct),
                    "{layers:?} {di:?}: {} vs {direct}",
                    sums.sse[f]
                );
                assert!(close(sums.srr[f], rr), "{layers:?} {di:?}");
                assert!(close(sums.srm[f], rm), "{layers:?} {di:?}");
            }
        }
    }
}
