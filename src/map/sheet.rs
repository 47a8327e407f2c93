//! A sheet: several map pages tiled into one page (for comparing wafers on a common scale).

use super::scene::{Item, Scene};

/// Moves every item of a page by (dx, dy) px.
fn translate(item: &mut Item, dx: f64, dy: f64) {
    let shift = |p: &mut (f64, f64)| {
        p.0 += dx;
        p.1 += dy;
    };
    match item {
        Item::Rect { x, y, .. } | Item::Marker { x, y, .. } | Item::Text { x, y, .. } => {
            *x += dx;
            *y += dy;
        }
        Item::Path { points, .. } => points.iter_mut().for_each(shift),
        Item::Field(f) => {
            shift(&mut f.origin);
            f.clip.iter_mut().for_each(shift);
        }
    }
}

/// Draws `page` onto `into` with its top-left corner at (dx, dy) px (its background is not
/// drawn: `into`'s shows through).
pub fn place(into: &mut Scene, page: Scene, dx: f64, dy: f64) {
    for mut item in page.items {
        translate(&mut item, dx, dy);
        into.items.push(item);
    }
}

/// Tiles pages row by row, `columns` per row, into one page.
pub fn tile(pages: Vec<Scene>, columns: usize) -> Scene {
    let columns = columns.max(1);
    let w = pages.iter().map(|p| p.width).fold(0.0, f64::max);
    let h = pages.iter().map(|p| p.height).fold(0.0, f64::max);
    let rows = pages.len().div_ceil(columns);
    let background = pages
        .first()
        .map(|p| p.background)
        .unwrap_or(super::colour::Rgb(255, 255, 255));
    let mut out = Scene {
        width: w * columns.min(pages.len()).max(1) as f64,
        height: h * rows as f64,
        background,
        items: Vec::new(),
    };
    for (i, page) in pages.into_iter().enumerate() {
        let (dx, dy) = ((i % columns) as f64 * w, (i / columns) as f64 * h);
        place(&mut out, page, dx, dy);
    }
    out
}
