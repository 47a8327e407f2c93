//! Reflectance of a layer stack by the characteristic-matrix (transfer-matrix) method.
//!
//! Convention: N = n + ik with k > 0 absorbing (fields ∝ exp(i(kz − ωt))). With this sign
//! the characteristic matrix of a layer is
//! `[[cos δ, −i sin δ / η], [−i η sin δ, cos δ]]`, δ = 2π N d cos θ / λ
//! (H. A. Macleod, *Thin-Film Optical Filters*, ch. 2, written there for N = n − ik, hence +i;
//! conjugating every quantity turns one form into the other). Tilted admittances:
//! η = N cos θ for s, η = N / cos θ for p (in units of the free-space admittance).
//! [B, C]ᵀ = Π Mⱼ · [1, η_sub]ᵀ, r = (η₀B − C)/(η₀B + C), T = 4 η₀ Re(η_sub)/|η₀B + C|².
//! Each layer matrix is scaled by e^{iδ} so that thick absorbing layers cannot overflow; the
//! scale cancels in r and is put back in T.

use super::quadrature::gauss_legendre_unit;
use super::stack::Stack;
use num_complex::Complex64;

/// Polarisation of the incident light.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Polarisation {
    /// Electric field perpendicular to the plane of incidence (TE).
    S,
    /// Electric field in the plane of incidence (TM).
    P,
}

/// cos θ inside a medium of index `n`, given the invariant n₀ sin θ₀ (Snell), on the branch
/// of the forward wave: Im(N cos θ) > 0 (decaying), or Re(N cos θ) > 0 when lossless.
pub fn cos_theta(n: Complex64, n0_sin0: f64) -> Complex64 {
    let s = n0_sin0 / n;
    let c = (Complex64::new(1.0, 0.0) - s * s).sqrt();
    let nc = n * c;
    let forward = if nc.im.abs() > 1e-14 * nc.norm().max(1.0) {
        nc.im > 0.0
    } else {
        nc.re >= 0.0
    };
    if forward {
        c
    } else {
        -c
    }
}

/// Tilted admittance of a medium for the given polarisation.
pub fn admittance(n: Complex64, cos_t: Complex64, pol: Polarisation) -> Complex64 {
    match pol {
        Polarisation::S => n * cos_t,
        Polarisation::P => n / cos_t,
    }
}

/// Result of one characteristic-matrix product.
struct Product {
    eta0: Complex64,
    eta_sub: Complex64,
    b: Complex64,
    c: Complex64,
    /// ln |Π e^{iδⱼ}|² = −2 Σ Im δⱼ, the scale taken out of B and C.
    log_scale2: f64,
}

fn product(stack: &Stack, wavelength_nm: f64, theta0_rad: f64, pol: Polarisation) -> Product {
    let n0 = stack.ambient.index(wavelength_nm);
    // The ambient is taken as lossless (air, a liquid); its imaginary part is ignored.
    let n0_sin0 = n0.re * theta0_rad.sin();
    let eta0 = admittance(
        Complex64::new(n0.re, 0.0),
        cos_theta(Complex64::new(n0.re, 0.0), n0_sin0),
        pol,
    );
    let ns = stack.substrate.index(wavelength_nm);
    let eta_sub = admittance(ns, cos_theta(ns, n0_sin0), pol);
    let i = Complex64::new(0.0, 1.0);
    // Multiply from the substrate up: [B, C] = M₁ M₂ … M_L [1, η_sub].
    let mut b = Complex64::new(1.0, 0.0);
    let mut c = eta_sub;
    let mut log_scale2 = 0.0;
    for layer in stack.layers.iter().rev() {
        let n = layer.material.index(wavelength_nm);
        let ct = cos_theta(n, n0_sin0);
        let eta = admittance(n, ct, pol);
        let delta = 2.0 * std::f64::consts::PI * n * ct * layer.thickness_nm / wavelength_nm;
        // e^{iδ}·cos δ = (e^{2iδ} + 1)/2 and e^{iδ}·sin δ = (e^{2iδ} − 1)/(2i): bounded when Im δ ≥ 0.
        let e2 = (2.0 * i * delta).exp();
        let cos_s = (e2 + 1.0) * 0.5;
        let sin_s = (e2 - 1.0) / (2.0 * i);
        let nb = cos_s * b - i * sin_s / eta * c;
        let nc = -i * eta * sin_s * b + cos_s * c;
        b = nb;
        c = nc;
        log_scale2 += -2.0 * delta.im;
    }
    Product {
        eta0,
        eta_sub,
        b,
        c,
        log_scale2,
    }
}

/// Complex amplitude reflection coefficient at one wavelength and angle of incidence (rad).
pub fn amplitude(
    stack: &Stack,
    wavelength_nm: f64,
    theta0_rad: f64,
    pol: Polarisation,
) -> Complex64 {
    let p = product(stack, wavelength_nm, theta0_rad, pol);
    (p.eta0 * p.b - p.c) / (p.eta0 * p.b + p.c)
}

/// Power transmittance into the substrate at one wavelength and angle of incidence (rad).
pub fn transmittance(stack: &Stack, wavelength_nm: f64, theta0_rad: f64, pol: Polarisation) -> f64 {
    let p = product(stack, wavelength_nm, theta0_rad, pol);
    let d = p.eta0 * p.b + p.c;
    4.0 * p.eta0.re * p.eta_sub.re / d.norm_sqr() * p.log_scale2.exp()
}

fn polarised(
    stack: &Stack,
    wavelengths_nm: &[f64],
    incidence_deg: f64,
    pol: Polarisation,
) -> Vec<f64> {
    let t = incidence_deg.to_radians();
    wavelengths_nm
        .iter()
        .map(|w| amplitude(stack, *w, t, pol).norm_sqr())
        .collect()
}

/// s-polarised reflectance at each wavelength.
pub fn reflectance_s(stack: &Stack, wavelengths_nm: &[f64], incidence_deg: f64) -> Vec<f64> {
    polarised(stack, wavelengths_nm, incidence_deg, Polarisation::S)
}

/// p-polarised reflectance at each wavelength.
pub fn reflectance_p(stack: &Stack, wavelengths_nm: &[f64], incidence_deg: f64) -> Vec<f64> {
    polarised(stack, wavelengths_nm, incidence_deg, Polarisation::P)
}

/// One ray of an illumination cone: its angle of incidence and its share of the light.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AngleSample {
    pub theta_rad: f64,
    pub weight: f64,
}

/// Angles of incidence that represent a cone of numerical aperture `na` around a chief ray
/// at `incidence_deg`, with weights summing to 1. The pupil is taken as uniformly filled
/// (ray density uniform in sin α, so weight ∝ sin α cos α dα: common practice for Köhler
/// illumination through an aplanatic objective). `radial` Gauss–Legendre nodes are used
/// in u = sin²α; azimuths only when the chief ray is tilted. `na = 0` gives the chief ray.
pub fn cone_samples(incidence_deg: f64, na: f64, radial: usize) -> Vec<AngleSample> {
    let t0 = incidence_deg.to_radians();
    if na <= 0.0 {
        return vec![AngleSample {
            theta_rad: t0,
            weight: 1.0,
        }];
    }
    let u_max = (na * na).min(1.0);
    let azimuths: Vec<(f64, f64)> = if t0 == 0.0 {
        vec![(0.0, 1.0)]
    } else {
        // The cone is symmetric about the plane of incidence: φ in [0, π] suffices.
        gauss_legendre_unit(2 * radial)
            .into_iter()
            .map(|(x, w)| (x * std::f64::consts::PI, w))
            .collect()
    };
    let mut out = Vec::new();
    for (u, wu) in gauss_legendre_unit(radial) {
        let sin_a = (u * u_max).sqrt();
        let cos_a = (1.0 - u * u_max).sqrt();
        for (phi, wphi) in &azimuths {
            let cos_t = (t0.cos() * cos_a - t0.sin() * sin_a * phi.cos())
                .abs()
                .min(1.0);
            out.push(AngleSample {
                theta_rad: cos_t.acos(),
                weight: wu * wphi,
            });
        }
    }
    out
}

/// Radial nodes enough to follow the fringe shift across a cone of aperture `na` for this
/// stack over these wavelengths (about one node per radian of phase change, at least 6).
pub fn cone_nodes(stack: &Stack, wavelengths_nm: &[f64], na: f64) -> usize {
    let l_min = wavelengths_nm.iter().copied().fold(f64::INFINITY, f64::min);
    if na <= 0.0 || !l_min.is_finite() {
        return 1;
    }
    let span: f64 = stack
        .layers
        .iter()
        .map(|l| {
            let n = l.material.index(l_min).re.max(1.0);
            // phase 4π n d cosθ/λ changes by ≈ 4π n d/λ · NA²/(2n²) across the cone
            4.0 * std::f64::consts::PI * n * l.thickness_nm / l_min * na * na / (2.0 * n * n)
        })
        .sum();
    (6 + span.ceil() as usize).min(64)
}

/// Unpolarised reflectance at each wavelength, averaged over the illumination cone of
/// numerical aperture `na` (0 = collimated) around the angle of incidence.
pub fn reflectance(stack: &Stack, wavelengths_nm: &[f64], incidence_deg: f64, na: f64) -> Vec<f64> {
    let samples = cone_samples(incidence_deg, na, cone_nodes(stack, wavelengths_nm, na));
    wavelengths_nm
        .iter()
        .map(|w| {
            samples
                .iter()
                .map(|s| {
                    let rs = amplitude(stack, *w, s.theta_rad, Polarisation::S).norm_sqr();
                    let rp = amplitude(stack, *w, s.theta_rad, Polarisation::P).norm_sqr();
                    s.weight * 0.5 * (rs + rp)
                })
                .sum()
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::optics::{Material, MaterialLibrary};

    fn lib() -> MaterialLibrary {
        MaterialLibrary::builtin()
    }

    #[test]
    fn bare_silicon_matches_fresnel() {
        // Normal-incidence Fresnel formula R = ((n−1)² + k²)/((n+1)² + k²) (Born & Wolf §13.2)
        // with Green (2008) n = 3.675, k = 5.4113e-3 at 800 nm.
        let l = lib();
        let s = Stack::bare(l.get("air").unwrap().clone(), l.get("si").unwrap().clone());
        let r = reflectance(&s, &[800.0], 0.0, 0.0)[0];
        let (n, k) = (3.675f64, 5.4113e-3f64);
        let expect = ((n - 1.0).powi(2) + k * k) / ((n + 1.0).powi(2) + k * k);
        assert!((r - expect).abs() < 1e-12, "{r} vs {expect}");
    }

    #[test]
    fn quarter_wave_layer_matches_the_textbook_formula() {
        // Quarter-wave layer at normal incidence: R = ((n0 ns − n1²)/(n0 ns + n1²))²
        // (Macleod, Thin-Film Optical Filters, §2 "quarter-wave layer").
        let (n1, ns) = (1.38, 1.52);
        let s = Stack::bare(
            Material::constant("a", 1.0, 0.0),
            Material::constant("g", ns, 0.0),
        )
        .with_layer(Material::constant("f", n1, 0.0), 550.0 / (4.0 * n1));
        let r = reflectance(&s, &[550.0], 0.0, 0.0)[0];
        let expect = ((ns - n1 * n1) / (ns + n1 * n1)).powi(2);
        assert!((r - expect).abs() < 1e-12, "{r} vs {expect}");
    }

    #[test]
    fn brewster_angle_kills_p() {
        // At tan θ_B = n2/n1 the p reflectance of a bare interface vanishes (Brewster).
        let s = Stack::bare(
            Material::constant("a", 1.0, 0.0),
            Material::constant("g", 1.5, 0.0),
        );
        let theta = 1.5f64.atan().to_degrees();
        assert!(reflectance_p(&s, &[500.0], theta)[0] < 1e-20);
        assert!(reflectance_s(&s, &[500.0], theta)[0] > 0.1);
    }

    #[test]
    fn thick_absorbing_layer_does_not_overflow() {
        let s = Stack::bare(
            Material::constant("a", 1.0, 0.0),
            Material::constant("g", 1.5, 0.0),
        )
        .with_layer(Material::constant("m", 2.0, 3.0), 1e6);
        let r = reflectance(&s, &[500.0], 30.0, 0.0)[0];
        let bulk = reflectance(
            &Stack::bare(
                Material::constant("a", 1.0, 0.0),
                Material::constant("m", 2.0, 3.0),
            ),
            &[500.0],
            30.0,
            0.0,
        )[0];
        assert!((r - bulk).abs() < 1e-12, "{r} vs {bulk}");
        assert_eq!(
            transmittance(&s, 500.0, 0.3, Polarisation::S),
            0.0,
            "nothing passes 1 mm of metal-like film"
        );
    }

    #[test]
    fn cone_weights_sum_to_one() {
        for (t, na) in [(0.0, 0.1), (10.0, 0.3), (45.0, 0.5)] {
            let s = cone_samples(t, na, 8);
            let w: f64 = s.iter().map(|a| a.weight).sum();
            assert!((w - 1.0).abs() < 1e-12);
            // mean sin²α over a uniformly filled pupil is NA²/2 (normal incidence)
            if t == 0.0 {
                let m: f64 = s.iter().map(|a| a.weight * a.theta_rad.sin().powi(2)).sum();
                assert!((m - na * na / 2.0).abs() < 1e-12);
            }
        }
    }
}
