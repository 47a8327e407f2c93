//! Thickness extraction from a reflectance spectrum: the `model` fit (global search +
//! Levenberg–Marquardt), the `fourier` and `extrema` methods, `auto`, and the quality flags.
//! One [`Fitter`] is built per recipe and fits every spectrum of a map.

pub mod dispersion;
pub mod extrema;
mod fitter;
pub mod fourier;
pub mod instrument;
pub mod kernel;
pub mod lanes;
pub mod lm;
pub mod model;
pub mod plot;
pub mod quality;
mod result;
pub mod shared;

pub use fitter::Fitter;
pub use result::{FitResult, LayerResult, Term};

use std::path::PathBuf;

/// Why a fitter could not be built or a spectrum not fitted.
#[derive(Debug, thiserror::Error)]
pub enum FitError {
    #[error(transparent)]
    Optics(#[from] crate::optics::OpticsError),
    #[error(transparent)]
    Spectrum(#[from] crate::spectrum::SpectrumError),
    #[error("recipe {}: {message}", recipe.display())]
    Recipe { recipe: PathBuf, message: String },
    #[error("{method} method: {message}")]
    Method {
        method: &'static str,
        message: String,
    },
}
