//! SVG output: a [`Scene`] written as hand-made SVG (text as text, one element per site
//! marker), plus the small helpers the site plan shares.
//!
//! The colour bands are vector paths: for each level, the region where the field is at or
//! above it is traced as closed loops ([`super::contour::closed_isolines`], laid out with the
//! field) and filled with the even-odd rule, which cuts holes around lower ground. Painted in ascending order over the lowest band's colour, each point ends up in
//! the colour of its band; the whole stack is clipped to the usable outline.

use super::contour::simplify;
use super::scene::{Anchor, FieldFill, Item, Scene, Stroke};
use std::fmt::Write;

/// An SVG path through the points, closed.
pub fn polygon_path(points: &[(f64, f64)], to_px: impl Fn(f64, f64) -> (f64, f64)) -> String {
    let mut d = String::new();
    push_points(&mut d, points.iter().map(|&(x, y)| to_px(x, y)));
    d.push('Z');
    d
}

/// Appends `M x,y L x,y …` for the points.
fn push_points(d: &mut String, points: impl Iterator<Item = (f64, f64)>) {
    for (i, (px, py)) in points.enumerate() {
        let _ = write!(d, "{}{px:.2},{py:.2} ", if i == 0 { "M" } else { "L" });
    }
}

/// Escapes text for SVG/XML.
pub fn escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

fn stroke_attrs(s: &Option<Stroke>) -> String {
    match s {
        None => r#" stroke="none""#.into(),
        Some(s) => {
            let mut a = format!(r#" stroke="{}" stroke-width="{}""#, s.colour.hex(), s.width);
            if let Some((on, off)) = s.dash {
                let _ = write!(a, r#" stroke-dasharray="{on} {off}""#);
            }
            a.push_str(r#" stroke-linejoin="round" stroke-linecap="round""#);
            a
        }
    }
}

/// Writes the scene as a standalone SVG document.
pub fn write(scene: &Scene) -> String {
    let mut s = String::with_capacity(64 * 1024);
    let _ = writeln!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" font-family="DejaVu Sans, Verdana, sans-serif">"#,
        w = scene.width,
        h = scene.height
    );
    let _ = writeln!(
        s,
        r#"<rect width="100%" height="100%" fill="{}"/>"#,
        scene.background.hex()
    );
    for (k, item) in scene.items.iter().enumerate() {
        match item {
            Item::Rect {
                x,
                y,
                w,
                h,
                fill,
                stroke,
            } => {
                let _ = writeln!(
                    s,
                    r#"<rect x="{x:.2}" y="{y:.2}" width="{w:.2}" height="{h:.2}" fill="{}"{}/>"#,
                    fill.map(|c| c.hex()).unwrap_or_else(|| "none".into()),
                    stroke_attrs(stroke)
                );
            }
            Item::Path {
                points,
                closed,
                fill,
                stroke,
                class,
            } if !closed && fill.is_none() => {
                // An open line is a polyline: shorter to write and to read than a path.
                let mut pts = String::new();
                for (px, py) in points {
                    let _ = write!(pts, "{px:.2},{py:.2} ");
                }
                let _ = writeln!(
                    s,
                    r#"<polyline class="{class}" points="{}" fill="none"{}/>"#,
                    pts.trim_end(),
                    stroke_attrs(stroke)
                );
            }
            Item::Path {
                points,
                closed,
                fill,
                stroke,
                class,
            } => {
                let mut d = String::new();
                push_points(&mut d, points.iter().copied());
                if *closed {
                    d.push('Z');
                }
                let _ = writeln!(
                    s,
                    r#"<path class="{class}" d="{}" fill="{}"{}/>"#,
                    d.trim_end(),
                    fill.map(|c| c.hex()).unwrap_or_else(|| "none".into()),
                    stroke_attrs(stroke)
                );
            }
            Item::Marker {
                x,
                y,
                r,
                site,
                excluded,
                colour,
                halo,
            } => {
                if *excluded {
                    let a = r * 1.2;
                    let _ = writeln!(
                        s,
                        r#"<path class="site excluded" data-site="{site}" d="M{:.2},{:.2} L{:.2},{:.2} M{:.2},{:.2} L{:.2},{:.2}" stroke="{}" stroke-width="1.8" stroke-linecap="round"/>"#,
                        x - a,
                        y - a,
                        x + a,
                        y + a,
                        x - a,
                        y + a,
                        x + a,
                        y - a,
                        colour.hex()
                    );
                } else {
                    let _ = writeln!(
                        s,
                        r#"<circle class="site" data-site="{site}" cx="{x:.2}" cy="{y:.2}" r="{r}" fill="{}" stroke="{}" stroke-width="1"/>"#,
                        colour.hex(),
                        halo.hex()
                    );
                }
            }
            Item::Text {
                x,
                y,
                text,
                size,
                anchor,
                bold,
                colour,
                vertical,
                class,
            } => {
                let anchor = match anchor {
                    Anchor::Start => "start",
                    Anchor::Middle => "middle",
                    Anchor::End => "end",
                };
                let weight = if *bold { r#" font-weight="bold""# } else { "" };
                let rotate = if *vertical {
                    format!(r#" transform="rotate(-90 {x:.2} {y:.2})""#)
                } else {
                    String::new()
                };
                let _ = writeln!(
                    s,
                    r#"<text class="{class}" x="{x:.2}" y="{y:.2}" font-size="{size}" text-anchor="{anchor}" fill="{}"{weight}{rotate}>{}</text>"#,
                    colour.hex(),
                    escape(text)
                );
            }
            Item::Field(f) => write_field(&mut s, f, k),
        }
    }
    s.push_str("</svg>\n");
    s
}

/// The banded colour map as clipped, even-odd filled paths (see the module doc).
fn write_field(s: &mut String, f: &FieldFill, id: usize) {
    let mut clip = String::new();
    push_points(&mut clip, f.clip.iter().copied());
    let _ = writeln!(
        s,
        r#"<clipPath id="usable{id}"><path d="{}Z"/></clipPath>"#,
        clip
    );
    let _ = writeln!(s, r#"<g class="field" clip-path="url(#usable{id})">"#);
    let _ = writeln!(
        s,
        r#"<path class="band" d="{}Z" fill="{}"/>"#,
        clip,
        f.colours[0].hex()
    );
    let tol_mm = 0.35 / f.scale;
    for (k, lines) in f.loops.iter().enumerate() {
        let mut d = String::new();
        for line in lines {
            let line = simplify(line, tol_mm);
            if line.points.len() < 3 {
                continue;
            }
            push_points(&mut d, line.points.iter().map(|&(x, y)| f.to_px(x, y)));
            d.push('Z');
        }
        if !d.is_empty() {
            let _ = writeln!(
                s,
                r#"<path class="band" d="{d}" fill="{}" fill-rule="evenodd"/>"#,
                f.colours[k + 1].hex()
            );
        }
    }
    s.push_str("</g>\n");
}
