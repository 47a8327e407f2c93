//! The map page laid out as a [`Scene`]: title, banded colour map with isolines inside the
//! wafer outline, colour bar, statistics panel and radial profile.
//!
//! Page (1200 × 780 layout px): a header across the top; the wafer on the left in a 640 px
//! square, north (+y) up ([`wafer`]); the colour bar beside it ([`colour_bar`]); on the right
//! the figures ([`stats_panel`]), then the radial profile plot ([`radial_profile`]); a
//! one-line legend at the foot. This file holds the page frame, the header and footer, and
//! what the parts share (colours, value range, number formats).

mod colour_bar;
mod radial_profile;
mod report;
mod stats_panel;
mod wafer;

use super::colour::{self, Rgb};
use super::interpolate::{Field, Grid};
use super::levels::{nice_levels, Levels};
use super::render::{MapInput, RenderOptions};
use super::scene::{Anchor, Item, Scene, Stroke};
use super::stats::{LayerSummary, SpecCheck, Summary};
use super::xy_plot::PlotStyle;
use colour_bar::colour_bar;
use radial_profile::radial_plot;
use stats_panel::stats_panel;
use wafer::{markers, spec_rings, wafer_and_field};

pub use report::{bins, report_page, ReportInput, REPORT_HEIGHT, REPORT_WIDTH};

/// Page size, layout px.
pub const WIDTH: f64 = 1200.0;
pub const HEIGHT: f64 = 780.0;

const BACKGROUND: Rgb = Rgb(0xf7, 0xf6, 0xf2);
const INK: Rgb = Rgb(0x1f, 0x24, 0x2b);
const MUTED: Rgb = Rgb(0x5d, 0x65, 0x6e);
const RULE: Rgb = Rgb(0xc9, 0xcc, 0xcf);
const WAFER_RIM: Rgb = Rgb(0xdc, 0xdf, 0xe2);
const EXCLUDED: Rgb = Rgb(0x9b, 0x2d, 0x3a);
/// The ring around a site outside the recipe's specification window.
const OUT_OF_SPEC: Rgb = Rgb(0xd4, 0x5d, 0x0b);

/// The look of the XY plots on the map and report pages.
const PAGE_PLOT: PlotStyle = PlotStyle {
    ink: INK,
    muted: MUTED,
    grid: Rgb(0xec, 0xed, 0xee),
    frame: RULE,
    fill: Some(Rgb(0xff, 0xff, 0xff)),
    tick_size: 10.5,
    title_size: 11.5,
};

/// Map square: left, top, side (px); the wafer diameter spans `MAP_SIDE − 2·MAP_MARGIN`.
const MAP_LEFT: f64 = 24.0;
const MAP_TOP: f64 = 84.0;
const MAP_SIDE: f64 = 640.0;
const MAP_MARGIN: f64 = 22.0;

/// Lays out the whole page.
pub fn page(input: &MapInput, opts: &RenderOptions) -> Scene {
    let mut scene = Scene {
        width: WIDTH,
        height: HEIGHT,
        background: BACKGROUND,
        items: Vec::new(),
    };
    let names = [input.layer_name.clone()];
    let summary = Summary::from_rows(&input.rows, &names, input.wafer.usable_radius());
    let mut stats = summary
        .all_layers()
        .get(input.layer)
        .cloned()
        .unwrap_or_else(|| summary.first.clone());
    stats.spec = input
        .spec_nm
        .map(|w| SpecCheck::of(&input.rows, input.layer, w));
    let sites: Vec<(f64, f64, f64)> = input
        .rows
        .iter()
        .filter_map(|r| r.valid_value(input.layer).map(|v| (r.x_mm, r.y_mm, v)))
        .collect();
    let scale = (MAP_SIDE - 2.0 * MAP_MARGIN) / input.wafer.diameter_mm;
    let origin = (MAP_LEFT + MAP_SIDE / 2.0, MAP_TOP + MAP_SIDE / 2.0);
    let to_px = |x: f64, y: f64| (origin.0 + x * scale, origin.1 - y * scale);

    let field = Field::new(&sites, &input.wafer);
    // Two cells of padding so the bands run under the clip edge instead of stopping short.
    let n = opts.grid.max(16);
    let pad = 2.0 * 2.0 * input.wafer.usable_radius() / (n - 1) as f64;
    let grid = field.as_ref().map(|f| f.grid(n, pad));
    let (lo, hi) = value_range(opts, &sites, grid.as_ref());
    let levels = nice_levels(lo, hi, opts.levels);
    let colours = band_colours(lo, hi, &levels.values);

    header(&mut scene, input, &stats);
    wafer_and_field(
        &mut scene,
        input,
        grid.as_ref(),
        &levels,
        &colours,
        (lo, hi),
        origin,
        scale,
    );
    markers(&mut scene, input, opts, &levels, &colours, &to_px, lo, hi);
    if let Some(spec) = &stats.spec {
        spec_rings(&mut scene, input, spec, &to_px);
    }
    if sites.is_empty() {
        // A scale with nothing on it would suggest values that were never measured.
        scene.text(
            origin.0,
            origin.1,
            "No valid site: no colours, no colour bar (the excluded sites are listed at right)",
            13.0,
            Anchor::Middle,
            EXCLUDED,
            "no-valid-site",
        );
    } else {
        colour_bar(&mut scene, input, &levels, &colours, (lo, hi));
    }
    stats_panel(&mut scene, input, &stats);
    radial_plot(&mut scene, input, &stats, &sites);
    footer(&mut scene, input, &levels, stats.spec.as_ref());
    scene
}

/// The colour range: given, or the span of the sites and the interpolated grid.
fn value_range(opts: &RenderOptions, sites: &[(f64, f64, f64)], grid: Option<&Grid>) -> (f64, f64) {
    if let Some(r) = opts
        .range
        .filter(|r| r.lo.is_finite() && r.hi.is_finite() && r.hi > r.lo)
    {
        return (r.lo, r.hi);
    }
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for s in sites {
        lo = lo.min(s.2);
        hi = hi.max(s.2);
    }
    if let Some((a, b)) = grid.and_then(Grid::min_max) {
        lo = lo.min(a);
        hi = hi.max(b);
    }
    if !lo.is_finite() {
        return (0.0, 1.0);
    }
    (lo, hi)
}

/// A colour per band: the scale at the band's middle value.
fn band_colours(lo: f64, hi: f64, bounds: &[f64]) -> Vec<Rgb> {
    let span = hi - lo;
    if span.is_nan() || span <= 0.0 {
        return vec![colour::scale(0.5)];
    }
    let mut edges = vec![lo];
    edges.extend_from_slice(bounds);
    edges.push(hi);
    edges
        .windows(2)
        .map(|w| colour::scale((0.5 * (w[0] + w[1]) - lo) / span))
        .collect()
}

fn fmt(v: f64, decimals: usize) -> String {
    if v.is_finite() {
        format!("{v:.decimals$}")
    } else {
        "—".into()
    }
}

/// Decimals for printing values of this spread: about three significant digits of σ.
fn value_decimals(spread: f64) -> usize {
    if spread.is_nan() || spread <= 0.0 {
        return 2;
    }
    (2.0 - spread.log10().floor()).clamp(0.0, 3.0) as usize
}

fn header(scene: &mut Scene, input: &MapInput, stats: &LayerSummary) {
    let mut title = Vec::new();
    if !input.recipe.is_empty() {
        title.push(input.recipe.clone());
    }
    if !input.wafer_id.is_empty() {
        title.push(format!("wafer {}", input.wafer_id));
    }
    if title.is_empty() {
        title.push("Uniformity map".into());
    }
    scene.items.push(Item::Text {
        x: 28.0,
        y: 40.0,
        text: title.join("  ·  "),
        size: 22.0,
        anchor: Anchor::Start,
        bold: true,
        colour: INK,
        vertical: false,
        class: "title",
    });
    let mut sub = vec![format!(
        "{}{} ({})",
        if input.layer_name.is_empty() {
            String::new()
        } else {
            format!("{} ", input.layer_name)
        },
        input.quantity,
        input.unit
    )];
    if !input.time.is_empty() {
        sub.push(readable_time(&input.time));
    }
    sub.push(format!(
        "{} of {} sites valid",
        stats.sites_valid, stats.sites_total
    ));
    scene.text(
        28.0,
        64.0,
        sub.join("  ·  "),
        13.0,
        Anchor::Start,
        MUTED,
        "subtitle",
    );
    scene.line(
        vec![(24.0, 76.0), (WIDTH - 24.0, 76.0)],
        Stroke::solid(RULE, 1.0),
        "rule",
    );
}

/// An RFC 3339 time as `2026-12-03 14:22 +01:00`; anything else is shown as given.
pub fn readable_time(t: &str) -> String {
    chrono::DateTime::parse_from_rfc3339(t)
        .map(|d| d.format("%Y-%m-%d %H:%M %:z").to_string())
        .unwrap_or_else(|_| t.to_string())
}

/// Right-hand column: left edge, right edge (px).
const PANEL: (f64, f64) = (800.0, 1176.0);

fn footer(scene: &mut Scene, input: &MapInput, levels: &Levels, spec: Option<&SpecCheck>) {
    let w = &input.wafer;
    let mut parts = vec![format!(
        "⌀ {} mm, edge exclusion {} mm",
        w.diameter_mm, w.edge_exclusion_mm
    )];
    if levels.step.is_finite() {
        parts.push(format!(
            "isolines every {} {}",
            fmt(levels.step, levels.decimals),
            input.unit
        ));
    }
    parts.push("x right, y up, viewed from the film side".into());
    parts.push("× excluded site".into());
    if spec.is_some() {
        parts.push("ringed: out of spec".into());
    }
    scene.text(
        28.0,
        HEIGHT - 18.0,
        parts.join("  ·  "),
        11.0,
        Anchor::Start,
        MUTED,
        "legend",
    );
}
