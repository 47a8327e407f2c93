//! Edge crossings along rays from the nominal centre, and the bisection that locates a
//! crossing between a point on the wafer and a point off it (shared with the rim scan).

use super::{CentringError, CentringSettings, Counting};
use std::f64::consts::PI;

/// The on-wafer signal and the relative change that means "off the wafer".
pub(super) struct Levels {
    pub inside: f64,
    pub contrast: f64,
}

impl Levels {
    /// Whether a reading lies off the wafer.
    pub fn off(&self, s: f64) -> bool {
        !((s / self.inside - 1.0).abs() <= self.contrast)
    }
}

/// A segment of a path (a ray, an arc) known to cross the edge: the parameter of a point on
/// the wafer, of a point off it, and the signal read off it.
pub(super) struct Bracket {
    pub on: f64,
    pub off: f64,
    pub off_level: f64,
}

/// Bisects `b` along `point(t)` until |on − off| ≤ `tol`; the crossing's parameter, or `None`
/// when a midpoint cannot be reached. Each midpoint is judged against the level half-way
/// between the on-wafer and off-wafer signals (the half-intensity edge of a blurred spot).
pub(super) async fn bisect(
    probe: &mut Counting<'_>,
    point: &(dyn Fn(f64) -> [f64; 2] + Sync),
    mut b: Bracket,
    inside: f64,
    tol: f64,
) -> Result<Option<f64>, CentringError> {
    let half = (b.off_level - inside).abs() / 2.0;
    while (b.on - b.off).abs() > tol {
        let mid = (b.on + b.off) / 2.0;
        match probe.signal(point(mid)).await? {
            None => return Ok(None),
            Some(s) if (s - inside).abs() > half => b.off = mid,
            Some(_) => b.on = mid,
        }
    }
    Ok(Some((b.on + b.off) / 2.0))
}

/// The edge crossing of every ray (`None`: a soft limit or no edge within the search).
pub(super) async fn edges(
    probe: &mut Counting<'_>,
    c0: [f64; 2],
    radius: f64,
    levels: &Levels,
    settings: &CentringSettings,
) -> Result<Vec<Option<[f64; 2]>>, CentringError> {
    let mut out = Vec::with_capacity(settings.rays);
    for k in 0..settings.rays {
        // Half a pitch off the axes: a square travel box clips axis rays first.
        let theta = 2.0 * PI * (k as f64 + 0.5) / settings.rays as f64;
        let dir = (theta.cos(), theta.sin());
        let point = move |r: f64| [c0[0] + r * dir.0, c0[1] + r * dir.1];
        let crossing = match bracket(probe, &point, radius, levels, settings).await? {
            Some(b) => bisect(probe, &point, b, levels.inside, settings.resolution_mm).await?,
            None => None,
        };
        if crossing.is_none() {
            tracing::info!(
                ray = k,
                angle_deg = theta.to_degrees(),
                "no edge found on this ray"
            );
        }
        out.push(crossing.map(point));
    }
    Ok(out)
}

/// Steps along a ray from `radius − search_mm`: outward while on the wafer, inward while off
/// (a flat), until the signal changes side; `None` past the search or at a soft limit.
async fn bracket(
    probe: &mut Counting<'_>,
    point: &(dyn Fn(f64) -> [f64; 2] + Sync),
    radius: f64,
    levels: &Levels,
    settings: &CentringSettings,
) -> Result<Option<Bracket>, CentringError> {
    let step = settings.step_mm;
    let start = radius - settings.search_mm;
    let Some(first) = probe.signal(point(start)).await? else {
        return Ok(None);
    };
    let outward = !levels.off(first);
    let (mut r, mut level) = (start, first);
    loop {
        let next = if outward { r + step } else { r - step };
        if next > radius + settings.search_mm || next < radius / 2.0 {
            return Ok(None);
        }
        let Some(s) = probe.signal(point(next)).await? else {
            return Ok(None);
        };
        match (outward, levels.off(s)) {
            (true, true) => {
                return Ok(Some(Bracket {
                    on: r,
                    off: next,
                    off_level: s,
                }))
            }
            (false, false) => {
                return Ok(Some(Bracket {
                    on: next,
                    off: r,
                    off_level: level,
                }))
            }
            _ => (r, level) = (next, s),
        }
    }
}
