//! What the sites can support on a page, decided before anything is drawn: a 2-D map or only
//! a profile along a line (sites that do not span the wafer), and structure or "flat within
//! noise" (a spread the sites' own fit σ explains).

use super::sites_table::SiteRow;

/// Sites lying in a band narrower than this share of the usable diameter (across their main
/// direction) are drawn as a profile along the line, not as a map invented between them.
pub const LINE_BAND_FRACTION: f64 = 0.25;

/// The line the sites lie along: a point on it and its unit direction (wafer mm).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SiteLine {
    /// The sites' centroid.
    pub centre: (f64, f64),
    /// Unit vector of the main direction, pointing to +x (or +y for a vertical line).
    pub dir: (f64, f64),
    /// Width of the band holding every site, across the line, mm.
    pub width_mm: f64,
}

impl SiteLine {
    /// Position of a point along the line, mm from where the line passes closest to the
    /// wafer centre (so a diameter reads −r … +r).
    pub fn position(&self, x: f64, y: f64) -> f64 {
        x * self.dir.0 + y * self.dir.1
    }

    /// The two positions where the line meets a circle of radius `r` about the wafer centre,
    /// `None` when it misses it.
    pub fn crossings(&self, r: f64) -> Option<(f64, f64)> {
        let normal = (-self.dir.1, self.dir.0);
        let off = self.centre.0 * normal.0 + self.centre.1 * normal.1;
        let h2 = r * r - off * off;
        (h2 > 0.0).then(|| (-h2.sqrt(), h2.sqrt()))
    }

    /// A readable name of the direction: `x`, `y` or the angle from +x in degrees.
    pub fn direction_name(&self) -> String {
        let deg = self.dir.1.atan2(self.dir.0).to_degrees();
        if deg.abs() < 0.5 {
            "x".into()
        } else if (deg - 90.0).abs() < 0.5 {
            "y".into()
        } else {
            format!("{deg:.0}° from x")
        }
    }
}

/// The line the sites lie along, when they do not span the wafer: every site within a band
/// narrower than [`LINE_BAND_FRACTION`] of `usable_diameter` about their principal axis
/// (the eigenvector of the 2 × 2 covariance of the positions with the larger eigenvalue).
/// One or two sites always lie on a line. `None` for no site or a pattern that spans.
pub fn site_line(points: &[(f64, f64)], usable_diameter: f64) -> Option<SiteLine> {
    let n = points.len() as f64;
    if points.is_empty() {
        return None;
    }
    let cx = points.iter().map(|p| p.0).sum::<f64>() / n;
    let cy = points.iter().map(|p| p.1).sum::<f64>() / n;
    let (mut sxx, mut syy, mut sxy) = (0.0, 0.0, 0.0);
    for &(x, y) in points {
        sxx += (x - cx) * (x - cx);
        syy += (y - cy) * (y - cy);
        sxy += (x - cx) * (y - cy);
    }
    // Principal-axis angle of a symmetric 2 × 2 matrix.
    let theta = 0.5 * (2.0 * sxy).atan2(sxx - syy);
    let mut dir = (theta.cos(), theta.sin());
    if dir.0 < -1e-9 || (dir.0.abs() <= 1e-9 && dir.1 < 0.0) {
        dir = (-dir.0, -dir.1);
    }
    let normal = (-dir.1, dir.0);
    let across = points
        .iter()
        .map(|&(x, y)| (x - cx) * normal.0 + (y - cy) * normal.1);
    let (lo, hi) = across.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
        (a.min(v), b.max(v))
    });
    let width_mm = hi - lo;
    (points.len() <= 2 || width_mm < LINE_BAND_FRACTION * usable_diameter).then_some(SiteLine {
        centre: (cx, cy),
        dir,
        width_mm,
    })
}

/// The measurement noise of a layer: the median fit σ of its valid sites (nm); `None` when no
/// valid site has a finite σ.
pub fn median_sigma(rows: &[SiteRow], layer: usize) -> Option<f64> {
    let mut s: Vec<f64> = rows
        .iter()
        .filter(|r| r.valid_value(layer).is_some())
        .filter_map(|r| r.sigma_nm.get(layer).copied())
        .filter(|v| v.is_finite() && *v > 0.0)
        .collect();
    if s.is_empty() {
        return None;
    }
    s.sort_by(f64::total_cmp);
    let m = s.len() / 2;
    Some(if s.len() % 2 == 1 {
        s[m]
    } else {
        0.5 * (s[m - 1] + s[m])
    })
}

/// Whether values of sites with noise σ each show no structure: their scatter about the mean,
/// Σ((v − mean)/σ)², does not exceed the 99th percentile of χ² with n − 1 degrees of freedom
/// (what pure noise would reach once in a hundred wafers). False for fewer than two values or
/// no usable σ.
pub fn flat_within_noise(values: &[f64], sigma: f64) -> bool {
    if values.len() < 2 || !(sigma.is_finite() && sigma > 0.0) {
        return false;
    }
    let n = values.len() as f64;
    let mean = values.iter().sum::<f64>() / n;
    let chi2: f64 = values.iter().map(|v| ((v - mean) / sigma).powi(2)).sum();
    chi2 <= chi2_quantile_99(values.len() - 1)
}

/// The 99th percentile of χ² with `k` degrees of freedom by the Wilson–Hilferty cube-root
/// approximation (Wilson & Hilferty, PNAS 17, 684, 1931): k·(1 − 2/(9k) + z·√(2/(9k)))³ with
/// z = 2.3263, the 99th percentile of the standard normal.
pub fn chi2_quantile_99(k: usize) -> f64 {
    let k = k.max(1) as f64;
    let a = 2.0 / (9.0 * k);
    k * (1.0 - a + 2.326_347_874 * a.sqrt()).powi(3)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn chi2_quantile_matches_the_table() {
        // χ²₀.₉₉ from the standard table (values checked with scipy.stats.chi2.ppf):
        // 1 dof 6.635, 10 dof 23.209, 48 dof 73.683; Wilson–Hilferty within 1 %.
        for (k, table) in [(1, 6.635), (10, 23.209), (48, 73.683)] {
            let q = chi2_quantile_99(k);
            assert!((q / table - 1.0).abs() < 0.01, "k={k}: {q} vs {table}");
        }
    }

    #[test]
    fn a_diameter_is_a_line_and_a_disc_pattern_is_not() {
        let diameter: Vec<(f64, f64)> = (-8..=8).map(|k| (0.0, 12.0 * k as f64)).collect();
        let line = site_line(&diameter, 194.0).expect("a diameter is a line");
        assert!(line.width_mm < 1e-9 && line.dir.0.abs() < 1e-9 && line.dir.1 > 0.0);
        assert_eq!(line.direction_name(), "y");
        assert_eq!(line.crossings(97.0), Some((-97.0, 97.0)));
        assert_eq!(line.position(0.0, -96.0), -96.0);
        // A slanted band 20 mm wide on a 200 mm wafer is still a line.
        let band: Vec<(f64, f64)> = (-5..=5)
            .flat_map(|k| {
                [
                    (k as f64 * 15.0, k as f64 * 15.0 + 10.0),
                    (k as f64 * 15.0 + 10.0, k as f64 * 15.0),
                ]
            })
            .collect();
        let l = site_line(&band, 194.0).expect("a narrow band");
        assert!((l.dir.0 - l.dir.1).abs() < 1e-9, "{l:?}");
        // Rings over the whole wafer span it.
        let rings: Vec<(f64, f64)> = (0..24)
            .map(|k| {
                let a = k as f64 * std::f64::consts::TAU / 24.0;
                (60.0 * a.cos(), 60.0 * a.sin())
            })
            .collect();
        assert!(site_line(&rings, 144.0).is_none());
        assert!(site_line(&[], 144.0).is_none());
        assert!(site_line(&[(3.0, 4.0)], 144.0).is_some());
    }

    #[test]
    fn noise_explains_a_tiny_range_but_not_a_dome() {
        // 49 sites spread ±0.03 nm with σ = 0.2 nm: flat. A 20 nm dome with σ = 0.2: not.
        let tiny: Vec<f64> = (0..49)
            .map(|k| 1000.0 + 0.06 * (k % 7) as f64 / 6.0 - 0.03)
            .collect();
        assert!(flat_within_noise(&tiny, 0.2));
        let dome: Vec<f64> = (0..49).map(|k| 1000.0 + 20.0 * (k as f64 / 48.0)).collect();
        assert!(!flat_within_noise(&dome, 0.2));
        // Just above what noise reaches: σ = 1 and a spread of ±2σ at every site.
        let wide: Vec<f64> = (0..40)
            .map(|k| if k % 2 == 0 { 2.0 } else { -2.0 })
            .collect();
        assert!(!flat_within_noise(&wide, 1.0));
        assert!(!flat_within_noise(&[1.0], 0.2));
        assert!(!flat_within_noise(&tiny, f64::NAN));
    }
}
