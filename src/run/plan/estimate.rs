//! How long a plan takes at least: trapezoidal moves along every commanded leg, plus settle
//! and integration × averages at each site.

/// Lower bound of a map's duration, s: a trapezoidal move (feed, acceleration) along every leg
/// from `start` through `waypoints`, plus `per_site_s` (settle + integration × averages) for
/// each of `sites` sites.
pub fn duration_lower_bound_s(
    start: [f64; 2],
    waypoints: &[[f64; 2]],
    feed_mm_min: f64,
    accel_mm_s2: f64,
    sites: usize,
    per_site_s: f64,
) -> f64 {
    let mut here = start;
    let mut total = sites as f64 * per_site_s;
    for p in waypoints {
        let d = (p[0] - here[0]).hypot(p[1] - here[1]);
        total += crate::bench::kinematics::Trapezoid::new(d, feed_mm_min, accel_mm_s2).duration_s();
        here = *p;
    }
    total
}
