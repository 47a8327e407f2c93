//! The radial profile of the map page: every valid site's value against its distance from
//! the centre, the edge-exclusion radius, and the even-polynomial radial fit.

use super::{fmt, value_decimals, INK, MUTED, PANEL};
use crate::map::colour;
use crate::map::render::MapInput;
use crate::map::scene::{Scene, Stroke};
use crate::map::stats::LayerSummary;
use crate::map::xy_plot::{padded_range, Axis, Ticks, XyPlot};

/// Draws the profile of `sites` (x mm, y mm, value) with the fit of `s`.
pub(super) fn radial_plot(
    scene: &mut Scene,
    input: &MapInput,
    s: &LayerSummary,
    sites: &[(f64, f64, f64)],
) {
    let (top, bottom) = (420.0, 680.0);
    scene.heading(PANEL.0, top - 22.0, "Radial profile", INK);
    let r_max = input.wafer.radius();
    let (lo, hi) = padded_range(sites.iter().map(|p| p.2), 0.08, 0.5).unwrap_or((0.0, 1.0));
    let plot = XyPlot {
        left: PANEL.0 + 46.0,
        top,
        right: PANEL.1 - 6.0,
        bottom,
        x: Axis {
            lo: 0.0,
            hi: r_max,
            title: "radius (mm)".into(),
            ticks: Ticks::Round(5),
        },
        y: Axis {
            lo,
            hi,
            title: format!("{} ({})", input.quantity, input.unit),
            ticks: Ticks::Round(5),
        },
        y_title_x: PANEL.0 + 4.0,
        style: super::PAGE_PLOT,
    };
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
    if let Some(fit) = &s.radial {
        let curve: Vec<(f64, f64)> = (0..=80)
            .map(|k| {
                let r = ru * k as f64 / 80.0;
                (r, fit.eval(r))
            })
            .collect();
        plot.line(
            scene,
            &curve,
            Stroke::solid(colour::scale(0.15), 2.0),
            "radial-fit",
        );
        let terms =
            ["c₀", "c₀ + c₂ρ²", "c₀ + c₂ρ² + c₄ρ⁴"][fit.coefficients_nm.len().clamp(1, 3) - 1];
        scene.text(
            PANEL.0,
            bottom + 56.0,
            format!(
                "fit {terms}, ρ = r/{} mm; rms residual {} {}",
                fmt(fit.r_norm_mm, 1),
                fmt(fit.rms_residual_nm, value_decimals(fit.rms_residual_nm)),
                input.unit
            ),
            10.5,
            crate::map::scene::Anchor::Start,
            MUTED,
            "radial-fit-text",
        );
    }
    let dot_r = if sites.len() > 400 { 1.2 } else { 2.4 };
    let points: Vec<(f64, f64)> = sites.iter().map(|&(x, y, v)| (x.hypot(y), v)).collect();
    plot.dots(scene, &points, dot_r, colour::scale(0.55), "radial-point");
}
