//! The map page laid out as a [`Scene`]: title, banded colour map with isolines inside the
//! wafer outline, colour bar, statistics panel and radial profile.
//!
//! Page (1200 × 780 layout px): a header across the top; the wafer on the left in a 640 px
//! square, north (+y) up; the colour bar beside it; on the right the figures, then the
//! radial profile plot; a one-line legend at the foot.

use super::colour::{self, ink_on, Rgb};
use super::contour::{closed_isolines, simplify, Polyline};
use super::interpolate::{Field, Grid};
use super::levels::{decimals_for, nice_levels, Levels};
use super::render::{MapInput, RenderOptions};
use super::scene::{Anchor, FieldFill, Item, Scene, Stroke};
use super::stats::{LayerSummary, SpecCheck, Summary};
use crate::recipe::geometry::Orientation;

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

/// Map square: left, top, side (px); the wafer diameter spans `MAP_SIDE − 2·MAP_MARGIN`.
const MAP_LEFT: f64 = 24.0;
const MAP_TOP: f64 = 84.0;
const MAP_SIDE: f64 = 640.0;
const MAP_MARGIN: f64 = 22.0;

/// Minimum distance between site markers (px) for their values to be printed.
const LABEL_SPACING_PX: f64 = 34.0;

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
    colour_bar(&mut scene, input, &levels, &colours, (lo, hi));
    stats_panel(&mut scene, input, &stats);
    radial_plot(&mut scene, input, &stats, &sites);
    footer(&mut scene, input, &levels, stats.spec.as_ref());
    scene
}

/// A ring around each valid site outside the specification window.
fn spec_rings(
    scene: &mut Scene,
    input: &MapInput,
    spec: &SpecCheck,
    to_px: &dyn Fn(f64, f64) -> (f64, f64),
) {
    let r = if input.rows.len() > 400 { 4.0 } else { 7.0 };
    for row in input.rows.iter().filter(|r| spec.is_out(r.site)) {
        let (x, y) = to_px(row.x_mm, row.y_mm);
        for (colour, width) in [(Rgb(0xff, 0xff, 0xff), 3.4), (OUT_OF_SPEC, 1.8)] {
            scene.items.push(Item::Path {
                points: circle_points(x, y, r, 24),
                closed: true,
                fill: None,
                stroke: Some(Stroke::solid(colour, width)),
                class: "out-of-spec",
            });
        }
    }
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
fn readable_time(t: &str) -> String {
    chrono::DateTime::parse_from_rfc3339(t)
        .map(|d| d.format("%Y-%m-%d %H:%M %:z").to_string())
        .unwrap_or_else(|_| t.to_string())
}

#[allow(clippy::too_many_arguments)]
fn wafer_and_field(
    scene: &mut Scene,
    input: &MapInput,
    grid: Option<&Grid>,
    levels: &Levels,
    colours: &[Rgb],
    (lo, hi): (f64, f64),
    origin: (f64, f64),
    scale: f64,
) {
    let w = &input.wafer;
    let to_px = |x: f64, y: f64| (origin.0 + x * scale, origin.1 - y * scale);
    let outline: Vec<(f64, f64)> = w.outline(720).iter().map(|&(x, y)| to_px(x, y)).collect();
    let usable: Vec<(f64, f64)> = w
        .usable_outline(720)
        .iter()
        .map(|&(x, y)| to_px(x, y))
        .collect();
    scene.items.push(Item::Path {
        points: outline,
        closed: true,
        fill: Some(WAFER_RIM),
        stroke: Some(Stroke::solid(INK, 1.6)),
        class: "outline",
    });
    if let Some(grid) = grid {
        // One marching-squares pass: the closed outlines fill the bands, and their parts
        // inside the usable area are the drawn isolines (the closing runs lie in the padding
        // beyond it).
        let loops = closed_isolines(grid, &levels.values);
        let field_at = scene.items.len();
        let tol_mm = 0.35 / scale;
        let span = hi - lo;
        let mut labels = Vec::new();
        for (k, (&level, lines)) in levels.values.iter().zip(&loops).enumerate() {
            let t = if span > 0.0 { (level - lo) / span } else { 0.5 };
            let ink = ink_on(colour::scale(t));
            let mut pieces_px = Vec::new();
            for line in lines {
                for piece in clip_to_usable(line, w) {
                    let piece = simplify(&piece, tol_mm);
                    let points: Vec<(f64, f64)> =
                        piece.points.iter().map(|&(x, y)| to_px(x, y)).collect();
                    scene.items.push(Item::Path {
                        points: points.clone(),
                        closed: piece.closed,
                        fill: None,
                        stroke: Some(Stroke::solid(ink, 0.9)),
                        class: "isoline",
                    });
                    pieces_px.push(points);
                }
            }
            labels.push((k, level, ink, pieces_px));
        }
        let sites_px: Vec<(f64, f64)> = input.rows.iter().map(|r| to_px(r.x_mm, r.y_mm)).collect();
        let field = Item::Field(Box::new(FieldFill {
            grid: grid.clone(),
            bounds: levels.values.clone(),
            colours: colours.to_vec(),
            loops,
            clip: usable.clone(),
            origin,
            scale,
        }));
        // The field goes under the isolines drawn above.
        scene.items.insert(field_at, field);
        isoline_labels(scene, &labels, &sites_px, levels, colours);
    }
    scene.items.push(Item::Path {
        points: usable,
        closed: true,
        fill: None,
        stroke: Some(Stroke {
            colour: MUTED,
            width: 1.0,
            dash: Some((5.0, 4.0)),
        }),
        class: "edge-exclusion",
    });
    orientation_mark(scene, input, origin, scale);
}

/// A level's index, value, ink and drawn pieces (px).
type LevelLines = (usize, f64, Rgb, Vec<Vec<(f64, f64)>>);

/// One label per level, on its lines at the point farthest from site markers and other
/// labels (skipped where no point is at least 16 px clear), on a patch of the band colour.
fn isoline_labels(
    scene: &mut Scene,
    labels: &[LevelLines],
    sites_px: &[(f64, f64)],
    levels: &Levels,
    colours: &[Rgb],
) {
    const SIZE: f64 = 9.0;
    let mut placed: Vec<(f64, f64)> = Vec::new();
    for (k, level, ink, pieces) in labels {
        let text = fmt(*level, levels.decimals);
        let half_w = 0.32 * SIZE * text.chars().count() as f64 + 3.0;
        let mut best: Option<(f64, (f64, f64))> = None;
        for piece in pieces.iter().filter(|p| polyline_length(p) > 6.0 * half_w) {
            let stride = (piece.len() / 24).max(1);
            for &p in piece.iter().step_by(stride) {
                let clear = sites_px
                    .iter()
                    .chain(&placed)
                    .map(|q| (q.0 - p.0).hypot(q.1 - p.1))
                    .fold(f64::INFINITY, f64::min);
                if best.is_none_or(|(b, _)| clear > b) {
                    best = Some((clear, p));
                }
            }
        }
        let Some((clear, (x, y))) = best else {
            continue;
        };
        if clear < 16.0 + half_w {
            continue;
        }
        placed.push((x, y));
        scene.items.push(Item::Rect {
            x: x - half_w,
            y: y - 6.5,
            w: 2.0 * half_w,
            h: 13.0,
            fill: Some(colours[k + 1]),
            stroke: None,
        });
        scene.text(
            x,
            y + 3.2,
            text,
            SIZE,
            Anchor::Middle,
            *ink,
            "isoline-label",
        );
    }
}

fn polyline_length(p: &[(f64, f64)]) -> f64 {
    p.windows(2)
        .map(|w| (w[1].0 - w[0].0).hypot(w[1].1 - w[0].1))
        .sum()
}

/// Splits a line where it leaves the usable area, keeping the parts inside.
fn clip_to_usable(line: &Polyline, w: &crate::recipe::Wafer) -> Vec<Polyline> {
    let inside: Vec<bool> = line
        .points
        .iter()
        .map(|&(x, y)| w.is_usable(x, y))
        .collect();
    if inside.iter().all(|&b| b) {
        return vec![line.clone()];
    }
    let mut pieces = Vec::new();
    let mut current = Vec::new();
    // A closed line starting outside can be walked from its first point; one starting inside
    // is rotated to start at an outside point so no piece is split at the seam.
    let n = line.points.len();
    let start = if line.closed {
        inside.iter().position(|&b| !b).unwrap_or(0)
    } else {
        0
    };
    let count = if line.closed { n + 1 } else { n };
    for k in 0..count {
        let idx = (start + k) % n;
        if inside[idx] {
            current.push(line.points[idx]);
        } else if current.len() > 1 {
            pieces.push(Polyline {
                points: std::mem::take(&mut current),
                closed: false,
            });
        } else {
            current.clear();
        }
    }
    if current.len() > 1 {
        pieces.push(Polyline {
            points: current,
            closed: false,
        });
    }
    pieces
}

/// A small label naming the flat or notch, outside the rim.
fn orientation_mark(scene: &mut Scene, input: &MapInput, origin: (f64, f64), scale: f64) {
    let (name, angle) = match input.wafer.orientation {
        Orientation::Flat { angle_deg, .. } => ("flat", angle_deg),
        Orientation::Notch { angle_deg } => ("notch", angle_deg),
        Orientation::None => return,
    };
    let a = angle.to_radians();
    let r = input.wafer.radius() * scale + 12.0;
    let (x, y) = (origin.0 + r * a.cos(), origin.1 - r * a.sin() + 4.0);
    scene.text(x, y, name, 10.0, Anchor::Middle, MUTED, "orientation");
}

#[allow(clippy::too_many_arguments)]
fn markers(
    scene: &mut Scene,
    input: &MapInput,
    opts: &RenderOptions,
    levels: &Levels,
    colours: &[Rgb],
    to_px: &dyn Fn(f64, f64) -> (f64, f64),
    lo: f64,
    hi: f64,
) {
    let px: Vec<(f64, f64)> = input.rows.iter().map(|r| to_px(r.x_mm, r.y_mm)).collect();
    let show_values = opts.values && min_spacing(&px) >= LABEL_SPACING_PX;
    let decimals = value_decimals((hi - lo) / 4.0);
    let r = if input.rows.len() > 400 { 1.6 } else { 3.2 };
    for (row, &(x, y)) in input.rows.iter().zip(&px) {
        let value = row.valid_value(input.layer);
        let bg = value
            .map(|v| colours[levels.values.partition_point(|&b| b <= v)])
            .unwrap_or(WAFER_RIM);
        scene.items.push(Item::Marker {
            x,
            y,
            r,
            site: row.site,
            excluded: value.is_none(),
            colour: if value.is_some() { INK } else { EXCLUDED },
            halo: Rgb(0xff, 0xff, 0xff),
        });
        if show_values {
            let text = match value {
                Some(v) => fmt(v, decimals),
                None => format!("#{}", row.site),
            };
            scene.text(x, y + 14.0, text, 9.5, Anchor::Middle, ink_on(bg), "value");
        }
    }
}

/// Smallest distance between two points (∞ for fewer than two); grid-bucketed, so fast for
/// thousands of sites.
fn min_spacing(pts: &[(f64, f64)]) -> f64 {
    let mut best = f64::INFINITY;
    let cell = LABEL_SPACING_PX;
    let mut buckets: std::collections::HashMap<(i64, i64), Vec<usize>> = Default::default();
    for (k, &(x, y)) in pts.iter().enumerate() {
        let key = ((x / cell).floor() as i64, (y / cell).floor() as i64);
        for dx in -1..=1 {
            for dy in -1..=1 {
                if let Some(list) = buckets.get(&(key.0 + dx, key.1 + dy)) {
                    for &o in list {
                        best = best.min((pts[o].0 - x).hypot(pts[o].1 - y));
                    }
                }
            }
        }
        buckets.entry(key).or_default().push(k);
    }
    best
}

fn colour_bar(
    scene: &mut Scene,
    input: &MapInput,
    levels: &Levels,
    colours: &[Rgb],
    (lo, hi): (f64, f64),
) {
    let (x, top, bottom, w) = (
        MAP_LEFT + MAP_SIDE + 14.0,
        MAP_TOP + 48.0,
        MAP_TOP + MAP_SIDE - 40.0,
        20.0,
    );
    scene.text(
        x,
        top - 12.0,
        input.unit.clone(),
        12.0,
        Anchor::Start,
        INK,
        "colour-bar-unit",
    );
    let span = hi - lo;
    let to_y = |v: f64| bottom - (v - lo) / span * (bottom - top);
    let mut edges = vec![lo];
    edges.extend_from_slice(&levels.values);
    edges.push(hi);
    if span.is_nan() || span <= 0.0 {
        scene.items.push(Item::Rect {
            x,
            y: top,
            w,
            h: bottom - top,
            fill: Some(colours[0]),
            stroke: None,
        });
        scene.text(
            x + w + 6.0,
            0.5 * (top + bottom) + 4.0,
            fmt(lo, 2),
            11.0,
            Anchor::Start,
            INK,
            "tick",
        );
        return;
    }
    for (k, win) in edges.windows(2).enumerate() {
        let (y1, y0) = (to_y(win[1]), to_y(win[0]));
        scene.items.push(Item::Rect {
            x,
            y: y1,
            w,
            h: y0 - y1,
            fill: Some(colours[k]),
            stroke: None,
        });
    }
    scene.items.push(Item::Rect {
        x,
        y: top,
        w,
        h: bottom - top,
        fill: None,
        stroke: Some(Stroke::solid(INK, 0.8)),
    });
    // Label every level if they fit (≥ 14 px apart), else every other one.
    let gap = if levels.values.len() > 1 {
        (to_y(levels.values[0]) - to_y(levels.values[1])).abs()
    } else {
        f64::INFINITY
    };
    let every = if gap >= 14.0 {
        1
    } else {
        (14.0 / gap).ceil() as usize
    };
    for (k, &v) in levels.values.iter().enumerate() {
        let y = to_y(v);
        scene.line(
            vec![(x + w, y), (x + w + 4.0, y)],
            Stroke::solid(INK, 0.8),
            "tick",
        );
        if k % every == 0 {
            scene.text(
                x + w + 7.0,
                y + 4.0,
                fmt(v, levels.decimals),
                11.0,
                Anchor::Start,
                INK,
                "tick",
            );
        }
    }
}

/// Right-hand column: left edge, right edge (px).
const PANEL: (f64, f64) = (800.0, 1176.0);

fn stats_panel(scene: &mut Scene, input: &MapInput, s: &LayerSummary) {
    let (x0, x1) = PANEL;
    let u = &input.unit;
    let d = value_decimals(s.std_nm);
    let site = |n: Option<usize>| n.map(|n| format!("  (site {n})")).unwrap_or_default();
    let mut rows: Vec<(String, String)> = vec![
        (
            "Sites valid".into(),
            format!("{} of {}", s.sites_valid, s.sites_total),
        ),
        ("Mean".into(), format!("{} {u}", fmt(s.mean_nm, d))),
        ("1σ".into(), format!("{} {u}", fmt(s.std_nm, d))),
        ("3σ".into(), format!("{} {u}", fmt(s.three_sigma_nm, d))),
        (
            "Min".into(),
            format!("{} {u}{}", fmt(s.min_nm, d), site(s.min_site)),
        ),
        (
            "Max".into(),
            format!("{} {u}{}", fmt(s.max_nm, d), site(s.max_site)),
        ),
        ("Range".into(), format!("{} {u}", fmt(s.range_nm, d))),
        (
            "Non-uniformity σ/mean".into(),
            format!("{} %", fmt(s.nu_1sigma_pct, 2)),
        ),
        (
            "Non-uniformity range/2·mean".into(),
            format!("{} %", fmt(s.nu_range_pct, 2)),
        ),
    ];
    if let Some(fit) = &s.radial {
        rows.push((
            "Centre → edge (radial fit)".into(),
            format!("{} → {} {u}", fmt(fit.centre_nm, d), fmt(fit.edge_nm, d)),
        ));
    }
    if let Some(c) = &s.spec {
        rows.push((
            format!("In spec {}–{} {u}", c.lo_nm, c.hi_nm),
            format!("{} of {}", c.sites_in, c.checked()),
        ));
    }
    scene.heading(x0, 104.0, "Uniformity", INK);
    let mut y = 130.0;
    for (label, value) in rows {
        scene.text(x0, y, label, 12.5, Anchor::Start, MUTED, "stat-label");
        scene.items.push(Item::Text {
            x: x1,
            y,
            text: value,
            size: 12.5,
            anchor: Anchor::End,
            bold: true,
            colour: INK,
            vertical: false,
            class: "stat",
        });
        scene.line(
            vec![(x0, y + 7.0), (x1, y + 7.0)],
            Stroke::solid(Rgb(0xe4, 0xe5, 0xe6), 0.6),
            "rule",
        );
        y += 21.0;
    }
    let ex = &s.excluded;
    let text = if ex.is_empty() {
        "Excluded: none".to_string()
    } else {
        let shown: Vec<String> = ex
            .iter()
            .map(|e| format!("{} ({})", e.site, e.flag))
            .collect();
        format!("Excluded {}: {}", ex.len(), first_few(&shown))
    };
    scene.text(
        x0,
        y + 4.0,
        text,
        11.5,
        Anchor::Start,
        if ex.is_empty() { MUTED } else { EXCLUDED },
        "excluded",
    );
    if let Some(c) = s.spec.as_ref().filter(|c| !c.sites_out.is_empty()) {
        let shown: Vec<String> = c.sites_out.iter().map(|n| n.to_string()).collect();
        let text = format!("Out of spec: site {}", first_few(&shown));
        scene.text(
            x0,
            y + 22.0,
            text,
            11.5,
            Anchor::Start,
            OUT_OF_SPEC,
            "out-of-spec",
        );
    }
}

/// The first four items joined by commas, with a count of the rest.
fn first_few(items: &[String]) -> String {
    let mut text = items.iter().take(4).cloned().collect::<Vec<_>>().join(", ");
    if items.len() > 4 {
        text.push_str(&format!(", +{} more", items.len() - 4));
    }
    text
}

fn radial_plot(scene: &mut Scene, input: &MapInput, s: &LayerSummary, sites: &[(f64, f64, f64)]) {
    let (x0, x1) = (PANEL.0 + 46.0, PANEL.1 - 6.0);
    let (top, bottom) = (420.0, 680.0);
    scene.heading(PANEL.0, top - 22.0, "Radial profile", INK);
    scene.items.push(Item::Rect {
        x: x0,
        y: top,
        w: x1 - x0,
        h: bottom - top,
        fill: Some(Rgb(0xff, 0xff, 0xff)),
        stroke: Some(Stroke::solid(RULE, 1.0)),
    });
    let r_max = input.wafer.radius();
    let (mut lo, mut hi) = sites
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), p| {
            (a.min(p.2), b.max(p.2))
        });
    if !lo.is_finite() {
        (lo, hi) = (0.0, 1.0);
    }
    if hi - lo < 1e-9 * lo.abs().max(1.0) {
        (lo, hi) = (lo - 0.5, hi + 0.5);
    }
    let pad = 0.08 * (hi - lo);
    let (lo, hi) = (lo - pad, hi + pad);
    let sx = |r: f64| x0 + r / r_max * (x1 - x0);
    let sy = |v: f64| bottom - (v - lo) / (hi - lo) * (bottom - top);
    let grid = Rgb(0xec, 0xed, 0xee);
    let xt = nice_levels(0.0, r_max, 5);
    for &r in std::iter::once(&0.0).chain(&xt.values) {
        scene.line(
            vec![(sx(r), top), (sx(r), bottom)],
            Stroke::solid(grid, 0.8),
            "grid",
        );
        scene.text(
            sx(r),
            bottom + 15.0,
            fmt(r, xt.decimals),
            10.5,
            Anchor::Middle,
            MUTED,
            "tick",
        );
    }
    let yt = nice_levels(lo, hi, 5);
    for &v in &yt.values {
        scene.line(
            vec![(x0, sy(v)), (x1, sy(v))],
            Stroke::solid(grid, 0.8),
            "grid",
        );
        scene.text(
            x0 - 5.0,
            sy(v) + 4.0,
            fmt(v, decimals_for(yt.step)),
            10.5,
            Anchor::End,
            MUTED,
            "tick",
        );
    }
    let ru = input.wafer.usable_radius();
    scene.line(
        vec![(sx(ru), top), (sx(ru), bottom)],
        Stroke {
            colour: MUTED,
            width: 1.0,
            dash: Some((4.0, 3.0)),
        },
        "edge-exclusion",
    );
    scene.text(
        sx(r_max / 2.0),
        bottom + 34.0,
        "radius (mm)",
        11.5,
        Anchor::Middle,
        INK,
        "axis",
    );
    scene.items.push(Item::Text {
        x: PANEL.0 + 4.0,
        y: 0.5 * (top + bottom),
        text: format!("{} ({})", input.quantity, input.unit),
        size: 11.5,
        anchor: Anchor::Middle,
        bold: false,
        colour: INK,
        vertical: true,
        class: "axis",
    });
    if let Some(fit) = &s.radial {
        let curve: Vec<(f64, f64)> = (0..=80)
            .map(|k| {
                let r = ru * k as f64 / 80.0;
                (sx(r), sy(fit.eval(r)).clamp(top, bottom))
            })
            .collect();
        scene.line(curve, Stroke::solid(colour::scale(0.15), 2.0), "radial-fit");
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
            Anchor::Start,
            MUTED,
            "radial-fit-text",
        );
    }
    let dot_r = if sites.len() > 400 { 1.2 } else { 2.4 };
    for &(x, y, v) in sites {
        scene.items.push(Item::Path {
            points: circle_points(sx(x.hypot(y)), sy(v), dot_r, 12),
            closed: true,
            fill: Some(colour::scale(0.55)),
            stroke: None,
            class: "radial-point",
        });
    }
}

/// A small `n`-gon standing for a circle (drawn identically in SVG and PNG).
fn circle_points(cx: f64, cy: f64, r: f64, n: usize) -> Vec<(f64, f64)> {
    (0..n)
        .map(|k| {
            let a = std::f64::consts::TAU * k as f64 / n as f64;
            (cx + r * a.cos(), cy + r * a.sin())
        })
        .collect()
}

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
