//! Thickness extraction from reflectance spectra.

pub mod result;

pub use result::{FitResult, LayerResult};
