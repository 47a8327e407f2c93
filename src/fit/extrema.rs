//! The `extrema` method: peaks and valleys of the (smoothed) spectrum, each located by a
//! local quadratic fit; fringe orders from the spacing of neighbours, with each extremum's
//! own n(λ) and refraction angle; thickness by least squares over all extrema
//! (J. Luňáček, P. Hlubina, M. Luňáčková, Appl. Opt. 48, 985 (2009), for the dispersion-aware
//! form). At an extremum 4 n d cos θ/λ = m (an integer count of half fringes), i.e.
//! 2 d x = m with x = 2 n cos θ/λ.

use crate::spectrum::{noise_sigma, quadratic_fit, savitzky_golay};

/// An extrema-method result.
#[derive(Debug, Clone, PartialEq)]
pub struct Estimate {
    pub thickness_nm: f64,
    /// Standard error of the least-squares thickness.
    pub sigma_nm: f64,
    /// Standard deviation of the per-extremum thicknesses m_i/(2 x_i).
    pub spread_nm: f64,
    /// Wavelengths of the extrema used.
    pub extrema_nm: Vec<f64>,
}

/// Finds the thickness in `[min_nm, max_nm]` from reflectance `r` at `wavelength_nm`, with
/// `x(λ)` = 2 n cos θ/λ given per pixel; `smooth` is the Savitzky–Golay half-width.
pub fn estimate(
    wavelength_nm: &[f64],
    r: &[f64],
    x: &[f64],
    min_nm: f64,
    max_nm: f64,
    smooth: usize,
) -> Result<Estimate, String> {
    let n = r.len();
    let s = savitzky_golay(r, smooth);
    // Prominence needed: well above the smoothed noise (common practice: ~6σ), and at least
    // 2 % of the spectrum's whole swing, so that ripples of a dispersion curve (a table's
    // interpolation, a lamp's shape) never pass for fringes.
    let (lo, hi) = s
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(*v), b.max(*v))
        });
    let threshold = (6.0 * noise_sigma(r) / ((2 * smooth + 1) as f64).sqrt())
        .max(0.02 * (hi - lo))
        .max(1e-6);
    let mut ext: Vec<(usize, bool)> = (1..n.saturating_sub(1))
        .filter_map(|i| {
            if s[i] > s[i - 1] && s[i] >= s[i + 1] {
                Some((i, true))
            } else if s[i] < s[i - 1] && s[i] <= s[i + 1] {
                Some((i, false))
            } else {
                None
            }
        })
        .collect();
    prune(&mut ext, &s, threshold);
    // Then against the fringes themselves: a real fringe swings like its neighbours, a
    // leftover noise wiggle by much less.
    let mut swings: Vec<f64> = ext
        .windows(2)
        .map(|p| (s[p[0].0] - s[p[1].0]).abs())
        .collect();
    if !swings.is_empty() {
        swings.sort_by(f64::total_cmp);
        prune(&mut ext, &s, 0.25 * swings[swings.len() / 2]);
    }
    // The smoothing distorts the window edges: keep extrema a filter width inside.
    let edge = smooth.max(2);
    ext.retain(|(i, _)| *i >= edge && *i + edge < n);
    if ext.len() < 2 {
        return Err(format!(
            "{} extremum found above the noise; the extrema method needs at least 2 (the film is too thin for this window: use the model method)",
            ext.len()
        ));
    }
    // Locate each extremum by a quadratic fit of the raw spectrum around it.
    let half = smooth.max(2);
    let located: Vec<(f64, f64)> = ext
        .iter()
        .map(|(i, _)| {
            let (a, b) = (i.saturating_sub(half), (*i + half).min(n - 1));
            let u: Vec<f64> = (a..=b).map(|k| k as f64 - *i as f64).collect();
            let q = quadratic_fit(&u, &r[a..=b]);
            let v = if q[2] != 0.0 {
                (-q[1] / (2.0 * q[2])).clamp(-1.0, 1.0)
            } else {
                0.0
            };
            let p = *i as f64 + v;
            (interp(wavelength_nm, p), interp(x, p))
        })
        .collect();
    let mut xs: Vec<f64> = located.iter().map(|l| l.1).collect();
    xs.sort_by(f64::total_cmp);
    // Orders: from the median neighbour spacing, then the integer offset K that best fits
    // 2 d x_i = m_i through the origin.
    let mut pair: Vec<f64> = xs.windows(2).map(|w| 1.0 / (2.0 * (w[1] - w[0]))).collect();
    pair.sort_by(f64::total_cmp);
    let d0 = pair[pair.len() / 2];
    // Order steps between neighbours (1, or 2 across a missed extremum), summed: rounding
    // each gap keeps an error in d0 from accumulating over many fringes.
    let mut steps = vec![0.0; xs.len()];
    for i in 1..xs.len() {
        steps[i] = steps[i - 1] + (2.0 * d0 * (xs[i] - xs[i - 1])).round().max(1.0);
    }
    let k_est = (2.0 * d0 * xs[0]).round();
    let sxx: f64 = xs.iter().map(|x| x * x).sum();
    let fit_k = |k: f64| {
        let m: Vec<f64> = steps.iter().map(|s| k + s).collect();
        let d = xs.iter().zip(&m).map(|(x, m)| x * m).sum::<f64>() / (2.0 * sxx);
        let res: f64 = xs
            .iter()
            .zip(&m)
            .map(|(x, m)| (2.0 * d * x - m).powi(2))
            .sum();
        (d, res, m)
    };
    // A thickness within half an order of a bound belongs to that bound (it is then held
    // there and flagged), rather than to the neighbouring order inside.
    let tol = 0.5 * xs.iter().sum::<f64>() / (2.0 * sxx);
    let (mut best, mut best_in): (Option<(f64, f64, Vec<f64>)>, _) = (None, None);
    for k in (k_est as i64 - 3)..=(k_est as i64 + 3) {
        if k < 0 {
            continue;
        }
        let f = fit_k(k as f64);
        if best
            .as_ref()
            .is_none_or(|b: &(f64, f64, Vec<f64>)| f.1 < b.1)
        {
            best = Some(f.clone());
        }
        if f.0 >= min_nm - tol
            && f.0 <= max_nm + tol
            && best_in
                .as_ref()
                .is_none_or(|b: &(f64, f64, Vec<f64>)| f.1 < b.1)
        {
            best_in = Some(f);
        }
    }
    let Some((d, res, m)) = best_in else {
        let near = best
            .map(|b| format!(" (the best order gives {:.1} nm)", b.0))
            .unwrap_or_default();
        return Err(format!(
            "no fringe order gives a thickness inside [{min_nm}, {max_nm}] nm{near}"
        ));
    };
    let d = d.clamp(min_nm, max_nm);
    let count = xs.len() as f64;
    let sigma = (res / (count - 1.0).max(1.0)).sqrt() / (2.0 * sxx.sqrt());
    let per: Vec<f64> = xs.iter().zip(&m).map(|(x, m)| m / (2.0 * x)).collect();
    let mean = per.iter().sum::<f64>() / count;
    let spread =
        (per.iter().map(|p| (p - mean).powi(2)).sum::<f64>() / (count - 1.0).max(1.0)).sqrt();
    Ok(Estimate {
        thickness_nm: d,
        sigma_nm: sigma,
        spread_nm: spread,
        extrema_nm: located.iter().map(|l| l.0).collect(),
    })
}

/// Removes extrema pairs whose swing is below `threshold` (smallest first) and keeps the
/// sequence alternating (of two like neighbours, the more extreme stays).
fn prune(ext: &mut Vec<(usize, bool)>, s: &[f64], threshold: f64) {
    loop {
        let mut i = 0;
        while i + 1 < ext.len() {
            if ext[i].1 == ext[i + 1].1 {
                let keep_first = (s[ext[i].0] > s[ext[i + 1].0]) == ext[i].1;
                ext.remove(if keep_first { i + 1 } else { i });
            } else {
                i += 1;
            }
        }
        let weakest = (0..ext.len().saturating_sub(1))
            .map(|i| (i, (s[ext[i].0] - s[ext[i + 1].0]).abs()))
            .min_by(|a, b| a.1.total_cmp(&b.1));
        match weakest {
            Some((i, swing)) if swing < threshold => {
                ext.drain(i..i + 2);
            }
            _ => return,
        }
    }
}

/// Linear interpolation of `v` at fractional index `p`.
fn interp(v: &[f64], p: f64) -> f64 {
    let i = (p.floor() as usize).min(v.len() - 2);
    let t = p - i as f64;
    v[i] + t * (v[i + 1] - v[i])
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::optics::{reflectance, Material, Stack};

    #[test]
    fn textbook_adjacent_maxima() {
        // Adjacent reflectance maxima of a film at normal incidence give
        // d = λ1 λ2 / (2 n (λ1 − λ2)) (textbook formula, e.g. E. Hecht, *Optics*, §9.7;
        // the numbers are our own): n = 1.5, maxima at 600 and 500 nm → d = 1000 nm.
        let (l1, l2, n) = (600.0f64, 500.0f64, 1.5f64);
        assert!((l1 * l2 / (2.0 * n * (l1 - l2)) - 1000.0).abs() < 1e-9);
        // The method finds the same film from its computed spectrum (n = 1.5 on n = 2.2).
        let s = Stack::bare(
            Material::constant("a", 1.0, 0.0),
            Material::constant("s", 2.2, 0.0),
        )
        .with_layer(Material::constant("f", 1.5, 0.0), 1000.0);
        let w: Vec<f64> = (0..1200).map(|i| 420.0 + 0.5 * i as f64).collect();
        let r = reflectance(&s, &w, 0.0, 0.0);
        let x: Vec<f64> = w.iter().map(|w| 3.0 / w).collect();
        let e = estimate(&w, &r, &x, 100.0, 5000.0, 3).unwrap();
        assert!((e.thickness_nm - 1000.0).abs() < 1.0, "{e:?}");
        // 1 < 1.5 < 2.2: both reflections change phase alike, so maxima sit where 2nd = mλ
        for want in [500.0, 600.0, 750.0] {
            assert!(
                e.extrema_nm.iter().any(|l| (l - want).abs() < 1.0),
                "{want} in {:?}",
                e.extrema_nm
            );
        }
    }

    #[test]
    fn a_flat_spectrum_is_explained() {
        let w: Vec<f64> = (0..300).map(|i| 420.0 + i as f64).collect();
        let e = estimate(
            &w,
            &vec![0.3; 300],
            &w.iter().map(|w| 3.0 / w).collect::<Vec<_>>(),
            1.0,
            100.0,
            3,
        )
        .unwrap_err();
        assert!(e.contains("at least 2"), "{e}");
    }
}
