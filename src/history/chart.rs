//! The run chart of a trend: mean thickness and % non-uniformity per run, each with its centre
//! line and ±3σ individuals limits; points beyond the limits are ringed. Each point takes the
//! colour of the bench that measured the run, named in a legend. The mean panel shows the
//! spec window of the newest run (when its recipe sets one); each run is labelled with its
//! wafer and the date it started.
//!
//! Built as a [`Scene`] so the map writers give both SVG (text as text) and PNG.

use super::control::{limits, signals};
use super::db::TrendPoint;
use crate::map::colour::Rgb;
use crate::map::scene::{Anchor, Item, Scene, Stroke};
use crate::map::xy_plot::{padded_range, Axis, PlotStyle, Ticks, XyPlot};

const WIDTH: f64 = 1000.0;
const PANEL_H: f64 = 260.0;
const LEFT: f64 = 90.0;
const RIGHT: f64 = 30.0;
const INK: Rgb = Rgb(0x22, 0x2a, 0x33);
const GRID: Rgb = Rgb(0xd8, 0xdc, 0xe0);
const POINT: Rgb = Rgb(0x1f, 0x5f, 0x8b);
const LIMIT: Rgb = Rgb(0xa0, 0x52, 0x2d);
const ALERT: Rgb = Rgb(0xc0, 0x1c, 0x28);
const SPEC: Rgb = Rgb(0x3b, 0x6e, 0x3b);
/// Bench colours, told apart on screen and in grey print (none is the alert red).
const BENCH_COLOURS: [Rgb; 6] = [
    POINT,
    Rgb(0xe0, 0x8a, 0x00),
    Rgb(0x2e, 0x8b, 0x57),
    Rgb(0x6a, 0x3d, 0x9a),
    Rgb(0x00, 0x9e, 0xb0),
    Rgb(0x8c, 0x56, 0x4b),
];

/// The benches of `points` in order of first appearance, each with its colour.
pub fn bench_colours(points: &[TrendPoint]) -> Vec<(String, Rgb)> {
    let mut out: Vec<(String, Rgb)> = Vec::new();
    for p in points {
        if !out.iter().any(|(b, _)| *b == p.bench) {
            let colour = BENCH_COLOURS[out.len() % BENCH_COLOURS.len()];
            out.push((p.bench.clone(), colour));
        }
    }
    out
}

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
    let benches = bench_colours(points);
    let colours: Vec<Rgb> = points
        .iter()
        .map(|p| {
            benches
                .iter()
                .find(|(b, _)| *b == p.bench)
                .map_or(POINT, |(_, c)| *c)
        })
        .collect();
    panel(
        &mut scene,
        60.0,
        (&means, spec_window(points)),
        "mean thickness (nm)",
        points,
        &colours,
    );
    panel(
        &mut scene,
        60.0 + PANEL_H + 40.0,
        (&nus, None),
        "1σ non-uniformity (%)",
        points,
        &colours,
    );
    bench_legend(&mut scene, &benches);
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

/// One marker and name per bench, above the limits' legend.
fn bench_legend(scene: &mut Scene, benches: &[(String, Rgb)]) {
    let y = scene.height - 40.0;
    scene.text(
        LEFT,
        y + 4.0,
        "bench:",
        11.0,
        Anchor::Start,
        INK,
        "bench-legend",
    );
    let mut x = LEFT + 50.0;
    for (i, (name, colour)) in benches.iter().enumerate() {
        scene.items.push(Item::Marker {
            x,
            y,
            r: 4.0,
            site: i + 1,
            excluded: false,
            colour: *colour,
            halo: Rgb(0xff, 0xff, 0xff),
        });
        let shown = if name.is_empty() { "(unknown)" } else { name };
        scene.text(
            x + 8.0,
            y + 4.0,
            shown,
            11.0,
            Anchor::Start,
            INK,
            "bench-name",
        );
        x += 24.0 + 6.5 * shown.chars().count() as f64;
    }
}

/// The spec window of the newest run that has one, nm.
pub fn spec_window(points: &[TrendPoint]) -> Option<(f64, f64)> {
    points
        .iter()
        .rev()
        .find(|p| p.spec_lo_nm.is_finite() && p.spec_hi_nm.is_finite())
        .map(|p| (p.spec_lo_nm, p.spec_hi_nm))
}

/// A run's label under the chart: its wafer and the day it started (`W07 12-02`).
fn run_label(p: &TrendPoint) -> String {
    match p.started.get(5..10) {
        Some(day) => format!("{} {day}", p.wafer),
        None => p.wafer.clone(),
    }
}

/// One panel: `values` with their control limits and, when given, the spec window.
fn panel(
    scene: &mut Scene,
    top: f64,
    (values, spec): (&[f64], Option<(f64, f64)>),
    label: &str,
    points: &[TrendPoint],
    colours: &[Rgb],
) {
    let plot_h = PANEL_H - 40.0;
    let lim = limits(values);
    let with_limits = values
        .iter()
        .copied()
        .chain(lim.iter().flat_map(|l| [l.lcl, l.ucl]))
        .chain(spec.iter().flat_map(|&(lo, hi)| [lo, hi]));
    let Some((lo, hi)) = padded_range(with_limits, 0.08, 1.0) else {
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
    };
    let n = values.len().max(1);
    let every = (n / 12).max(1);
    let run_labels = points
        .iter()
        .enumerate()
        .step_by(every)
        .map(|(i, p)| (i as f64, run_label(p)))
        .collect();
    let plot = XyPlot {
        left: LEFT,
        top,
        right: WIDTH - RIGHT,
        bottom: top + plot_h,
        // One slot per run, the point in its middle.
        x: Axis {
            lo: -0.5,
            hi: n as f64 - 0.5,
            title: String::new(),
            ticks: Ticks::Labels(run_labels),
        },
        y: Axis {
            lo,
            hi,
            title: label.to_string(),
            ticks: Ticks::Round(5),
        },
        y_title_x: 20.0,
        style: PlotStyle {
            ink: INK,
            muted: INK,
            grid: Rgb(0xe6, 0xe9, 0xec),
            frame: GRID,
            fill: None,
            tick_size: 10.5,
            title_size: 12.0,
        },
    };
    plot.axes(scene);
    if let Some(l) = lim {
        for (v, dash, name) in [
            (l.center, None, "x̄"),
            (l.ucl, Some((6.0, 4.0)), "UCL"),
            (l.lcl, Some((6.0, 4.0)), "LCL"),
        ] {
            let stroke = Stroke {
                colour: LIMIT,
                width: 1.2,
                dash,
            };
            plot.hline(scene, v, stroke, "limit");
            scene.text(
                plot.right - 4.0,
                plot.py(v) - 4.0,
                format!("{name} {v:.3}"),
                10.0,
                Anchor::End,
                LIMIT,
                "limit-label",
            );
        }
    }
    if let Some((lo, hi)) = spec {
        for (v, name) in [(hi, "USL"), (lo, "LSL")] {
            plot.hline(scene, v, Stroke::solid(SPEC, 1.6), "spec");
            scene.text(
                plot.left + 4.0,
                plot.py(v) - 4.0,
                format!("spec {name} {v}"),
                10.0,
                Anchor::Start,
                SPEC,
                "spec-label",
            );
        }
    }
    let series: Vec<(f64, f64)> = values
        .iter()
        .enumerate()
        .map(|(i, v)| (i as f64, *v))
        .collect();
    plot.line(scene, &series, Stroke::solid(POINT, 1.2), "series");
    let flagged = lim.map(|l| signals(values, &l)).unwrap_or_default();
    for (i, v) in values.iter().enumerate().filter(|(_, v)| v.is_finite()) {
        let out = flagged.get(i).is_some_and(|s| !s.is_empty());
        let (x, y) = (plot.px(i as f64), plot.py(*v));
        if out {
            // The ring: an alert disc behind the bench-coloured point.
            scene.items.push(Item::Marker {
                x,
                y,
                r: 7.0,
                site: i + 1,
                excluded: false,
                colour: ALERT,
                halo: ALERT,
            });
        }
        scene.items.push(Item::Marker {
            x,
            y,
            r: if out { 4.5 } else { 3.5 },
            site: i + 1,
            excluded: false,
            colour: colours.get(i).copied().unwrap_or(POINT),
            halo: Rgb(0xff, 0xff, 0xff),
        });
    }
}
