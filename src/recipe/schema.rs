//! The recipe file schema (DESIGN.md §3, a contract): plain serde types, unknown keys rejected.
//!
//! These types say only what a recipe *is*; whether its values make sense is
//! [`super::validate`]'s job, and where a value sits in the file is [`crate::tomlcheck`]'s.
//! User materials are described by [`MaterialSpec`], owned by optics.

pub use crate::optics::spec::MaterialSpec;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// A stored map recipe: what wafer, which sites, which film stack, how to fit and accept.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Recipe {
    /// Short identifier, used in run ids and history.
    pub name: String,
    /// Free text shown in reports.
    #[serde(default)]
    pub description: String,
    pub wafer: WaferSpec,
    pub pattern: PatternSpec,
    pub film: FilmSpec,
    #[serde(default)]
    pub acquire: AcquireSpec,
    #[serde(default)]
    pub accept: AcceptSpec,
    /// User materials by name; a recipe's own name wins over a built-in one.
    #[serde(default)]
    pub materials: BTreeMap<String, MaterialSpec>,
}

/// Wafer geometry as written in the recipe.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct WaferSpec {
    pub diameter_mm: f64,
    pub edge_exclusion_mm: f64,
    #[serde(default)]
    pub orientation: OrientationKind,
    /// Where the flat or notch sits, wafer frame, degrees counter-clockwise from +x.
    #[serde(default = "default_orientation_angle")]
    pub orientation_angle_deg: f64,
}

fn default_orientation_angle() -> f64 {
    270.0
}

/// Which orientation mark the wafer carries.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum OrientationKind {
    Flat,
    Notch,
    #[default]
    None,
}

/// Site pattern as written in the recipe; `kind` selects which keys apply.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "lowercase", deny_unknown_fields)]
pub enum PatternSpec {
    /// Optional centre site plus rings of sites.
    Polar {
        #[serde(default = "default_true")]
        center: bool,
        /// Sites per ring, inner to outer.
        rings: Vec<u32>,
        /// Explicit ring radii (mm); default evenly spaced out to the usable radius.
        #[serde(default)]
        radii_mm: Option<Vec<f64>>,
        /// Angle of the first site of every ring, degrees CCW from +x.
        #[serde(default)]
        start_angle_deg: f64,
        /// Rotate every other ring by half its angular step.
        #[serde(default)]
        stagger: bool,
    },
    /// Square grid clipped to the usable disc.
    Grid {
        pitch_mm: f64,
        #[serde(default)]
        offset_mm: [f64; 2],
    },
    /// Sites listed by hand, wafer coordinates in mm.
    Custom { sites_mm: Vec<[f64; 2]> },
    /// A pattern in common use, by its site count.
    Standard { sites: u32 },
}

fn default_true() -> bool {
    true
}

/// The film stack and how to fit it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FilmSpec {
    pub ambient: String,
    pub substrate: String,
    /// Layers, top (ambient side) first.
    pub layers: Vec<LayerSpec>,
    /// Fitting window `[from, to]` in nm.
    pub wavelength_nm: [f64; 2],
    #[serde(default)]
    pub method: FitMethod,
    #[serde(default)]
    pub incidence_deg: f64,
    /// Numerical aperture of the illumination cone; 0 = collimated.
    #[serde(default)]
    pub na: f64,
    /// Also fit an intensity scale factor (a reference taken at another focus).
    #[serde(default, skip_serializing_if = "is_false")]
    pub fit_scale: bool,
    /// Also fit a linear tilt of the intensity across the window (a slow baseline drift).
    #[serde(default, skip_serializing_if = "is_false")]
    pub fit_tilt: bool,
    /// How a material's fitted coefficients are fitted: per site, or one dispersion shared
    /// by every site of a run.
    #[serde(default, skip_serializing_if = "DispersionMode::is_site")]
    pub dispersion: DispersionMode,
}

/// Where fitted dispersion coefficients are fitted.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum DispersionMode {
    /// With the thickness of each site, on its own spectrum.
    #[default]
    Site,
    /// Jointly over every site of a run: one n(λ), a thickness per site.
    Shared,
}

impl DispersionMode {
    fn is_site(&self) -> bool {
        *self == DispersionMode::Site
    }
}

fn is_false(b: &bool) -> bool {
    !*b
}

/// One film layer.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LayerSpec {
    pub material: String,
    pub nominal_nm: f64,
    #[serde(default)]
    pub min_nm: Option<f64>,
    #[serde(default)]
    pub max_nm: Option<f64>,
    /// Whether the thickness is fitted (true) or held at `nominal_nm`.
    #[serde(default = "default_true")]
    pub fit: bool,
}

impl LayerSpec {
    /// Lower bound of the search range (default: a tenth of nominal).
    pub fn min(&self) -> f64 {
        self.min_nm.unwrap_or(self.nominal_nm * 0.1)
    }
    /// Upper bound of the search range (default: twice nominal).
    pub fn max(&self) -> f64 {
        self.max_nm.unwrap_or(self.nominal_nm * 2.0)
    }
}

/// Thickness extraction method.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum FitMethod {
    #[default]
    Auto,
    Model,
    Fourier,
    Extrema,
}

impl FitMethod {
    /// The name as written in recipes and reports.
    pub fn as_str(self) -> &'static str {
        match self {
            FitMethod::Auto => "auto",
            FitMethod::Model => "model",
            FitMethod::Fourier => "fourier",
            FitMethod::Extrema => "extrema",
        }
    }
}

/// Spectrometer settings per site.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AcquireSpec {
    #[serde(default = "default_integration")]
    pub integration_ms: f64,
    #[serde(default = "default_averages")]
    pub averages: u32,
    #[serde(default = "default_settle")]
    pub settle_ms: f64,
    /// How many times a low-signal or poor-fit site is measured again before it is flagged.
    #[serde(default = "default_retries")]
    pub retries: u32,
}

fn default_integration() -> f64 {
    20.0
}
fn default_averages() -> u32 {
    4
}
fn default_settle() -> f64 {
    150.0
}
fn default_retries() -> u32 {
    1
}

impl Default for AcquireSpec {
    fn default() -> Self {
        AcquireSpec {
            integration_ms: default_integration(),
            averages: default_averages(),
            settle_ms: default_settle(),
            retries: default_retries(),
        }
    }
}

/// Acceptance criteria: for a site (`min_gof`, `spec_nm`) and, optionally, limits a completed
/// run must meet to pass (on the first fitted layer's figures; see `map::verdict`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AcceptSpec {
    #[serde(default = "default_min_gof")]
    pub min_gof: f64,
    /// Specification window for the (first fitted) thickness; out-of-spec sites are flagged.
    #[serde(default)]
    pub spec_nm: Option<[f64; 2]>,
    /// The run's mean thickness must lie in `[lo, hi]` nm (bounds inclusive).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub mean_nm: Option<[f64; 2]>,
    /// The run's 1σ (sample standard deviation) must be at most this, nm.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_std_nm: Option<f64>,
    /// The run's non-uniformity 100·σ/mean must be at most this, %.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_nu_pct: Option<f64>,
    /// At least this share of the planned sites must have a valid result, %.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub min_valid_pct: Option<f64>,
}

fn default_min_gof() -> f64 {
    0.95
}

impl Default for AcceptSpec {
    fn default() -> Self {
        AcceptSpec {
            min_gof: default_min_gof(),
            spec_nm: None,
            mean_nm: None,
            max_std_nm: None,
            max_nu_pct: None,
            min_valid_pct: None,
        }
    }
}
