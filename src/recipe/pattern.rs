//! Site patterns: polar rings, square grids, custom lists and the named standard patterns.
//!
//! Numbering (stable, documented in docs/recipe.md): sites are numbered 1..N.
//! - polar and standard: the centre first (if any), then ring by ring from the inside out,
//!   each ring counter-clockwise from its start angle;
//! - grid: row by row from the top (largest y) down, left to right within a row;
//! - custom: the order of `sites_mm`.
//!
//! Ring sites that a flat or notch puts outside the usable area are moved inwards along their
//! radius onto its boundary, so a pattern keeps its site count; grid nodes outside are dropped;
//! custom sites outside are a validation error.

use super::geometry::Wafer;
use super::schema::PatternSpec;
use serde::Serialize;
use std::f64::consts::PI;

/// One measurement site in wafer coordinates.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Site {
    /// 1-based site number, stable for a given recipe.
    pub number: usize,
    pub x_mm: f64,
    pub y_mm: f64,
}

impl Site {
    /// Distance from the wafer centre, mm.
    pub fn radius(&self) -> f64 {
        self.x_mm.hypot(self.y_mm)
    }
}

/// Ring layout of a standard pattern: (centre site, sites per ring). Common practice, no source.
pub fn standard_rings(sites: u32) -> Option<&'static [u32]> {
    Some(match sites {
        1 => &[],
        5 => &[4],
        9 => &[8],
        13 => &[4, 8],
        17 => &[8, 8],
        25 => &[8, 16],
        49 => &[8, 16, 24],
        _ => return None,
    })
}

/// The standard site counts, for messages.
pub const STANDARD_COUNTS: [u32; 7] = [1, 5, 9, 13, 17, 25, 49];

/// Ring radii evenly spaced out to `outer`: ring i of n at outer·(i+1)/n.
pub fn even_radii(rings: usize, outer: f64) -> Vec<f64> {
    (0..rings)
        .map(|i| outer * (i + 1) as f64 / rings as f64)
        .collect()
}

/// The sites of a pattern on a wafer. Values are assumed validated; sites a grid puts outside
/// the usable area are dropped, listed sites are kept as given.
pub fn sites(pattern: &PatternSpec, wafer: &Wafer) -> Vec<Site> {
    let points = match pattern {
        PatternSpec::Polar {
            center,
            rings,
            radii_mm,
            start_angle_deg,
            stagger,
        } => {
            let radii = radii_mm
                .clone()
                .unwrap_or_else(|| even_radii(rings.len(), wafer.usable_radius()));
            polar_points(*center, rings, &radii, *start_angle_deg, *stagger)
        }
        PatternSpec::Standard { sites } => {
            let rings = standard_rings(*sites).unwrap_or(&[]);
            polar_points(
                true,
                rings,
                &even_radii(rings.len(), wafer.usable_radius()),
                0.0,
                false,
            )
        }
        PatternSpec::Grid {
            pitch_mm,
            offset_mm,
        } => grid_points(*pitch_mm, *offset_mm, wafer),
        PatternSpec::Custom { sites_mm } => sites_mm.iter().map(|p| (p[0], p[1])).collect(),
    };
    let points = match pattern {
        PatternSpec::Polar { .. } | PatternSpec::Standard { .. } => pull_inside(points, wafer),
        _ => points,
    };
    points
        .into_iter()
        .enumerate()
        .map(|(i, (x_mm, y_mm))| Site {
            number: i + 1,
            x_mm,
            y_mm,
        })
        .collect()
}

fn polar_points(
    center: bool,
    rings: &[u32],
    radii: &[f64],
    start_angle_deg: f64,
    stagger: bool,
) -> Vec<(f64, f64)> {
    let mut pts = Vec::new();
    if center {
        pts.push((0.0, 0.0));
    }
    for (i, (&n, &r)) in rings.iter().zip(radii).enumerate() {
        let step = 2.0 * PI / n.max(1) as f64;
        let shift = if stagger && i % 2 == 1 {
            0.5 * step
        } else {
            0.0
        };
        let start = start_angle_deg.to_radians() + shift;
        for j in 0..n {
            let a = start + step * j as f64;
            pts.push((clean(r * a.cos()), clean(r * a.sin())));
        }
    }
    pts
}

/// Moves points outside the usable area inwards along their radius onto its boundary.
fn pull_inside(points: Vec<(f64, f64)>, wafer: &Wafer) -> Vec<(f64, f64)> {
    points
        .into_iter()
        .map(|(x, y)| {
            if wafer.is_usable(x, y) {
                return (x, y);
            }
            // Aim 0.1 µm (1e-4 mm) inside the boundary so rounding the coordinates cannot push it out.
            let inside =
                |t: f64| wafer.edge_distance(x * t, y * t) >= wafer.edge_exclusion_mm + 1e-4;
            let (mut lo, mut hi) = (0.0, 1.0);
            for _ in 0..60 {
                let mid = 0.5 * (lo + hi);
                if inside(mid) {
                    lo = mid;
                } else {
                    hi = mid;
                }
            }
            (clean(x * lo), clean(y * lo))
        })
        .collect()
}

/// Rounds away floating-point dust so that printed coordinates read as the user expects.
fn clean(v: f64) -> f64 {
    let r = (v * 1e9).round() / 1e9;
    if r == 0.0 {
        0.0
    } else {
        r
    }
}

fn grid_points(pitch: f64, offset: [f64; 2], wafer: &Wafer) -> Vec<(f64, f64)> {
    if !(pitch > 0.0) {
        return Vec::new();
    }
    let r = wafer.radius();
    let kmax = (r / pitch).ceil() as i64 + 1;
    let mut pts = Vec::new();
    for j in (-kmax..=kmax).rev() {
        for i in -kmax..=kmax {
            let x = clean(offset[0] + i as f64 * pitch);
            let y = clean(offset[1] + j as f64 * pitch);
            if wafer.is_usable(x, y) {
                pts.push((x, y));
            }
        }
    }
    pts
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::recipe::geometry::test_wafer as wafer;
    use crate::recipe::schema::OrientationKind;

    #[test]
    fn standard_49_is_centre_plus_8_16_24_on_even_radii() {
        let w = wafer(200.0, 3.0, OrientationKind::None);
        let s = sites(&PatternSpec::Standard { sites: 49 }, &w);
        assert_eq!(s.len(), 49);
        assert_eq!((s[0].x_mm, s[0].y_mm), (0.0, 0.0));
        let radii = [97.0 / 3.0, 2.0 * 97.0 / 3.0, 97.0];
        let counts = [8, 16, 24];
        let mut k = 1;
        for (r, n) in radii.iter().zip(counts) {
            for _ in 0..n {
                assert!(
                    (s[k].radius() - r).abs() < 1e-6,
                    "site {} at r={}",
                    k + 1,
                    s[k].radius()
                );
                k += 1;
            }
        }
        assert!(s.iter().enumerate().all(|(i, x)| x.number == i + 1));
    }

    #[test]
    fn ring_sites_behind_a_flat_are_pulled_onto_the_usable_boundary() {
        // 150 mm, 5 mm exclusion: the outer ring (r = 70 mm) crosses the flat's usable limit at
        // y = −(69.27 − 5) = −64.27 mm; sites there move inwards along their radius.
        let w = wafer(150.0, 5.0, OrientationKind::Flat);
        let s = sites(&PatternSpec::Standard { sites: 49 }, &w);
        assert_eq!(s.len(), 49);
        for p in &s {
            assert!(
                w.is_usable(p.x_mm, p.y_mm),
                "{p:?} {}",
                w.edge_distance(p.x_mm, p.y_mm)
            );
        }
        let bottom = s
            .iter()
            .find(|p| p.x_mm.abs() < 1e-9 && p.y_mm < -60.0)
            .unwrap();
        let limit = w.flat_distance().unwrap() - 5.0;
        assert!((bottom.y_mm + limit).abs() < 1e-3, "{bottom:?}");
        // Sites away from the flat keep their radius.
        assert!(s
            .iter()
            .filter(|p| p.y_mm > 0.0 && p.radius() > 60.0)
            .all(|p| (p.radius() - 70.0).abs() < 1e-6));
    }

    #[test]
    fn every_standard_count_gives_that_many_sites() {
        let w = wafer(150.0, 3.0, OrientationKind::None);
        for n in STANDARD_COUNTS {
            assert_eq!(
                sites(&PatternSpec::Standard { sites: n }, &w).len(),
                n as usize
            );
        }
    }

    #[test]
    fn grid_is_numbered_top_row_first() {
        let w = wafer(100.0, 5.0, OrientationKind::None);
        let s = sites(
            &PatternSpec::Grid {
                pitch_mm: 20.0,
                offset_mm: [0.0, 0.0],
            },
            &w,
        );
        assert!(s
            .windows(2)
            .all(|p| p[0].y_mm > p[1].y_mm || (p[0].y_mm == p[1].y_mm && p[0].x_mm < p[1].x_mm)));
        // r ≤ 45: (0,±40), (±40,0), (±20,±20), (±20,±40)? 20²+40²=2000 ≤ 2025 yes → counted here.
        let want = (-2..=2)
            .flat_map(|i| (-2..=2).map(move |j| (i * 20, j * 20)))
            .filter(|(x, y)| x * x + y * y <= 45 * 45)
            .count();
        assert_eq!(s.len(), want);
    }
}
