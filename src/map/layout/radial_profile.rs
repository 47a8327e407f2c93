//! The radial profile: every valid site's value against its distance from the centre, the
//! edge-exclusion radius, and the even-polynomial radial fit.

use super::profile_column::profile_frame;
use super::{INK, MUTED};
use crate::map::colour;
use crate::map::render::MapInput;
use crate::map::scene::Stroke;
use crate::map::stats::LayerSummary;
use crate::map::xy_plot::{padded_range, Axis, Ticks};

/// Draws the profile of `sites` (x mm, y mm, value) with the fit of `s` in `frame`
/// (left, top, right, bottom px); the fitted curve only when `with_fit` (not for a flat map,
/// where it would be structure invented from noise).
pub(super) fn radial_plot(
    scene: &mut crate::map::scene::Scene,
    input: &MapInput,
    s: &LayerSummary,
    sites: &[(f64, f64, f64)],
    frame: (f64, f64, f64, f64),
    with_fit: bool,
) {
    let (lo, hi) = padded_range(sites.iter().map(|p| p.2), 0.08, 0.5).unwrap_or((0.0, 1.0));
    let plot = profile_frame(
        frame,
        Axis {
            lo: 0.0,
            hi: input.wafer.radius(),
            title: "radius (mm)".into(),
            ticks: Ticks::Round(5),
        },
        Axis {
            lo,
            hi,
            title: format!("{} ({})", input.quantity, input.unit),
            ticks: Ticks::Round(5),
        },
    );
    plot.axes(scene);
    let ru = input.wafer.usable_radius();
    plot.vline(
        scene,
        ru,
        Stroke {
            colour: MUTED,
            width: 1.0,
            dash: Some((4.0, 3.0)),
        },
        "edge-exclusion",
    );
    if let Some(fit) = s.radial.as_ref().filter(|_| with_fit) {
        let curve: Vec<(f64, f64)> = (0..=80)
            .map(|k| {
                let r = ru * k as f64 / 80.0;
                (r, fit.eval(r))
            })
            .collect();
        plot.line(scene, &curve, Stroke::solid(INK, 1.6), "radial-fit");
    }
    let dot_r = if sites.len() > 400 { 1.2 } else { 2.6 };
    let points: Vec<(f64, f64)> = sites.iter().map(|&(x, y, v)| (x.hypot(y), v)).collect();
    plot.dots(scene, &points, dot_r, colour::scale(0.25), "radial-point");
}
