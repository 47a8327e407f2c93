//! Maps: uniformity statistics, interpolation, contours and rendering (SVG/PNG).

pub mod site_plan;
