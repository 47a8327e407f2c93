//! Spectra: the reflectance and raw-counts types, their CSV files (DESIGN.md §3),
//! dark/reference normalisation, window selection and smoothing. Pure except for the thin
//! file helpers [`read_csv`] and the `write_*` functions, which take any `io::Write`.

mod csv;
mod normalise;
mod process;
mod saturation;

pub use self::csv::{
    parse_csv, read_csv, write_counts_csv, write_reflectance_csv, SpectrumFile, MAX_FILE_BYTES,
    MAX_PIXELS,
};
pub use normalise::{assess, normalise, normalise_raw, SignalQuality};
pub use process::{noise_sigma, quadratic_fit, savitzky_golay};
pub use saturation::clipped_pixels;

use std::path::PathBuf;

/// A reflectance spectrum: fraction 0..1 at strictly increasing wavelengths.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Spectrum {
    pub wavelength_nm: Vec<f64>,
    pub reflectance: Vec<f64>,
}

/// Detector counts at strictly increasing wavelengths.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Counts {
    pub wavelength_nm: Vec<f64>,
    pub counts: Vec<f64>,
}

/// The three spectra a reflectance measurement is made of, on one wavelength axis.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct RawSpectrum {
    pub sample: Counts,
    pub dark: Counts,
    pub reference: Counts,
}

/// Why a spectrum could not be read or normalised.
#[derive(Debug, thiserror::Error)]
pub enum SpectrumError {
    #[error("cannot read spectrum {}: {source}", path.display())]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    /// A problem on one line of a spectrum file.
    #[error("{}:{line}: {message}", file.display())]
    Line {
        file: PathBuf,
        line: usize,
        message: String,
    },
    /// A file too large to be a spectrum (refused before it is parsed).
    #[error("spectrum {}: {message}", path.display())]
    TooLarge { path: PathBuf, message: String },
    /// A problem with spectra held in memory (named by pixel and wavelength).
    #[error("{0}")]
    Invalid(String),
}

impl Spectrum {
    /// Number of pixels.
    pub fn len(&self) -> usize {
        self.wavelength_nm.len()
    }

    /// Whether the spectrum has no pixels.
    pub fn is_empty(&self) -> bool {
        self.wavelength_nm.is_empty()
    }

    /// The pixels with `from ≤ λ ≤ to`.
    pub fn window(&self, from: f64, to: f64) -> Spectrum {
        let (w, r) = self
            .wavelength_nm
            .iter()
            .zip(&self.reflectance)
            .filter(|(w, _)| **w >= from && **w <= to)
            .map(|(w, r)| (*w, *r))
            .unzip();
        Spectrum {
            wavelength_nm: w,
            reflectance: r,
        }
    }

    /// The spectrum smoothed by a quadratic Savitzky–Golay filter of `2·half + 1` points.
    pub fn smoothed(&self, half: usize) -> Spectrum {
        Spectrum {
            wavelength_nm: self.wavelength_nm.clone(),
            reflectance: savitzky_golay(&self.reflectance, half),
        }
    }

    /// Checks the invariants the fitters rely on: equal lengths, finite values, strictly
    /// increasing positive wavelengths, at least `min_pixels` pixels.
    pub fn validate(&self, min_pixels: usize) -> Result<(), SpectrumError> {
        if self.wavelength_nm.len() != self.reflectance.len() {
            return Err(SpectrumError::Invalid(format!(
                "{} wavelengths but {} reflectance values",
                self.wavelength_nm.len(),
                self.reflectance.len()
            )));
        }
        if self.len() < min_pixels {
            return Err(SpectrumError::Invalid(format!(
                "{} pixels in the fitting window; at least {min_pixels} are needed: widen the window or check the wavelength column",
                self.len()
            )));
        }
        // One pass without branches for the usual, valid spectrum; the pixel to blame only
        // when it is not.
        let w = &self.wavelength_nm;
        let finite = w.iter().zip(&self.reflectance).fold(true, |ok, (w, r)| {
            ok & w.is_finite() & (*w > 0.0) & r.is_finite()
        });
        let rising = w[1..].iter().zip(w).fold(true, |ok, (b, a)| ok & (b > a));
        let fine = finite & rising;
        if fine {
            return Ok(());
        }
        for (i, (w, r)) in self.wavelength_nm.iter().zip(&self.reflectance).enumerate() {
            if !(w.is_finite() && *w > 0.0 && r.is_finite()) {
                return Err(SpectrumError::Invalid(format!(
                    "pixel {i}: wavelength {w} nm, reflectance {r} is not a finite value"
                )));
            }
            if i > 0 && *w <= self.wavelength_nm[i - 1] {
                return Err(SpectrumError::Invalid(format!(
                    "pixel {i}: wavelength {w} nm does not increase (previous {} nm)",
                    self.wavelength_nm[i - 1]
                )));
            }
        }
        Ok(())
    }
}
