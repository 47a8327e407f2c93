//! Map rendering entry points: what to draw ([`MapInput`]), how ([`RenderOptions`]), and the
//! two outputs, SVG text and PNG bytes, both from the same laid-out [`super::scene::Scene`].

use super::sites_table::SiteRow;
use super::{layout, png, svg, MapError};
use crate::recipe::Wafer;

/// Everything a map shows.
#[derive(Debug, Clone)]
pub struct MapInput {
    pub wafer: Wafer,
    pub rows: Vec<SiteRow>,
    /// Which layer column to map (0 = first fitted layer).
    pub layer: usize,
    /// Layer name for the title, e.g. `sio2`.
    pub layer_name: String,
    /// What the values are (`thickness`, `Δ thickness`, `rate`) and their unit (`nm`).
    pub quantity: String,
    pub unit: String,
    /// Title parts.
    pub recipe: String,
    pub wafer_id: String,
    pub time: String,
    /// Lot and operator, shown in the header when set.
    pub lot: String,
    pub operator: String,
    /// Specification window of the mapped values: out-of-spec sites are ringed.
    pub spec_nm: Option<[f64; 2]>,
}

impl MapInput {
    /// A thickness map (unit nm) of the given layer.
    pub fn thickness(wafer: Wafer, rows: Vec<SiteRow>, layer: usize, layer_name: &str) -> Self {
        MapInput {
            wafer,
            rows,
            layer,
            layer_name: layer_name.into(),
            quantity: "thickness".into(),
            unit: "nm".into(),
            recipe: String::new(),
            wafer_id: String::new(),
            time: String::new(),
            lot: String::new(),
            operator: String::new(),
            spec_nm: None,
        }
    }
}

/// A fixed colour range, so several maps share one scale.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ValueRange {
    pub lo: f64,
    pub hi: f64,
}

/// How to draw.
#[derive(Debug, Clone, PartialEq)]
pub struct RenderOptions {
    /// About how many isolines (nice levels are chosen near this count).
    pub levels: usize,
    /// Print each site's value beside its marker (when the sites are far enough apart).
    pub values: bool,
    /// Print each site's number above its marker (when the sites are far enough apart), so
    /// a site named in a list can be found on the map.
    pub numbers: bool,
    /// Colour range; `None` = the range of this map's values.
    pub range: Option<ValueRange>,
    /// Interpolation grid nodes across the usable diameter.
    pub grid: usize,
    /// PNG pixels per layout pixel (the page is 1200 × 780 layout pixels).
    pub png_scale: f64,
}

impl Default for RenderOptions {
    fn default() -> Self {
        RenderOptions {
            levels: 10,
            values: true,
            numbers: false,
            range: None,
            grid: 400,
            png_scale: 1.0,
        }
    }
}

/// The map page as SVG text (vector shapes, text as text).
pub fn render_svg(input: &MapInput, opts: &RenderOptions) -> String {
    svg::write(&layout::page(input, opts))
}

/// The map page as PNG bytes; text is drawn with the embedded DejaVu Sans font.
pub fn render_png(input: &MapInput, opts: &RenderOptions) -> Result<Vec<u8>, MapError> {
    png::write(&layout::page(input, opts), opts.png_scale)
}

/// The map page as SVG text and as PNG bytes, from one layout (the interpolation is the
/// costly part, done once), the two encodings written on two threads.
pub fn render_svg_and_png(
    input: &MapInput,
    opts: &RenderOptions,
) -> Result<(String, Vec<u8>), MapError> {
    let page = layout::page(input, opts);
    std::thread::scope(|scope| {
        let png = scope.spawn(|| png::write(&page, opts.png_scale));
        let svg = svg::write(&page);
        let png = png
            .join()
            .unwrap_or_else(|e| std::panic::resume_unwind(e))?;
        Ok((svg, png))
    })
}
