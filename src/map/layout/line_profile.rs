//! The profile along the line, for sites that do not span the wafer: each valid site's value
//! against its position along the line, joined in order of position, with the edge exclusion
//! where the line meets it. Nothing is invented between or beside the sites.

use super::profile_column::profile_frame;
use super::MUTED;
use crate::map::colour::Rgb;
use crate::map::evidence::SiteLine;
use crate::map::render::MapInput;
use crate::map::scene::{Scene, Stroke};
use crate::map::xy_plot::{padded_range, Axis, Ticks};

/// Draws `sites` (x mm, y mm, value, dot colour) along `line` in `frame`.
pub(super) fn line_plot(
    scene: &mut Scene,
    input: &MapInput,
    line: &SiteLine,
    sites: &[(f64, f64, f64, Rgb)],
    frame: (f64, f64, f64, f64),
) {
    let (lo, hi) = padded_range(sites.iter().map(|p| p.2), 0.08, 0.5).unwrap_or((0.0, 1.0));
    let r = input.wafer.radius();
    let plot = profile_frame(
        frame,
        Axis {
            lo: -r,
            hi: r,
            title: format!("position along {} (mm)", line.direction_name()),
            ticks: Ticks::Round(6),
        },
        Axis {
            lo,
            hi,
            title: format!("{} ({})", input.quantity, input.unit),
            ticks: Ticks::Round(5),
        },
    );
    plot.axes(scene);
    if let Some((a, b)) = line.crossings(input.wafer.usable_radius()) {
        let dashed = Stroke {
            colour: MUTED,
            width: 1.0,
            dash: Some((4.0, 3.0)),
        };
        plot.vline(scene, a, dashed, "edge-exclusion");
        plot.vline(scene, b, dashed, "edge-exclusion");
    }
    let mut along: Vec<(f64, f64, Rgb)> = sites
        .iter()
        .map(|&(x, y, v, c)| (line.position(x, y), v, c))
        .collect();
    along.sort_by(|a, b| a.0.total_cmp(&b.0));
    let path: Vec<(f64, f64)> = along.iter().map(|p| (p.0, p.1)).collect();
    plot.line(scene, &path, Stroke::solid(MUTED, 1.2), "line-profile");
    for (x, v, c) in along {
        plot.dots(scene, &[(x, v)], 4.0, super::INK, "line-profile-point");
        plot.dots(scene, &[(x, v)], 3.0, c, "line-profile-point");
    }
}
