//! Wafer geometry: diameter, flat or notch, edge exclusion, the usable disc.
//!
//! Wafer frame: origin at the wafer centre, x to the right, y up, millimetres, angles counter-
//! clockwise from +x. A flat is a chord whose midpoint sits at `orientation_angle_deg`; a notch
//! is a small V cut at the rim at that angle.

use super::schema::{OrientationKind, WaferSpec};
use std::f64::consts::PI;

/// Depth of a notch from the rim, mm (SEMI M1 notch is about 1 mm deep; from memory).
pub const NOTCH_DEPTH_MM: f64 = 1.0;
/// Half-opening angle of the notch V, degrees (90° included angle; from memory).
pub const NOTCH_HALF_ANGLE_DEG: f64 = 45.0;

/// Standard diameters by name, mm (common practice).
pub const STANDARD_DIAMETERS_MM: [(f64, &str); 5] = [
    (100.0, "100 mm (4 in)"),
    (125.0, "125 mm (5 in)"),
    (150.0, "150 mm (6 in)"),
    (200.0, "200 mm (8 in)"),
    (300.0, "300 mm (12 in)"),
];

/// The orientation mark on the rim.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Orientation {
    /// A primary flat: chord of the given length.
    Flat {
        length_mm: f64,
        angle_deg: f64,
    },
    /// A V notch at the rim.
    Notch {
        angle_deg: f64,
    },
    None,
}

/// A wafer with its orientation mark and edge exclusion.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Wafer {
    pub diameter_mm: f64,
    pub edge_exclusion_mm: f64,
    pub orientation: Orientation,
}

/// Primary flat length for a diameter, mm. SEMI M1 values for 100, 125 and 150 mm (from
/// memory: 32.5, 42.5, 57.5 mm); other diameters scale 150 mm's ratio.
pub fn primary_flat_length_mm(diameter_mm: f64) -> f64 {
    const TABLE: [(f64, f64); 3] = [(100.0, 32.5), (125.0, 42.5), (150.0, 57.5)];
    TABLE
        .iter()
        .find(|(d, _)| (d - diameter_mm).abs() < 0.5)
        .map(|&(_, l)| l)
        .unwrap_or(diameter_mm * 57.5 / 150.0)
}

/// The name of a standard diameter, if this is one.
pub fn standard_name(diameter_mm: f64) -> Option<&'static str> {
    STANDARD_DIAMETERS_MM
        .iter()
        .find(|(d, _)| (d - diameter_mm).abs() < 0.5)
        .map(|&(_, n)| n)
}

impl Wafer {
    /// Geometry from the recipe's `[wafer]` section (values assumed validated).
    pub fn from_spec(spec: &WaferSpec) -> Wafer {
        let angle_deg = spec.orientation_angle_deg;
        let orientation = match spec.orientation {
            OrientationKind::Flat => Orientation::Flat {
                length_mm: primary_flat_length_mm(spec.diameter_mm),
                angle_deg,
            },
            OrientationKind::Notch => Orientation::Notch { angle_deg },
            OrientationKind::None => Orientation::None,
        };
        Wafer {
            diameter_mm: spec.diameter_mm,
            edge_exclusion_mm: spec.edge_exclusion_mm,
            orientation,
        }
    }

    /// Radius of the wafer, mm.
    pub fn radius(&self) -> f64 {
        self.diameter_mm / 2.0
    }

    /// Radius of the usable disc (radius less the edge exclusion), mm.
    pub fn usable_radius(&self) -> f64 {
        self.radius() - self.edge_exclusion_mm
    }

    /// Distance from the centre to the flat chord, mm (`None` without a flat).
    pub fn flat_distance(&self) -> Option<f64> {
        match self.orientation {
            Orientation::Flat { length_mm, .. } => {
                let r = self.radius();
                Some((r * r - (length_mm / 2.0).powi(2)).max(0.0).sqrt())
            }
            _ => None,
        }
    }

    /// Unit vector towards the orientation mark.
    fn mark_direction(&self) -> Option<(f64, f64)> {
        match self.orientation {
            Orientation::Flat { angle_deg, .. } | Orientation::Notch { angle_deg } => {
                let a = angle_deg.to_radians();
                Some((a.cos(), a.sin()))
            }
            Orientation::None => None,
        }
    }

    /// Distance from (x, y) inwards to the wafer's physical edge, mm; negative outside.
    pub fn edge_distance(&self, x: f64, y: f64) -> f64 {
        let mut d = self.radius() - (x * x + y * y).sqrt();
        if let (Some(h), Some((ux, uy))) = (self.flat_distance(), self.mark_direction()) {
            d = d.min(h - (x * ux + y * uy));
        }
        if let (Orientation::Notch { .. }, Some((ux, uy))) =
            (self.orientation, self.mark_direction())
        {
            d = d.min(self.notch_distance(x, y, ux, uy));
        }
        d
    }

    /// Signed distance to the notch V (positive outside the cut), a wedge whose tip sits
    /// `NOTCH_DEPTH_MM` inside the rim.
    fn notch_distance(&self, x: f64, y: f64, ux: f64, uy: f64) -> f64 {
        let tip = self.radius() - NOTCH_DEPTH_MM;
        // Coordinates along the mark (u) and across it (v), relative to the tip.
        let u = x * ux + y * uy - tip;
        let v = -x * uy + y * ux;
        let half = NOTCH_HALF_ANGLE_DEG.to_radians();
        // Side ray from the tip along (cos h, sin h) in (u, |v|); behind the tip the nearest
        // point of the wedge is the tip itself.
        let (s, c) = half.sin_cos();
        if u * c + v.abs() * s < 0.0 {
            u.hypot(v)
        } else {
            c * v.abs() - s * u
        }
    }

    /// Whether (x, y) is on the wafer (inside the rim, behind no flat or notch).
    pub fn contains(&self, x: f64, y: f64) -> bool {
        self.edge_distance(x, y) >= 0.0
    }

    /// Whether (x, y) lies in the usable area: at least the edge exclusion inside every edge,
    /// the flat and notch included (to within a micrometre, so computed rim sites count).
    pub fn is_usable(&self, x: f64, y: f64) -> bool {
        self.edge_distance(x, y) >= self.edge_exclusion_mm - 1e-6
    }

    /// How far (x, y) lies outside the usable area, mm (0 when inside).
    pub fn outside_usable_by(&self, x: f64, y: f64) -> f64 {
        (self.edge_exclusion_mm - self.edge_distance(x, y)).max(0.0)
    }

    /// The wafer outline as a closed polygon (first point not repeated), counter-clockwise,
    /// with the flat or notch cut in; `n` points on the full circle.
    pub fn outline(&self, n: usize) -> Vec<(f64, f64)> {
        self.offset_outline(0.0, n)
    }

    /// The boundary of the usable area (outline moved inwards by the edge exclusion).
    pub fn usable_outline(&self, n: usize) -> Vec<(f64, f64)> {
        self.offset_outline(self.edge_exclusion_mm, n)
    }

    /// The outline moved inwards by `inset` mm: rays from the centre, each cut where
    /// `edge_distance == inset` (found by bisection, exact enough for drawing).
    fn offset_outline(&self, inset: f64, n: usize) -> Vec<(f64, f64)> {
        let n = n.max(16);
        let r = self.radius();
        (0..n)
            .map(|i| {
                let a = 2.0 * PI * i as f64 / n as f64;
                let (s, c) = a.sin_cos();
                let (mut lo, mut hi) = (0.0, r);
                for _ in 0..50 {
                    let mid = 0.5 * (lo + hi);
                    if self.edge_distance(mid * c, mid * s) >= inset {
                        lo = mid;
                    } else {
                        hi = mid;
                    }
                }
                (lo * c, lo * s)
            })
            .collect()
    }
}

/// A wafer with its mark at 270°, for tests.
#[cfg(test)]
pub(crate) fn test_wafer(d: f64, e: f64, o: OrientationKind) -> Wafer {
    Wafer::from_spec(&WaferSpec {
        diameter_mm: d,
        edge_exclusion_mm: e,
        orientation: o,
        orientation_angle_deg: 270.0,
    })
}

#[cfg(test)]
mod tests {
    use super::test_wafer as wafer;
    use super::*;

    #[test]
    fn flat_length_follows_semi_m1_for_150_mm() {
        // SEMI M1 primary flat, 150 mm wafer: 57.5 mm (from memory).
        assert_eq!(primary_flat_length_mm(150.0), 57.5);
        let w = wafer(150.0, 3.0, OrientationKind::Flat);
        // Chord distance from centre: sqrt(75² − 28.75²) = 69.27 mm (computed here).
        let h = w.flat_distance().unwrap();
        assert!((h - (75.0f64.powi(2) - 28.75f64.powi(2)).sqrt()).abs() < 1e-12);
        // A point just below the flat (at 270°) is off the wafer, one just above is on it.
        assert!(!w.contains(0.0, -(h + 0.1)));
        assert!(w.contains(0.0, -(h - 0.1)));
        // Usable area keeps 3 mm from the flat.
        assert!(!w.is_usable(0.0, -(h - 2.9)));
        assert!(w.is_usable(0.0, -(h - 3.1)));
        // Away from the flat the rim counts.
        assert!(w.is_usable(71.9, 0.0) && !w.is_usable(72.1, 0.0));
    }

    #[test]
    fn notch_cuts_only_near_its_angle() {
        let w = wafer(200.0, 0.0, OrientationKind::Notch);
        assert!(!w.contains(0.0, -99.5));
        assert!(w.contains(0.0, -98.9));
        assert!(w.contains(5.0, -99.8));
        assert!(w.contains(0.0, 99.9));
    }

    #[test]
    fn outline_lies_on_the_edge() {
        let w = wafer(150.0, 5.0, OrientationKind::Flat);
        for (x, y) in w.outline(360) {
            assert!(w.edge_distance(x, y).abs() < 1e-6);
        }
        for (x, y) in w.usable_outline(360) {
            assert!((w.edge_distance(x, y) - 5.0).abs() < 1e-6);
        }
    }
}
