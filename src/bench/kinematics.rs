//! Trapezoidal motion profile of one straight move from rest to rest. Pure.
//!
//! Accelerate at `a` up to the feed `v`, cruise, decelerate at `a`; a move too short to reach
//! the feed is a triangle peaking at √(a·d). Used for time estimates by the G-code state
//! machine and for the position of the virtual controller.

/// A move of length `distance_mm` at feed `speed_mm_s` with acceleration `accel_mm_s2`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Trapezoid {
    pub distance_mm: f64,
    pub speed_mm_s: f64,
    pub accel_mm_s2: f64,
}

impl Trapezoid {
    /// A profile from a feed in mm/min (G-code's unit).
    pub fn new(distance_mm: f64, feed_mm_min: f64, accel_mm_s2: f64) -> Trapezoid {
        Trapezoid {
            distance_mm: distance_mm.abs(),
            speed_mm_s: (feed_mm_min / 60.0).max(1e-9),
            accel_mm_s2: accel_mm_s2.max(1e-9),
        }
    }

    /// Peak speed and the time spent accelerating to it.
    fn peak(&self) -> (f64, f64) {
        let (d, v, a) = (self.distance_mm, self.speed_mm_s, self.accel_mm_s2);
        let vp = v.min((a * d).sqrt());
        (vp, vp / a)
    }

    /// Time the move takes, s.
    pub fn duration_s(&self) -> f64 {
        let (vp, ta) = self.peak();
        if vp <= 0.0 {
            return 0.0;
        }
        let cruise = (self.distance_mm - vp * ta) / vp;
        2.0 * ta + cruise.max(0.0)
    }

    /// Distance covered after `t` seconds, mm (clamped to the move).
    pub fn distance_at(&self, t: f64) -> f64 {
        let (vp, ta) = self.peak();
        let total = self.duration_s();
        let a = self.accel_mm_s2;
        if t <= 0.0 {
            0.0
        } else if t >= total {
            self.distance_mm
        } else if t < ta {
            0.5 * a * t * t
        } else if t <= total - ta {
            0.5 * vp * ta + vp * (t - ta)
        } else {
            let r = total - t;
            self.distance_mm - 0.5 * a * r * r
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn trapezoid_and_triangle_times() {
        // 100 mm at 50 mm/s, 500 mm/s²: 0.1 s ramps (2.5 mm each), 95 mm cruise 1.9 s → 2.1 s.
        let t = Trapezoid::new(100.0, 3000.0, 500.0);
        assert!((t.duration_s() - 2.1).abs() < 1e-12);
        assert!((t.distance_at(0.1) - 2.5).abs() < 1e-12);
        assert!((t.distance_at(2.0) - 97.5).abs() < 1e-12);
        // 1 mm never reaches 50 mm/s: peak √500 ≈ 22.4 mm/s, time 2·√(1/500) s.
        let s = Trapezoid::new(1.0, 3000.0, 500.0);
        assert!((s.duration_s() - 2.0 * (1.0f64 / 500.0).sqrt()).abs() < 1e-12);
        assert!((s.distance_at(s.duration_s() / 2.0) - 0.5).abs() < 1e-12);
    }
}
