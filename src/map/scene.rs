//! A drawn page as plain data: shapes and text in pixel coordinates (y down), laid out once
//! by [`super::layout`] and written by [`super::svg`] or [`super::png`].

use super::colour::Rgb;
use super::contour::Polyline;
use super::interpolate::Grid;

/// Estimated width of `text` set at `size` px in DejaVu Sans, the page font: digits advance
/// 0.636 em (1303/2048 font units), spaces and stops 0.318 em, other lower-case letters about
/// 0.6 em and capitals about 0.72 em (font metrics, from memory). Used to keep labels apart.
pub fn text_width(text: &str, size: f64) -> f64 {
    let em: f64 = text
        .chars()
        .map(|c| match c {
            '0'..='9' => 0.636,
            ' ' | '.' | ',' | ':' | ';' | '(' | ')' | '|' => 0.33,
            '-' => 0.361,
            c if c.is_uppercase() => 0.72,
            _ => 0.62,
        })
        .sum();
    em * size
}

/// Horizontal text anchor.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Anchor {
    Start,
    Middle,
    End,
}

/// A stroke: colour, width in px, optional dash pattern.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Stroke {
    pub colour: Rgb,
    pub width: f64,
    pub dash: Option<(f64, f64)>,
}

impl Stroke {
    pub fn solid(colour: Rgb, width: f64) -> Stroke {
        Stroke {
            colour,
            width,
            dash: None,
        }
    }
}

/// The filled colour map: a value grid in wafer mm, drawn in colour bands between levels and
/// clipped to a polygon.
#[derive(Debug, Clone)]
pub struct FieldFill {
    pub grid: Grid,
    /// Band boundaries, ascending; band k lies between `bounds[k-1]` and `bounds[k]` (open
    /// at both ends).
    pub bounds: Vec<f64>,
    /// One colour per band (`bounds.len() + 1`).
    pub colours: Vec<Rgb>,
    /// Per bound, the closed outlines (mm) of the region at or above it
    /// ([`super::contour::closed_isolines`]): band k + 1 is their even-odd fill.
    pub loops: Vec<Vec<Polyline>>,
    /// Clip polygon (the usable outline), px.
    pub clip: Vec<(f64, f64)>,
    /// Pixel position of wafer (0, 0) and px per mm (y flipped).
    pub origin: (f64, f64),
    pub scale: f64,
}

impl FieldFill {
    /// Pixel position of a wafer point.
    pub fn to_px(&self, x: f64, y: f64) -> (f64, f64) {
        (
            self.origin.0 + x * self.scale,
            self.origin.1 - y * self.scale,
        )
    }
    /// Wafer point of a pixel position.
    pub fn to_mm(&self, px: f64, py: f64) -> (f64, f64) {
        (
            (px - self.origin.0) / self.scale,
            (self.origin.1 - py) / self.scale,
        )
    }
    /// Band index of a value.
    pub fn band(&self, v: f64) -> usize {
        self.bounds.partition_point(|&b| b <= v)
    }
}

/// One thing drawn.
#[derive(Debug, Clone)]
pub enum Item {
    Rect {
        x: f64,
        y: f64,
        w: f64,
        h: f64,
        fill: Option<Rgb>,
        stroke: Option<Stroke>,
    },
    /// A polyline or polygon.
    Path {
        points: Vec<(f64, f64)>,
        closed: bool,
        fill: Option<Rgb>,
        stroke: Option<Stroke>,
        class: &'static str,
    },
    /// A site marker: a dot for a valid site, a cross for an excluded one.
    Marker {
        x: f64,
        y: f64,
        r: f64,
        site: usize,
        excluded: bool,
        colour: Rgb,
        halo: Rgb,
    },
    Text {
        x: f64,
        y: f64,
        text: String,
        size: f64,
        anchor: Anchor,
        bold: bool,
        colour: Rgb,
        /// Rotated 90° counter-clockwise (for a vertical axis title).
        vertical: bool,
        class: &'static str,
    },
    Field(Box<FieldFill>),
}

/// A page: its size in px and what is on it, back to front.
#[derive(Debug, Clone)]
pub struct Scene {
    pub width: f64,
    pub height: f64,
    pub background: Rgb,
    pub items: Vec<Item>,
}

impl Scene {
    /// Adds text with the common defaults (not bold, horizontal).
    #[allow(clippy::too_many_arguments)]
    pub fn text(
        &mut self,
        x: f64,
        y: f64,
        text: impl Into<String>,
        size: f64,
        anchor: Anchor,
        colour: Rgb,
        class: &'static str,
    ) {
        self.items.push(Item::Text {
            x,
            y,
            text: text.into(),
            size,
            anchor,
            bold: false,
            colour,
            vertical: false,
            class,
        });
    }

    /// Adds a bold panel heading (15 px, start-anchored).
    pub fn heading(&mut self, x: f64, y: f64, text: &str, colour: Rgb) {
        self.items.push(Item::Text {
            x,
            y,
            text: text.into(),
            size: 15.0,
            anchor: Anchor::Start,
            bold: true,
            colour,
            vertical: false,
            class: "panel-title",
        });
    }

    /// Adds an unfilled path.
    pub fn line(&mut self, points: Vec<(f64, f64)>, stroke: Stroke, class: &'static str) {
        self.items.push(Item::Path {
            points,
            closed: false,
            fill: None,
            stroke: Some(stroke),
            class,
        });
    }
}
