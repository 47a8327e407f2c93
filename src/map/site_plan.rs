//! The site plan as SVG: wafer outline with flat or notch, edge-exclusion ring, numbered sites.
//!
//! Hand-written SVG (text as text, one `<circle class="site">` per site) so that it is small,
//! exact and easy to check.

use super::svg::{escape, polygon_path};
use crate::recipe::{Site, Wafer};
use std::fmt::Write;

/// Pixels per mm are chosen so the drawing is about 640 px wide.
const SIZE_PX: f64 = 640.0;

/// Draws the site plan of a wafer.
pub fn svg(wafer: &Wafer, sites: &[Site], title: &str) -> String {
    let margin = 40.0;
    let scale = (SIZE_PX - 2.0 * margin) / wafer.diameter_mm;
    let c = SIZE_PX / 2.0;
    let to_px = |x: f64, y: f64| (c + x * scale, c + 24.0 - y * scale);
    let mut s = String::new();
    let _ = writeln!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" font-family="DejaVu Sans, sans-serif">"#,
        w = SIZE_PX,
        h = SIZE_PX + 48.0
    );
    let _ = writeln!(s, r##"<rect width="100%" height="100%" fill="#fbfaf7"/>"##);
    let _ = writeln!(
        s,
        r##"<text x="{c}" y="22" text-anchor="middle" font-size="16" fill="#222">{} — {} sites</text>"##,
        escape(title),
        sites.len()
    );
    let _ = writeln!(
        s,
        r##"<path class="outline" d="{}" fill="#e9eef2" stroke="#33414d" stroke-width="1.5"/>"##,
        polygon_path(&wafer.outline(720), to_px)
    );
    if wafer.edge_exclusion_mm > 0.0 {
        let _ = writeln!(
            s,
            r##"<path class="edge-exclusion" d="{}" fill="none" stroke="#9a6b3f" stroke-width="1" stroke-dasharray="5 4"/>"##,
            polygon_path(&wafer.usable_outline(720), to_px)
        );
    }
    let font = if sites.len() > 150 { 7.0 } else { 10.0 };
    for site in sites {
        let (px, py) = to_px(site.x_mm, site.y_mm);
        let _ = writeln!(
            s,
            r##"<circle class="site" data-site="{n}" cx="{px:.2}" cy="{py:.2}" r="3" fill="#1f5f8b"/><text x="{tx:.2}" y="{ty:.2}" font-size="{font}" fill="#1b2630">{n}</text>"##,
            n = site.number,
            tx = px + 4.0,
            ty = py - 4.0
        );
    }
    let _ = writeln!(
        s,
        r##"<text x="8" y="{y}" font-size="11" fill="#555">⌀ {} mm, edge exclusion {} mm; x right, y up, mm from the wafer centre</text>"##,
        wafer.diameter_mm,
        wafer.edge_exclusion_mm,
        y = SIZE_PX + 40.0
    );
    s.push_str("</svg>\n");
    s
}
