//! Circle through edge points: the algebraic least-squares fit of Kåsa (I. Kåsa, "A circle
//! fitting procedure and its error analysis", IEEE Trans. Instrum. Meas. IM-25 (1976) 8–14),
//! made robust to a flat or notch by residual rejection.
//!
//! Kåsa minimises Σ (x² + y² + D·x + E·y + F)², linear in (D, E, F); its known bias towards a
//! small radius matters only for points on a short arc, and edge rays span the whole rim. A
//! flat or a notch only ever removes material, so an edge point on one lies *inside* the true
//! circle. The rejection drops the point farthest inside, one at a time, while it lies inside
//! the fitted circle by more than `reject_mm` (the edge-location noise), and refits. The
//! bound is absolute on purpose: points on a flat pull the first fit towards them, which
//! spreads the residuals of the good points too, so a bound scaled by their spread (a MAD)
//! would keep the flat. At most a third of the points are dropped: more than that is not a
//! flat but a wafer that is not round where the fit looks.

use nalgebra::{Matrix3, Vector3};

/// A fitted circle and which points it kept.
#[derive(Debug, Clone, PartialEq)]
pub struct CircleFit {
    pub center: [f64; 2],
    pub radius: f64,
    /// Whether each input point was kept (false: rejected as a flat or notch).
    pub kept: Vec<bool>,
    /// Root-mean-square radial residual of the kept points, mm.
    pub rms: f64,
}

/// Fewest points a fit keeps: three define a circle, two more make a residual meaningful.
pub const MIN_POINTS: usize = 5;

/// The Kåsa circle through `points`, or `None` when they are fewer than three or collinear.
pub fn kasa(points: &[[f64; 2]]) -> Option<([f64; 2], f64)> {
    if points.len() < 3 {
        return None;
    }
    // Centred on the mean for conditioning (stage coordinates are ~100 mm from the origin).
    let n = points.len() as f64;
    let mx = points.iter().map(|p| p[0]).sum::<f64>() / n;
    let my = points.iter().map(|p| p[1]).sum::<f64>() / n;
    let mut ata = Matrix3::zeros();
    let mut atb = Vector3::zeros();
    for p in points {
        let (x, y) = (p[0] - mx, p[1] - my);
        let row = Vector3::new(x, y, 1.0);
        ata += row * row.transpose();
        atb += row * -(x * x + y * y);
    }
    let s = ata.lu().solve(&atb)?;
    let (cx, cy) = (-s[0] / 2.0, -s[1] / 2.0);
    let r2 = cx * cx + cy * cy - s[2];
    (r2 > 0.0 && r2.is_finite()).then(|| ([cx + mx, cy + my], r2.sqrt()))
}

/// Radial residual of a point: distance to the centre less the radius (negative inside).
fn residual(p: [f64; 2], center: [f64; 2], radius: f64) -> f64 {
    (p[0] - center[0]).hypot(p[1] - center[1]) - radius
}

/// The Kåsa circle of `points` with points inside it by more than `reject_mm` rejected one at
/// a time (see the module doc). `None` when fewer than [`MIN_POINTS`] points are given or they
/// define no circle.
pub fn robust(points: &[[f64; 2]], reject_mm: f64) -> Option<CircleFit> {
    let mut kept = vec![true; points.len()];
    let most_dropped = points.len() / 3;
    loop {
        let used: Vec<[f64; 2]> = points
            .iter()
            .zip(&kept)
            .filter(|(_, k)| **k)
            .map(|(p, _)| *p)
            .collect();
        if used.len() < MIN_POINTS {
            return None;
        }
        let (center, radius) = kasa(&used)?;
        let worst = points
            .iter()
            .enumerate()
            .filter(|(i, _)| kept[*i])
            .map(|(i, p)| (i, residual(*p, center, radius)))
            .min_by(|a, b| a.1.total_cmp(&b.1));
        let dropped = points.len() - used.len();
        match worst {
            Some((i, r)) if r < -reject_mm && dropped < most_dropped && used.len() > MIN_POINTS => {
                kept[i] = false
            }
            _ => {
                let res = used.iter().map(|p| residual(*p, center, radius).powi(2));
                let rms = (res.sum::<f64>() / used.len() as f64).sqrt();
                return Some(CircleFit {
                    center,
                    radius,
                    kept,
                    rms,
                });
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn on_circle(c: [f64; 2], r: f64, angles_deg: &[f64]) -> Vec<[f64; 2]> {
        angles_deg
            .iter()
            .map(|a| {
                let t = a.to_radians();
                [c[0] + r * t.cos(), c[1] + r * t.sin()]
            })
            .collect()
    }

    #[test]
    fn kasa_recovers_an_exact_circle() {
        let pts = on_circle([101.3, 98.2], 75.0, &[0.0, 50.0, 120.0, 200.0, 290.0]);
        let (c, r) = kasa(&pts).unwrap();
        assert!(
            (c[0] - 101.3).abs() < 1e-9 && (c[1] - 98.2).abs() < 1e-9,
            "{c:?}"
        );
        assert!((r - 75.0).abs() < 1e-9);
    }

    #[test]
    fn collinear_or_too_few_points_give_no_circle() {
        assert!(kasa(&[[0.0, 0.0], [1.0, 1.0]]).is_none());
        assert!(kasa(&[[0.0, 0.0], [1.0, 1.0], [2.0, 2.0], [3.0, 3.0]]).is_none());
    }

    #[test]
    fn points_on_a_flat_are_rejected_and_the_circle_recovered() {
        // 16 rays on a 150 mm wafer; two hit a flat 69.3 mm from the centre (SEMI-like).
        let c = [102.0, 97.5];
        let angles: Vec<f64> = (0..16).map(|k| 11.25 + 22.5 * k as f64).collect();
        let mut pts = on_circle(c, 75.0, &angles);
        for (k, a) in angles.iter().enumerate() {
            let d = (a - 270.0).to_radians();
            if d.cos() > 69.3 / 75.0 {
                let r = 69.3 / d.cos();
                pts[k] = [
                    c[0] + r * a.to_radians().cos(),
                    c[1] + r * a.to_radians().sin(),
                ];
            }
        }
        let fit = robust(&pts, 0.02).unwrap();
        assert_eq!(
            fit.kept.iter().filter(|k| !**k).count(),
            2,
            "{:?}",
            fit.kept
        );
        assert!((fit.center[0] - c[0]).abs() < 1e-6 && (fit.center[1] - c[1]).abs() < 1e-6);
        assert!((fit.radius - 75.0).abs() < 1e-6);
        // The plain fit is pulled towards the flat by far more than the tolerance.
        let (plain, _) = kasa(&pts).unwrap();
        assert!((plain[1] - c[1]).abs() > 0.3, "{plain:?}");
    }
}
