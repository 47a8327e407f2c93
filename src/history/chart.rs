//! The run chart of a trend: mean thickness and % non-uniformity per run, each with its centre
//! line and ±3σ individuals limits; points beyond the limits are ringed.
//!
//! Built as a [`Scene`] so the map writers give both SVG (text as text) and PNG.

use super::control::{limits, signals};
use super::db::TrendPoint;
use crate::map::colour::Rgb;
use crate::map::levels::nice_levels;
use crate::map::scene::{Anchor, Item, Scene, Stroke};

const WIDTH: f64 = 1000.0;
const PANEL_H: f64 = 260.0;
const LEFT: f64 = 90.0;
const RIGHT: f64 = 30.0;
const INK: Rgb = Rgb(0x22, 0x2a, 0x33);
const GRID: Rgb = Rgb(0xd8, 0xdc, 0xe0);
const POINT: Rgb = Rgb(0x1f, 0x5f, 0x8b);
const LIMIT: Rgb = Rgb(0xa0, 0x52, 0x2d);
const ALERT: Rgb = Rgb(0xc0, 0x1c, 0x28);

/// Draws the chart of `points` (oldest first) titled `title`.
pub fn chart(points: &[TrendPoint], title: &str) -> Scene {
    let mut scene = Scene {
        width: WIDTH,
        height: 2.0 * PANEL_H + 150.0,
        background: Rgb(0xfb, 0xfa, 0xf7),
        items: Vec::new(),
    };
    scene.text(WIDTH / 2.0, 30.0, title, 18.0, Anchor::Middle, INK, "title");
    let means: Vec<f64> = points.iter().map(|p| p.mean_nm).collect();
    let nus: Vec<f64> = points.iter().map(|p| p.nu_1sigma_pct).collect();
    panel(&mut scene, 60.0, &means, "mean thickness (nm)", points);
    panel(
        &mut scene,
        60.0 + PANEL_H + 40.0,
        &nus,
        "1σ non-uniformity (%)",
        points,
    );
    scene.text(
        LEFT,
        scene.height - 14.0,
        "centre line x̄, limits x̄ ± 3·MR̄/1.128 (individuals chart); ringed points lie beyond a limit or jump more than 3.267·MR̄",
        11.0,
        Anchor::Start,
        INK,
        "legend",
    );
    scene
}

fn panel(scene: &mut Scene, top: f64, values: &[f64], label: &str, points: &[TrendPoint]) {
    let plot_w = WIDTH - LEFT - RIGHT;
    let plot_h = PANEL_H - 40.0;
    let lim = limits(values);
    let mut lo = values
        .iter()
        .copied()
        .filter(|v| v.is_finite())
        .fold(f64::INFINITY, f64::min);
    let mut hi = values
        .iter()
        .copied()
        .filter(|v| v.is_finite())
        .fold(f64::NEG_INFINITY, f64::max);
    if let Some(l) = lim {
        lo = lo.min(l.lcl);
        hi = hi.max(l.ucl);
    }
    if !lo.is_finite() || !hi.is_finite() {
        scene.text(
            LEFT,
            top + plot_h / 2.0,
            format!("{label}: no data"),
            13.0,
            Anchor::Start,
            INK,
            "empty",
        );
        return;
    }
    if hi - lo < 1e-9 {
        lo -= 1.0;
        hi += 1.0;
    }
    let pad = 0.08 * (hi - lo);
    let (lo, hi) = (lo - pad, hi + pad);
    let y = |v: f64| top + plot_h * (1.0 - (v - lo) / (hi - lo));
    let n = values.len().max(1);
    let x = |i: usize| LEFT + plot_w * (i as f64 + 0.5) / n as f64;
    scene.items.push(Item::Rect {
        x: LEFT,
        y: top,
        w: plot_w,
        h: plot_h,
        fill: None,
        stroke: Some(Stroke::solid(GRID, 1.0)),
    });
    let ticks = nice_levels(lo, hi, 5);
    let dec = ticks.decimals;
    for t in ticks.values.iter().filter(|t| **t >= lo && **t <= hi) {
        scene.line(
            vec![(LEFT, y(*t)), (LEFT + plot_w, y(*t))],
            Stroke::solid(GRID, 0.7),
            "grid",
        );
        scene.text(
            LEFT - 8.0,
            y(*t) + 4.0,
            format!("{t:.dec$}"),
            11.0,
            Anchor::End,
            INK,
            "tick",
        );
    }
    scene.items.push(Item::Text {
        x: 20.0,
        y: top + plot_h / 2.0,
        text: label.to_string(),
        size: 12.0,
        anchor: Anchor::Middle,
        bold: false,
        colour: INK,
        vertical: true,
        class: "axis",
    });
    if let Some(l) = lim {
        let hline = |scene: &mut Scene, v: f64, dash: Option<(f64, f64)>, name: &str| {
            scene.line(
                vec![(LEFT, y(v)), (LEFT + plot_w, y(v))],
                Stroke {
                    colour: LIMIT,
                    width: 1.2,
                    dash,
                },
                "limit",
            );
            scene.text(
                LEFT + plot_w - 4.0,
                y(v) - 4.0,
                format!("{name} {v:.3}"),
                10.0,
                Anchor::End,
                LIMIT,
                "limit-label",
            );
        };
        hline(scene, l.center, None, "x̄");
        hline(scene, l.ucl, Some((6.0, 4.0)), "UCL");
        hline(scene, l.lcl, Some((6.0, 4.0)), "LCL");
    }
    let pts: Vec<(f64, f64)> = values
        .iter()
        .enumerate()
        .filter(|(_, v)| v.is_finite())
        .map(|(i, v)| (x(i), y(*v)))
        .collect();
    scene.line(pts.clone(), Stroke::solid(POINT, 1.2), "series");
    let flagged = lim.map(|l| signals(values, &l)).unwrap_or_default();
    for (i, v) in values.iter().enumerate().filter(|(_, v)| v.is_finite()) {
        let out = flagged.get(i).is_some_and(|s| !s.is_empty());
        scene.items.push(Item::Marker {
            x: x(i),
            y: y(*v),
            r: if out { 5.0 } else { 3.5 },
            site: i + 1,
            excluded: false,
            colour: if out { ALERT } else { POINT },
            halo: Rgb(0xff, 0xff, 0xff),
        });
    }
    let every = (n / 12).max(1);
    for (i, p) in points.iter().enumerate().step_by(every) {
        scene.text(
            x(i),
            top + plot_h + 16.0,
            &p.wafer,
            10.0,
            Anchor::Middle,
            INK,
            "run-label",
        );
    }
}
