//! The flat or notch angle from a scan along the rim, just inside the fitted circle.
//!
//! The scan radius is the fitted radius less half the notch depth, so both a notch and a flat
//! cut it. The coarse angular step puts at least three readings inside the mark; the two ends
//! of the longest stretch off the wafer are bisected in angle, and the mark lies half-way
//! between them (symmetric marks, as SEMI-style flats and notches are).

use super::circle::CircleFit;
use super::rays::{bisect, Bracket, Levels};
use super::{CentringError, CentringSettings, Counting};
use crate::recipe::geometry::{Orientation, Wafer, NOTCH_DEPTH_MM, NOTCH_HALF_ANGLE_DEG};

/// The stage-frame angle of the wafer's flat or notch, degrees, searched within
/// `settings.rotation_search_deg` of `expected_deg`.
pub(super) async fn mark_angle(
    probe: &mut Counting<'_>,
    fit: &CircleFit,
    wafer: &Wafer,
    expected_deg: f64,
    levels: &Levels,
    settings: &CentringSettings,
) -> Result<f64, CentringError> {
    let depth = NOTCH_DEPTH_MM / 2.0;
    let r = fit.radius - depth;
    let (half_deg, mark) = match wafer.orientation {
        Orientation::Flat { .. } => {
            let h = wafer.flat_distance().unwrap_or(0.0) * fit.radius / wafer.radius();
            ((h / r).clamp(-1.0, 1.0).acos().to_degrees(), "flat")
        }
        _ => {
            let w = (NOTCH_DEPTH_MM - depth) * NOTCH_HALF_ANGLE_DEG.to_radians().tan();
            ((w / r).to_degrees(), "notch")
        }
    };
    let step = (half_deg * 2.0 / 3.0).min(2.0);
    let window = settings.rotation_search_deg + half_deg + step;
    let n = (2.0 * window / step).ceil() as usize + 1;
    let c = fit.center;
    let point = move |a_deg: f64| {
        let t = a_deg.to_radians();
        [c[0] + r * t.cos(), c[1] + r * t.sin()]
    };
    let angle = |i: usize| expected_deg - window + step * i as f64;
    let mut off = Vec::with_capacity(n);
    for i in 0..n {
        off.push(match probe.signal(point(angle(i))).await? {
            Some(s) if levels.off(s) => Some(s),
            _ => None,
        });
    }
    let not_found = |hint| CentringError::NoMark {
        mark,
        expected_deg,
        window_deg: window,
        hint,
    };
    let (first, last) = longest_run(&off).ok_or_else(|| not_found(""))?;
    if first == 0 || last == n - 1 {
        return Err(not_found(
            ", or allow a larger turn (the mark runs past the end of the scan)",
        ));
    }
    let tol = (settings.resolution_mm / r).to_degrees();
    let mut ends = [0.0; 2];
    for (end, (on, o)) in ends.iter_mut().zip([(first - 1, first), (last + 1, last)]) {
        let b = Bracket {
            on: angle(on),
            off: angle(o),
            off_level: off[o].unwrap_or(levels.inside),
        };
        *end = bisect(probe, &point, b, levels.inside, tol)
            .await?
            .ok_or_else(|| not_found(": a point of the rim scan lies outside the soft limits"))?;
    }
    Ok((ends[0] + ends[1]) / 2.0)
}

/// First and last index of the longest stretch of `Some`.
fn longest_run<T>(v: &[Option<T>]) -> Option<(usize, usize)> {
    let mut best: Option<(usize, usize)> = None;
    let mut start = None;
    for i in 0..=v.len() {
        match (v.get(i).is_some_and(|x| x.is_some()), start) {
            (true, None) => start = Some(i),
            (false, Some(s)) => {
                if best.is_none_or(|(a, b)| i - s > b + 1 - a) {
                    best = Some((s, i - 1));
                }
                start = None;
            }
            _ => {}
        }
    }
    best
}

#[cfg(test)]
mod tests {
    #[test]
    fn longest_run_picks_the_longest_stretch() {
        let v = [None, Some(1), None, Some(1), Some(1), None];
        assert_eq!(super::longest_run(&v), Some((3, 4)));
        assert_eq!(super::longest_run::<u8>(&[None, None]), None);
        assert_eq!(super::longest_run(&[Some(1)]), Some((0, 0)));
    }
}
