//! One XY plot on a [`Scene`]: a frame, grid lines, round ticks with labels, axis titles and
//! series (lines, dots, reference lines) in data coordinates. The radial profile of the map
//! page, the trend's run chart and the fit plot are all drawn with it, so they share one
//! look and one tick rule ([`super::levels::nice_levels`]).

use super::colour::Rgb;
use super::levels::{decimals_for, nice_levels};
use super::scene::{text_width, Anchor, Item, Scene, Stroke};

/// Colours and sizes of a plot.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PlotStyle {
    /// Axis titles.
    pub ink: Rgb,
    /// Tick labels.
    pub muted: Rgb,
    /// Grid lines.
    pub grid: Rgb,
    /// Frame outline.
    pub frame: Rgb,
    /// Fill inside the frame (`None` = the page shows through).
    pub fill: Option<Rgb>,
    /// Tick label size, px.
    pub tick_size: f64,
    /// Axis title size, px.
    pub title_size: f64,
}

/// How an axis is marked.
#[derive(Debug, Clone, PartialEq)]
pub enum Ticks {
    /// About this many round values (1, 2, 2.5 or 5 × 10ⁿ apart), each with a grid line.
    Round(usize),
    /// Round values as above, labels only (no grid line).
    RoundNoGrid(usize),
    /// Given labels at given positions (categories, e.g. runs), no grid lines.
    Labels(Vec<(f64, String)>),
}

/// One axis: its data range (`lo` at the left or bottom), title and ticks.
#[derive(Debug, Clone, PartialEq)]
pub struct Axis {
    pub lo: f64,
    pub hi: f64,
    pub title: String,
    pub ticks: Ticks,
}

/// A plot frame in page px and the two axes that map data into it.
#[derive(Debug, Clone, PartialEq)]
pub struct XyPlot {
    /// Frame: left, top, right, bottom px.
    pub left: f64,
    pub top: f64,
    pub right: f64,
    pub bottom: f64,
    pub x: Axis,
    pub y: Axis,
    /// Where the vertical y-axis title is centred, px from the page's left edge.
    pub y_title_x: f64,
    pub style: PlotStyle,
}

/// Round tick values inside `[lo, hi]` (ends included) about `target` of them, and the
/// decimals that print them exactly. Empty for an empty or non-finite range.
pub fn ticks(lo: f64, hi: f64, target: usize) -> (Vec<f64>, usize) {
    let step = nice_levels(lo, hi, target).step;
    if !(step.is_finite() && step > 0.0) {
        return (Vec::new(), 1);
    }
    let eps = 1e-9 * step;
    let first = ((lo - eps) / step).ceil() as i64;
    let last = ((hi + eps) / step).floor() as i64;
    let values = (first..=last).map(|i| i as f64 * step).collect();
    (values, decimals_for(step))
}

/// The range of the finite `values` widened by `pad` of its span on both sides; a single
/// value gets `±flat` around it. `None` when no value is finite.
pub fn padded_range(
    values: impl IntoIterator<Item = f64>,
    pad: f64,
    flat: f64,
) -> Option<(f64, f64)> {
    let (lo, hi) = values
        .into_iter()
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(v), b.max(v))
        });
    if !lo.is_finite() {
        return None;
    }
    let (lo, hi) = if hi - lo < 1e-9 * lo.abs().max(1.0) {
        (lo - flat, hi + flat)
    } else {
        (lo, hi)
    };
    let p = pad * (hi - lo);
    Some((lo - p, hi + p))
}

impl XyPlot {
    /// Page x of a data x.
    pub fn px(&self, x: f64) -> f64 {
        self.left + (x - self.x.lo) / (self.x.hi - self.x.lo) * (self.right - self.left)
    }

    /// Page y of a data y (up is larger).
    pub fn py(&self, y: f64) -> f64 {
        self.bottom - (y - self.y.lo) / (self.y.hi - self.y.lo) * (self.bottom - self.top)
    }

    /// Width of the widest y tick label, px.
    pub fn y_label_width(&self) -> f64 {
        marks(&self.y)
            .iter()
            .map(|m| text_width(&m.1, self.style.tick_size))
            .fold(0.0, f64::max)
    }

    /// The rightmost x of the vertical y-axis title's baseline that keeps its glyphs (which
    /// reach 0.24 em right of the baseline, the font's descent) clear of the tick labels.
    pub fn y_title_limit(&self) -> f64 {
        self.left - 6.0 - self.y_label_width() - 3.0 - 0.24 * self.style.title_size
    }

    /// Draws the frame, grid lines, tick labels and axis titles.
    pub fn axes(&self, scene: &mut Scene) {
        let st = self.style;
        scene.items.push(Item::Rect {
            x: self.left,
            y: self.top,
            w: self.right - self.left,
            h: self.bottom - self.top,
            fill: st.fill,
            stroke: Some(Stroke::solid(st.frame, 1.0)),
        });
        let grid = Stroke::solid(st.grid, 0.8);
        // A grid line on the frame would only thicken it.
        let inside = |p: f64, a: f64, b: f64| p > a.min(b) + 0.5 && p < a.max(b) - 0.5;
        for (x, label, with_grid) in marks(&self.x) {
            let px = self.px(x);
            if with_grid && inside(px, self.left, self.right) {
                scene.line(vec![(px, self.top), (px, self.bottom)], grid, "grid");
            }
            let y = self.bottom + st.tick_size + 4.5;
            scene.text(px, y, label, st.tick_size, Anchor::Middle, st.muted, "tick");
        }
        for (y, label, with_grid) in marks(&self.y) {
            let py = self.py(y);
            if with_grid && inside(py, self.top, self.bottom) {
                scene.line(vec![(self.left, py), (self.right, py)], grid, "grid");
            }
            let at = py + 0.38 * st.tick_size;
            scene.text(
                self.left - 6.0,
                at,
                label,
                st.tick_size,
                Anchor::End,
                st.muted,
                "tick",
            );
        }
        if !self.x.title.is_empty() {
            scene.text(
                0.5 * (self.left + self.right),
                self.bottom + 2.0 * st.tick_size + 12.0,
                self.x.title.clone(),
                st.title_size,
                Anchor::Middle,
                st.ink,
                "axis",
            );
        }
        if !self.y.title.is_empty() {
            scene.items.push(Item::Text {
                x: self.y_title_x.min(self.y_title_limit()),
                y: 0.5 * (self.top + self.bottom),
                text: self.y.title.clone(),
                size: st.title_size,
                anchor: Anchor::Middle,
                bold: false,
                colour: st.ink,
                vertical: true,
                class: "axis",
            });
        }
    }

    /// A line through the finite points (data coordinates), clamped to the frame's height.
    pub fn line(
        &self,
        scene: &mut Scene,
        points: &[(f64, f64)],
        stroke: Stroke,
        class: &'static str,
    ) {
        let px: Vec<(f64, f64)> = points
            .iter()
            .filter(|(x, y)| x.is_finite() && y.is_finite())
            .map(|&(x, y)| (self.px(x), self.py(y).clamp(self.top, self.bottom)))
            .collect();
        if px.len() >= 2 {
            scene.line(px, stroke, class);
        }
    }

    /// A filled dot of radius `r` px at each finite point.
    pub fn dots(
        &self,
        scene: &mut Scene,
        points: &[(f64, f64)],
        r: f64,
        colour: Rgb,
        class: &'static str,
    ) {
        for &(x, y) in points
            .iter()
            .filter(|(x, y)| x.is_finite() && y.is_finite())
        {
            scene.items.push(Item::Path {
                points: circle_points(self.px(x), self.py(y), r, 12),
                closed: true,
                fill: Some(colour),
                stroke: None,
                class,
            });
        }
    }

    /// A horizontal line across the frame at data `y`.
    pub fn hline(&self, scene: &mut Scene, y: f64, stroke: Stroke, class: &'static str) {
        let py = self.py(y);
        scene.line(vec![(self.left, py), (self.right, py)], stroke, class);
    }

    /// A vertical line across the frame at data `x`.
    pub fn vline(&self, scene: &mut Scene, x: f64, stroke: Stroke, class: &'static str) {
        let px = self.px(x);
        scene.line(vec![(px, self.top), (px, self.bottom)], stroke, class);
    }
}

/// Positions, labels and whether each has a grid line.
fn marks(axis: &Axis) -> Vec<(f64, String, bool)> {
    let round = |n: usize, grid: bool| {
        let (values, dec) = ticks(axis.lo, axis.hi, n);
        values
            .into_iter()
            .map(|v| (v, format!("{:.dec$}", v + 0.0), grid))
            .collect()
    };
    match &axis.ticks {
        Ticks::Round(n) => round(*n, true),
        Ticks::RoundNoGrid(n) => round(*n, false),
        Ticks::Labels(l) => l.iter().map(|(v, s)| (*v, s.clone(), false)).collect(),
    }
}

/// A small `n`-gon standing for a circle (drawn identically in SVG and PNG).
pub fn circle_points(cx: f64, cy: f64, r: f64, n: usize) -> Vec<(f64, f64)> {
    (0..n)
        .map(|k| {
            let a = std::f64::consts::TAU * k as f64 / n as f64;
            (cx + r * a.cos(), cy + r * a.sin())
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ticks_are_round_and_include_the_ends_when_round() {
        let (t, dec) = ticks(400.0, 1000.0, 5);
        assert_eq!(t, vec![400.0, 500.0, 600.0, 700.0, 800.0, 900.0, 1000.0]);
        assert_eq!(dec, 0);
        let (t, dec) = ticks(-0.03, 0.72, 5);
        assert_eq!(t.len(), 4);
        assert!(
            (t[0] - 0.0).abs() < 1e-12 && (t[3] - 0.6).abs() < 1e-12,
            "{t:?}"
        );
        assert_eq!(dec, 1);
        assert!(ticks(1.0, 1.0, 5).0.is_empty());
    }

    #[test]
    fn data_maps_into_the_frame_with_y_up() {
        let plot = XyPlot {
            left: 100.0,
            top: 50.0,
            right: 300.0,
            bottom: 250.0,
            x: Axis {
                lo: 0.0,
                hi: 10.0,
                title: String::new(),
                ticks: Ticks::Round(5),
            },
            y: Axis {
                lo: -1.0,
                hi: 1.0,
                title: String::new(),
                ticks: Ticks::Round(5),
            },
            y_title_x: 10.0,
            style: PlotStyle {
                ink: Rgb(0, 0, 0),
                muted: Rgb(0, 0, 0),
                grid: Rgb(0, 0, 0),
                frame: Rgb(0, 0, 0),
                fill: None,
                tick_size: 10.0,
                title_size: 11.0,
            },
        };
        assert_eq!(
            (plot.px(0.0), plot.px(10.0), plot.px(5.0)),
            (100.0, 300.0, 200.0)
        );
        assert_eq!(
            (plot.py(-1.0), plot.py(1.0), plot.py(0.0)),
            (250.0, 50.0, 150.0)
        );
    }

    #[test]
    fn padded_range_pads_and_widens_a_single_value() {
        assert_eq!(
            padded_range([1.0, f64::NAN, 3.0], 0.5, 1.0),
            Some((0.0, 4.0))
        );
        assert_eq!(padded_range([2.0, 2.0], 0.0, 0.5), Some((1.5, 2.5)));
        assert_eq!(padded_range([f64::NAN], 0.1, 1.0), None);
    }
}
