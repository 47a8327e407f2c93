//! Smoothing of spectra.

/// Quadratic Savitzky–Golay smoothing over `2·half + 1` points (A. Savitzky, M. J. E. Golay,
/// Anal. Chem. 36, 1627 (1964)); assumes near-uniform pixel spacing, as a spectrometer's is.
/// The ends use the nearest full window's quadratic fit. `half = 0` returns the input.
pub fn savitzky_golay(values: &[f64], half: usize) -> Vec<f64> {
    let n = values.len();
    if half == 0 || n < 2 * half + 1 {
        return values.to_vec();
    }
    let m = half as f64;
    // Closed-form quadratic SG weights: c_j = 3(3m² + 3m − 1 − 5j²) / ((2m−1)(2m+1)(2m+3)).
    let denom = (2.0 * m - 1.0) * (2.0 * m + 1.0) * (2.0 * m + 3.0);
    let weights: Vec<f64> = (-(half as i64)..=half as i64)
        .map(|j| {
            let j = j as f64;
            3.0 * (3.0 * m * m + 3.0 * m - 1.0 - 5.0 * j * j) / denom
        })
        .collect();
    let mut out = values.to_vec();
    for i in half..n - half {
        out[i] = weights
            .iter()
            .zip(&values[i - half..=i + half])
            .map(|(w, v)| w * v)
            .sum();
    }
    // Ends: evaluate the least-squares quadratic of the first/last window.
    let fit_end = |window: &[f64], at: &[usize], out: &mut [f64], offset: usize| {
        let k = window.len();
        let xs: Vec<f64> = (0..k).map(|x| x as f64).collect();
        let coeff = quadratic_fit(&xs, window);
        for &i in at {
            let x = (i - offset) as f64;
            out[i] = coeff[0] + coeff[1] * x + coeff[2] * x * x;
        }
    };
    let w = 2 * half + 1;
    let head: Vec<usize> = (0..half).collect();
    fit_end(&values[..w], &head, &mut out, 0);
    let tail: Vec<usize> = (n - half..n).collect();
    fit_end(&values[n - w..], &tail, &mut out, n - w);
    out
}

/// Least-squares y = a + b x + c x² by the normal equations; keep x small (|x| ≲ 100) and
/// centred for conditioning. Returns [a, b, c].
pub fn quadratic_fit(x: &[f64], y: &[f64]) -> [f64; 3] {
    let mut s = [0.0; 5];
    let mut t = [0.0; 3];
    for (xi, yi) in x.iter().zip(y) {
        let mut p = 1.0;
        for (k, sk) in s.iter_mut().enumerate() {
            *sk += p;
            if k < 3 {
                t[k] += p * yi;
            }
            p *= xi;
        }
    }
    let a = nalgebra::Matrix3::new(s[0], s[1], s[2], s[1], s[2], s[3], s[2], s[3], s[4]);
    let b = nalgebra::Vector3::new(t[0], t[1], t[2]);
    a.lu()
        .solve(&b)
        .map(|v| [v[0], v[1], v[2]])
        .unwrap_or([y[0], 0.0, 0.0])
}

/// White-noise σ of a sampled curve from its fourth differences, robustly (median absolute
/// value / 0.6745, divided by √70, the noise gain of the 4th difference). Fourth differences
/// suppress a smooth signal: a fringe of P pixels per period is scaled by (2 sin(π/P))⁴, so
/// curves with more than about 10 pixels per fringe barely bias the estimate.
pub fn noise_sigma(values: &[f64]) -> f64 {
    let mut d: Vec<f64> = values
        .windows(5)
        .map(|w| (w[0] - 4.0 * w[1] + 6.0 * w[2] - 4.0 * w[3] + w[4]).abs())
        .collect();
    if d.is_empty() {
        return 0.0;
    }
    let mid = d.len() / 2;
    d.select_nth_unstable_by(mid, f64::total_cmp);
    d[mid] / 0.6745 / 70f64.sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn noise_sigma_of_a_fringe_plus_known_noise() {
        use rand::SeedableRng;
        use rand_distr::{Distribution, Normal};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let n = Normal::new(0.0, 0.003).unwrap();
        let v: Vec<f64> = (0..4000)
            .map(|i| {
                0.3 + 0.1 * (i as f64 * 2.0 * std::f64::consts::PI / 20.0).sin()
                    + n.sample(&mut rng)
            })
            .collect();
        let s = noise_sigma(&v);
        assert!((s - 0.003).abs() < 0.0004, "{s}");
    }

    #[test]
    fn keeps_a_parabola_and_averages_noise() {
        // A quadratic SG filter passes any quadratic unchanged (Savitzky & Golay 1964).
        let v: Vec<f64> = (0..40)
            .map(|i| 0.3 + 0.01 * i as f64 - 2e-4 * (i * i) as f64)
            .collect();
        let s = savitzky_golay(&v, 5);
        for (a, b) in v.iter().zip(&s) {
            assert!((a - b).abs() < 1e-12);
        }
        // Known 5-point weights (−3, 12, 17, 12, −3)/35 from the 1964 paper's table.
        let spike = [0.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0];
        let s = savitzky_golay(&spike, 2);
        assert!((s[4] - 17.0 / 35.0).abs() < 1e-12);
        assert!((s[3] - 12.0 / 35.0).abs() < 1e-12);
        assert!((s[2] + 3.0 / 35.0).abs() < 1e-12);
    }
}
