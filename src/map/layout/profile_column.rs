//! The left column of the map page: the profile (radial, or along the line for sites that do
//! not span the wafer) and the notes under it: the radial fit, the excluded sites with their
//! flags (spelled as in `sites.csv`) and the out-of-spec sites, wrapped to the column and
//! ended with "and N more" when they do not fit.

use super::line_profile::line_plot;
use super::radial_profile::radial_plot;
use super::{
    fmt, value_decimals, wrap_list, wrap_words, PageFacts, COLUMN, EXCLUDED, INK, MAP_TOP, MUTED,
    OUT_OF_SPEC, PAGE_PLOT,
};
use crate::map::render::MapInput;
use crate::map::scene::{Anchor, Scene};
use crate::map::stats::LayerSummary;
use crate::map::xy_plot::{Axis, XyPlot};

/// Top and bottom of the plot frame, px.
const PLOT: (f64, f64) = (MAP_TOP + 34.0, 476.0);
/// Lowest baseline the notes may use, px.
const NOTES_END: f64 = 748.0;
const NOTE_SIZE: f64 = 11.5;
const NOTE_LEADING: f64 = 15.0;

/// An XY plot in the column, its left edge moved right of the widest y tick label so the
/// vertical axis title never overlaps them.
pub(super) fn profile_frame(frame: (f64, f64, f64, f64), x: Axis, y: Axis) -> XyPlot {
    let (left, top, right, bottom) = frame;
    let mut plot = XyPlot {
        left,
        top,
        right,
        bottom,
        x,
        y,
        y_title_x: COLUMN.0 + 0.76 * PAGE_PLOT.title_size,
        style: PAGE_PLOT,
    };
    let room = plot.y_title_x + 0.24 * PAGE_PLOT.title_size + 3.0 + plot.y_label_width() + 6.0;
    plot.left = plot.left.max(room);
    plot
}

/// Draws the column.
pub(super) fn profile_column(
    scene: &mut Scene,
    input: &MapInput,
    s: &LayerSummary,
    sites: &[(f64, f64, f64)],
    facts: &PageFacts,
) {
    let frame = (COLUMN.0 + 40.0, PLOT.0, COLUMN.1, PLOT.1);
    let mut y = PLOT.1 + 52.0;
    match &facts.line {
        Some(line) => {
            scene.heading(COLUMN.0, PLOT.0 - 14.0, "Profile along the line", INK);
            let coloured: Vec<_> = sites
                .iter()
                .map(|&(x, yy, v)| (x, yy, v, super::band_colour_of(v, facts)))
                .collect();
            line_plot(scene, input, line, &coloured, frame);
        }
        None => {
            scene.heading(COLUMN.0, PLOT.0 - 14.0, "Radial profile", INK);
            radial_plot(scene, input, s, sites, frame, !facts.flat);
        }
    }
    let chars = ((COLUMN.1 - COLUMN.0) / (0.68 * NOTE_SIZE)) as usize;
    if facts.flat {
        let noise = facts.noise_nm.unwrap_or(f64::NAN);
        let d = value_decimals(noise);
        let text = format!(
            "Flat within noise: the range of {} {u} is what a site σ of {} {u} (median) gives by itself, so no isolines, colour key or fitted curve are drawn.",
            fmt(s.range_nm, d),
            fmt(noise, d),
            u = input.unit
        );
        for l in wrap_words(&text, chars, 3) {
            scene.text(
                COLUMN.0,
                y,
                l,
                NOTE_SIZE,
                Anchor::Start,
                INK,
                "flat-within-noise",
            );
            y += NOTE_LEADING;
        }
        y += 6.0;
    }
    if let Some(line) = &facts.line {
        let text = format!(
            "The sites lie along one line ({}), so they are drawn as a profile along it: no map is made between or beside them.",
            line.direction_name()
        );
        for l in wrap_words(&text, chars, 3) {
            scene.text(
                COLUMN.0,
                y,
                l,
                NOTE_SIZE,
                Anchor::Start,
                INK,
                "line-pattern",
            );
            y += NOTE_LEADING;
        }
        y += 6.0;
    }
    if let Some(fit) = &s.radial {
        let terms =
            ["c₀", "c₀ + c₂ρ²", "c₀ + c₂ρ² + c₄ρ⁴"][fit.coefficients_nm.len().clamp(1, 3) - 1];
        let d = value_decimals(s.std_nm);
        let text = format!(
            "Radial fit {terms}, ρ = r/{} mm: centre {} → edge {} {u}; rms residual {} {u}",
            fmt(fit.r_norm_mm, 1),
            fmt(fit.centre_nm, d),
            fmt(fit.edge_nm, d),
            fmt(fit.rms_residual_nm, value_decimals(fit.rms_residual_nm)),
            u = input.unit
        );
        for line in wrap_words(&text, chars, 2) {
            scene.text(
                COLUMN.0,
                y,
                line,
                10.5,
                Anchor::Start,
                MUTED,
                "radial-fit-text",
            );
            y += 14.0;
        }
        y += 6.0;
    }
    let ex = &s.excluded;
    let lines_left = |y: f64| ((NOTES_END - y) / NOTE_LEADING).floor().max(1.0) as usize;
    let excluded: Vec<String> = ex
        .iter()
        .map(|e| format!("{} ({})", e.site, e.flag))
        .collect();
    let out: Vec<String> = s
        .spec
        .as_ref()
        .map(|c| c.sites_out.iter().map(|n| n.to_string()).collect())
        .unwrap_or_default();
    // Leave room for the out-of-spec list when there is one.
    let ex_room = if out.is_empty() {
        lines_left(y)
    } else {
        (lines_left(y) / 2).max(1)
    };
    let ex_lines = if ex.is_empty() {
        vec!["Excluded: none".to_string()]
    } else {
        wrap_list(
            &format!("Excluded {}:", ex.len()),
            &excluded,
            chars,
            ex_room,
        )
    };
    for line in ex_lines {
        let ink = if ex.is_empty() { MUTED } else { EXCLUDED };
        scene.text(COLUMN.0, y, line, NOTE_SIZE, Anchor::Start, ink, "excluded");
        y += NOTE_LEADING;
    }
    if !out.is_empty() {
        y += 4.0;
        let lead = format!("Out of spec {}: site", out.len());
        for line in wrap_list(&lead, &out, chars, lines_left(y)) {
            scene.text(
                COLUMN.0,
                y,
                line,
                NOTE_SIZE,
                Anchor::Start,
                OUT_OF_SPEC,
                "out-of-spec",
            );
            y += NOTE_LEADING;
        }
    }
}
