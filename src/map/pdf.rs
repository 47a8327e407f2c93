//! PDF output: a [`Scene`] written as SVG ([`super::svg`]) and turned into one PDF page in
//! pure Rust by `svg2pdf`, with the DejaVu Sans faces embedded in the binary, so text stays
//! text (searchable, `pdftotext` reads it) and no browser or system font is needed.

use super::scene::Scene;
use super::{svg, MapError};
use svg2pdf::usvg;

/// The scene as the bytes of a one-page PDF, 1 layout px = 1/96 inch.
pub fn write(scene: &Scene) -> Result<Vec<u8>, MapError> {
    let text = svg::write(scene);
    let mut options = usvg::Options::default();
    let fonts = options.fontdb_mut();
    fonts.load_font_data(dejavu::sans::regular().to_vec());
    fonts.load_font_data(dejavu::sans::bold().to_vec());
    fonts.set_sans_serif_family("DejaVu Sans");
    let tree = usvg::Tree::from_str(&text, &options)
        .map_err(|e| MapError::Pdf(format!("the page's SVG could not be read back: {e}")))?;
    svg2pdf::to_pdf(
        &tree,
        svg2pdf::ConversionOptions::default(),
        svg2pdf::PageOptions::default(),
    )
    .map_err(|e| MapError::Pdf(e.to_string()))
}
