//! Wafer → stage transform: how the wafer sits on the chuck.
//!
//! A wafer point (wafer frame, DESIGN.md: origin at the centre, x right, y up) is mirrored
//! first (`flip_x` negates x, `flip_y` negates y), then rotated by `rotation_deg`
//! counter-clockwise, then shifted by `center_mm`, the wafer centre in stage coordinates.

use super::machine::ChuckSpec;

/// A rigid placement of the wafer frame in the stage frame (with optional mirroring).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ChuckTransform {
    pub center_mm: [f64; 2],
    pub rotation_deg: f64,
    pub flip_x: bool,
    pub flip_y: bool,
}

impl ChuckTransform {
    /// The transform a machine file's `[chuck]` section describes.
    pub fn from_spec(c: &ChuckSpec) -> ChuckTransform {
        ChuckTransform {
            center_mm: c.center_mm,
            rotation_deg: c.rotation_deg,
            flip_x: c.flip_x,
            flip_y: c.flip_y,
        }
    }

    fn signs(&self) -> (f64, f64) {
        (
            if self.flip_x { -1.0 } else { 1.0 },
            if self.flip_y { -1.0 } else { 1.0 },
        )
    }

    /// Stage coordinates of a wafer point, mm.
    pub fn to_stage(&self, x_mm: f64, y_mm: f64) -> [f64; 2] {
        let (fx, fy) = self.signs();
        let (s, c) = self.rotation_deg.to_radians().sin_cos();
        let (x, y) = (fx * x_mm, fy * y_mm);
        [
            self.center_mm[0] + c * x - s * y,
            self.center_mm[1] + s * x + c * y,
        ]
    }

    /// Wafer coordinates of a stage point, mm (the inverse of [`Self::to_stage`]).
    pub fn to_wafer(&self, x_mm: f64, y_mm: f64) -> [f64; 2] {
        let (fx, fy) = self.signs();
        let (s, c) = self.rotation_deg.to_radians().sin_cos();
        let (dx, dy) = (x_mm - self.center_mm[0], y_mm - self.center_mm[1]);
        [fx * (c * dx + s * dy), fy * (-s * dx + c * dy)]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quarter_turn_with_flip_maps_axes_as_documented() {
        let t = ChuckTransform {
            center_mm: [100.0, 50.0],
            rotation_deg: 90.0,
            flip_x: true,
            flip_y: false,
        };
        // (10, 0) → mirrored (−10, 0) → rotated 90° CCW (0, −10) → shifted (100, 40).
        let p = t.to_stage(10.0, 0.0);
        assert!(
            (p[0] - 100.0).abs() < 1e-12 && (p[1] - 40.0).abs() < 1e-12,
            "{p:?}"
        );
        let w = t.to_wafer(p[0], p[1]);
        assert!((w[0] - 10.0).abs() < 1e-12 && w[1].abs() < 1e-12);
    }
}
