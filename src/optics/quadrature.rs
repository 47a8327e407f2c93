//! Gauss–Legendre quadrature nodes and weights on [0, 1] (used to average over a cone of
//! illumination angles).

/// `n` Gauss–Legendre nodes and weights mapped to [0, 1]; weights sum to 1.
pub fn gauss_legendre_unit(n: usize) -> Vec<(f64, f64)> {
    let n = n.max(1);
    let mut out = Vec::with_capacity(n);
    for i in 0..n {
        // Newton iteration on P_n from the usual Chebyshev-like first guess.
        let mut x = (std::f64::consts::PI * (i as f64 + 0.75) / (n as f64 + 0.5)).cos();
        let mut dp = 1.0;
        for _ in 0..100 {
            let (mut p0, mut p1) = (1.0, x);
            for k in 2..=n {
                let p2 = ((2 * k - 1) as f64 * x * p1 - (k - 1) as f64 * p0) / k as f64;
                p0 = p1;
                p1 = p2;
            }
            let pn = if n == 1 { x } else { p1 };
            let pn1 = if n == 1 { 1.0 } else { p0 };
            dp = n as f64 * (x * pn - pn1) / (x * x - 1.0);
            let dx = pn / dp;
            x -= dx;
            if dx.abs() < 1e-15 {
                break;
            }
        }
        let w = 2.0 / ((1.0 - x * x) * dp * dp);
        out.push(((1.0 - x) / 2.0, w / 2.0));
    }
    out.sort_by(|a, b| a.0.total_cmp(&b.0));
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn integrates_polynomials_exactly() {
        // An n-point rule is exact for degree 2n − 1 (any numerical-analysis text).
        for n in 1..8 {
            let q = gauss_legendre_unit(n);
            let deg = 2 * n - 1;
            let integral: f64 = q.iter().map(|(x, w)| w * x.powi(deg as i32)).sum();
            assert!((integral - 1.0 / (deg as f64 + 1.0)).abs() < 1e-13, "n={n}");
        }
    }
}
