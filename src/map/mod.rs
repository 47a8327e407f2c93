//! Maps: uniformity statistics, interpolation, contours and rendering (SVG/PNG).
//!
//! Data flows one way: [`sites_table`] rows → [`stats`] (figures per layer) and
//! [`interpolate`] (a field over the usable disc) → [`contour`] (isolines at [`levels`]) →
//! [`render`] (a page laid out once as a [`scene`], written as SVG or PNG). Everything here is
//! pure: a run folder's files are written by `run::outputs`.

pub mod colour;
pub mod contour;
pub mod error;
pub mod evidence;
pub mod interpolate;
pub mod layout;
pub mod levels;
pub mod pdf;
pub mod png;
pub mod radial;
pub mod render;
pub mod scene;
pub mod sheet;
pub mod site_plan;
pub mod sites_table;
pub mod stats;
pub mod svg;
pub mod verdict;
pub mod xy_plot;
pub mod zlib_pieces;

pub use error::MapError;
pub use render::{render_png, render_svg, render_svg_and_png, MapInput, RenderOptions, ValueRange};
pub use sites_table::SiteRow;
pub use stats::{LayerSummary, Summary};
pub use verdict::Verdict;
