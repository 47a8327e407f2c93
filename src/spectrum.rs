//! Spectra (placeholder).
