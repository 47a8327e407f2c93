//! An SVG plot of a measured spectrum against the modelled one (for `isopach fit --plot`).
//! Plain SVG text: no font files needed, the viewer renders the labels.

use super::result::FitResult;
use crate::map::svg::escape;
use std::fmt::Write;

/// Draws measured (points) and modelled (line) reflectance over wavelength, with the fitted
/// thicknesses, gof and flags in the title.
pub fn svg(
    wavelength_nm: &[f64],
    measured: &[f64],
    modelled: &[f64],
    result: &FitResult,
) -> String {
    let (w, h) = (800.0, 480.0);
    let (left, right, top, bottom) = (70.0, 20.0, 50.0, 50.0);
    let finite = |v: &[f64]| {
        v.iter()
            .copied()
            .filter(|x| x.is_finite())
            .collect::<Vec<_>>()
    };
    let all: Vec<f64> = finite(measured)
        .into_iter()
        .chain(finite(modelled))
        .collect();
    let (mut lo, mut hi) = all
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(*v), b.max(*v))
        });
    if !(lo.is_finite() && hi > lo) {
        lo = 0.0;
        hi = 1.0;
    }
    let pad = 0.05 * (hi - lo);
    let (lo, hi) = ((lo - pad).max(-0.05), hi + pad);
    let (x0, x1) = (
        wavelength_nm.first().copied().unwrap_or(0.0),
        wavelength_nm
            .last()
            .copied()
            .unwrap_or(1.0)
            .max(wavelength_nm.first().copied().unwrap_or(0.0) + 1.0),
    );
    let px = |x: f64| left + (x - x0) / (x1 - x0) * (w - left - right);
    let py = |y: f64| top + (hi - y) / (hi - lo) * (h - top - bottom);
    let mut s = String::new();
    let _ = write!(
        s,
        r##"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" font-family="DejaVu Sans, sans-serif" font-size="12">
<rect width="{w}" height="{h}" fill="white"/>
<rect x="{left}" y="{top}" width="{}" height="{}" fill="none" stroke="#444"/>
"##,
        w - left - right,
        h - top - bottom
    );
    let layers: Vec<String> = result
        .layers
        .iter()
        .map(|l| {
            format!(
                "{} {:.2} ± {:.2} nm",
                l.material, l.thickness_nm, l.sigma_nm
            )
        })
        .collect();
    let flags = if result.flags.is_empty() {
        String::new()
    } else {
        format!(" [{}]", result.flags.join(", "))
    };
    let _ = writeln!(
        s,
        r#"<text x="{left}" y="22" font-size="14">{}</text><text x="{left}" y="40">method {}, gof {:.4}{}</text>"#,
        escape(&layers.join(", ")),
        escape(&result.method),
        result.gof,
        escape(&flags)
    );
    for y in nice_ticks(lo, hi) {
        let (tx, ty, gy, gx) = (left - 6.0, py(y) + 4.0, py(y), w - right);
        let _ = writeln!(
            s,
            r##"<line x1="{left}" x2="{gx}" y1="{gy:.1}" y2="{gy:.1}" stroke="#e4e4e4"/><text x="{tx}" y="{ty:.1}" text-anchor="end">{y:.2}</text>"##
        );
    }
    for x in nice_ticks(x0, x1) {
        let _ = writeln!(
            s,
            r##"<text x="{}" y="{}" text-anchor="middle">{x:.0}</text>"##,
            px(x),
            h - bottom + 16.0
        );
    }
    let _ = writeln!(
        s,
        r#"<text x="{}" y="{}" text-anchor="middle">wavelength (nm)</text><text x="16" y="{}" transform="rotate(-90 16 {})" text-anchor="middle">reflectance</text>"#,
        (left + w - right) / 2.0,
        h - 12.0,
        h / 2.0,
        h / 2.0
    );
    let mut dots = String::new();
    for (x, y) in wavelength_nm
        .iter()
        .zip(measured)
        .filter(|(_, y)| y.is_finite())
    {
        let _ = write!(dots, "M{:.1},{:.1}h0.1", px(*x), py(*y));
    }
    let _ = writeln!(
        s,
        r##"<path d="{dots}" stroke="#1f77b4" stroke-width="2.5" stroke-linecap="round" fill="none"/>"##
    );
    let line: Vec<String> = wavelength_nm
        .iter()
        .zip(modelled)
        .filter(|(_, y)| y.is_finite())
        .map(|(x, y)| format!("{:.1},{:.1}", px(*x), py(*y)))
        .collect();
    let _ = writeln!(
        s,
        r##"<polyline points="{}" stroke="#d62728" stroke-width="1.2" fill="none"/>"##,
        line.join(" ")
    );
    let _ = writeln!(
        s,
        r##"<text x="{}" y="{}" fill="#1f77b4" text-anchor="end">● measured</text><text x="{}" y="{}" fill="#d62728" text-anchor="end">— model</text>"##,
        w - right - 8.0,
        top + 16.0,
        w - right - 8.0,
        top + 32.0
    );
    s.push_str("</svg>\n");
    s
}

/// Round tick values (1, 2 or 5 × 10ⁿ apart, about five of them) inside `[lo, hi]`.
fn nice_ticks(lo: f64, hi: f64) -> Vec<f64> {
    let span = hi - lo;
    if !(span.is_finite() && span > 0.0) {
        return Vec::new();
    }
    let raw = span / 5.0;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 5.0, 10.0]
        .iter()
        .map(|m| m * mag)
        .find(|s| *s >= raw)
        .unwrap_or(10.0 * mag);
    let first = (lo / step).ceil() as i64;
    let last = (hi / step).floor() as i64;
    (first..=last).map(|i| i as f64 * step).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ticks_are_round() {
        assert_eq!(nice_ticks(400.0, 1000.0), vec![400.0, 600.0, 800.0, 1000.0]);
        let t = nice_ticks(-0.03, 0.72);
        assert_eq!(t.len(), 4);
        assert!(
            (t[0] - 0.0).abs() < 1e-12 && (t[3] - 0.6).abs() < 1e-12,
            "{t:?}"
        );
        assert!(nice_ticks(1.0, 1.0).is_empty());
    }
}
