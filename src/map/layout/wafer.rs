//! The wafer half of the map page: outline, banded colour field, isolines and their labels,
//! the flat/notch mark, site markers with values, and rings around out-of-spec sites.

use super::{
    band_colour_of, fmt, value_decimals, PageFacts, EXCLUDED, INK, MUTED, OUT_OF_SPEC, WAFER_RIM,
};
use crate::map::colour::{self, ink_on, Rgb};
use crate::map::contour::{closed_isolines, simplify, Polyline};
use crate::map::evidence::SiteLine;
use crate::map::interpolate::Grid;
use crate::map::levels::Levels;
use crate::map::render::{MapInput, RenderOptions};
use crate::map::scene::{text_width, Anchor, FieldFill, Item, Scene, Stroke};
use crate::map::stats::SpecCheck;
use crate::map::xy_plot::circle_points;
use crate::recipe::geometry::Orientation;

/// A ring around each valid site outside the specification window.
pub(super) fn spec_rings(
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

#[allow(clippy::too_many_arguments)]
pub(super) fn wafer_and_field(
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
                // Squared distances: the nearest is the same, without a square root each.
                let clear2 = sites_px
                    .iter()
                    .chain(&placed)
                    .map(|q| (q.0 - p.0).powi(2) + (q.1 - p.1).powi(2))
                    .fold(f64::INFINITY, f64::min);
                if best.is_none_or(|(b, _)| clear2 > b) {
                    best = Some((clear2, p));
                }
            }
        }
        let Some((clear2, (x, y))) = best else {
            continue;
        };
        if clear2.sqrt() < 16.0 + half_w {
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
pub(super) fn markers(
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
    let room = min_spacing(&px) >= LABEL_SPACING_PX;
    let decimals = value_decimals((hi - lo) / 4.0);
    let r = if input.rows.len() > 400 { 1.6 } else { 3.2 };
    for (row, &(x, y)) in input.rows.iter().zip(&px) {
        let value = row.valid_value(input.layer);
        let bg = value
            .map(|v| {
                colours[levels
                    .values
                    .partition_point(|&b| b <= v)
                    .min(colours.len() - 1)]
            })
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
        site_labels(
            scene,
            opts,
            room,
            row.site,
            value.map(|v| fmt(v, decimals)),
            (x, y),
            bg,
        );
    }
}

/// A site's value below its marker and its number above it, each on a patch of `bg` (the
/// colour of the site's band) so they stay legible over isolines, the edge-exclusion ring
/// and the rim. An excluded site shows `#N` in place of its value unless numbers are shown.
fn site_labels(
    scene: &mut Scene,
    opts: &RenderOptions,
    room: bool,
    site: usize,
    value: Option<String>,
    (x, y): (f64, f64),
    bg: Rgb,
) {
    if !room {
        return;
    }
    let ink = ink_on(bg);
    let mut label = |text: String, y: f64, size: f64, bold: bool, class: &'static str| {
        let w = text_width(&text, size) + 4.0;
        scene.items.push(Item::Rect {
            x: x - w / 2.0,
            y: y - 0.82 * size,
            w,
            h: 1.08 * size,
            fill: Some(bg),
            stroke: None,
        });
        scene.items.push(Item::Text {
            x,
            y,
            text,
            size,
            anchor: Anchor::Middle,
            bold,
            colour: ink,
            vertical: false,
            class,
        });
    };
    if opts.values {
        let text = match value {
            Some(v) => Some(v),
            None if opts.numbers => None,
            None => Some(format!("#{site}")),
        };
        if let Some(text) = text {
            label(text, y + 14.0, 9.5, false, "value");
        }
    }
    if opts.numbers {
        label(site.to_string(), y - 6.5, 8.5, true, "site-number");
    }
}

/// Site markers for sites along one line: the line drawn across the disc and each valid
/// site a dot in the colour of its band (nothing is filled between them).
#[allow(clippy::too_many_arguments)]
pub(super) fn line_markers(
    scene: &mut Scene,
    input: &MapInput,
    opts: &RenderOptions,
    line: &SiteLine,
    facts: &PageFacts,
    to_px: &dyn Fn(f64, f64) -> (f64, f64),
) {
    if let Some((a, b)) = line.crossings(input.wafer.usable_radius()) {
        let normal = (-line.dir.1, line.dir.0);
        let off = line.centre.0 * normal.0 + line.centre.1 * normal.1;
        let at = |t: f64| {
            to_px(
                off * normal.0 + t * line.dir.0,
                off * normal.1 + t * line.dir.1,
            )
        };
        scene.line(vec![at(a), at(b)], Stroke::solid(MUTED, 1.0), "site-line");
    }
    let px: Vec<(f64, f64)> = input.rows.iter().map(|r| to_px(r.x_mm, r.y_mm)).collect();
    let room = min_spacing(&px) >= LABEL_SPACING_PX * 0.5;
    let decimals = value_decimals((facts.range.1 - facts.range.0) / 4.0);
    for (row, &(x, y)) in input.rows.iter().zip(&px) {
        let value = row.valid_value(input.layer);
        let fill = value.map(|v| band_colour_of(v, facts)).unwrap_or(WAFER_RIM);
        // A valid site is a dot in its band's colour with a dark edge; an excluded one a cross.
        scene.items.push(Item::Marker {
            x,
            y,
            r: if value.is_some() { 5.5 } else { 3.2 },
            site: row.site,
            excluded: value.is_none(),
            colour: if value.is_some() { fill } else { EXCLUDED },
            halo: if value.is_some() {
                INK
            } else {
                Rgb(0xff, 0xff, 0xff)
            },
        });
        // Values sit beside the line, not on it: to the right of a steep line, below a flat one.
        let (lx, ly) = if line.dir.1.abs() > 0.7 {
            (x + 30.0, y + 3.5)
        } else {
            (x, y + 20.0)
        };
        site_labels_at(
            scene,
            opts,
            room,
            row.site,
            value.map(|v| fmt(v, decimals)),
            (x, y),
            (lx, ly),
        );
    }
}

/// Labels of a site on a line pattern: value at `at`, number beside the marker, on the page.
#[allow(clippy::too_many_arguments)]
fn site_labels_at(
    scene: &mut Scene,
    opts: &RenderOptions,
    room: bool,
    site: usize,
    value: Option<String>,
    (x, y): (f64, f64),
    (lx, ly): (f64, f64),
) {
    if !room {
        return;
    }
    if opts.values {
        let text = value.unwrap_or_else(|| format!("#{site}"));
        scene.text(lx, ly, text, 9.5, Anchor::Middle, INK, "value");
    }
    if opts.numbers {
        let nx = x - (lx - x);
        scene.items.push(Item::Text {
            x: nx,
            y: if lx == x { y - 10.0 } else { ly },
            text: site.to_string(),
            size: 8.5,
            anchor: Anchor::Middle,
            bold: true,
            colour: MUTED,
            vertical: false,
            class: "site-number",
        });
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

/// Minimum distance between site markers (px) for their values to be printed.
const LABEL_SPACING_PX: f64 = 34.0;
