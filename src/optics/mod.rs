//! Optics: materials (dispersion models, built-in library), layer stacks and
//! transfer-matrix reflectance. Pure code, no I/O beyond reading a user's n,k table.

pub mod builtin;
pub mod coefficients;
pub mod dispersion;
pub mod library;
pub mod material;
pub mod quadrature;
pub mod spec;
pub mod spline;
pub mod stack;
pub mod table;
pub mod tmm;

pub use library::MaterialLibrary;
pub use material::{Dispersion, Material};
pub use spec::MaterialSpec;
pub use stack::{Layer, Stack};
pub use table::NkTable;
pub use tmm::{
    amplitude, cone_samples, reflectance, reflectance_p, reflectance_s, transmittance, AngleSample,
    Polarisation,
};

use std::path::PathBuf;

/// Names of the built-in materials (a recipe's own `[materials.NAME]` wins over these).
pub const BUILTIN_NAMES: [&str; 7] = [
    "air",
    "si",
    "sio2",
    "si3n4",
    "resist",
    "si-aspnes",
    "si3n4-philipp",
];

/// Why a material could not be built.
#[derive(Debug, thiserror::Error)]
pub enum OpticsError {
    #[error("cannot read n,k table {}: {source}", path.display())]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{}:{line}: {message}", file.display())]
    Table {
        file: PathBuf,
        line: usize,
        message: String,
    },
    #[error("unknown material \"{name}\" (known: {known})")]
    UnknownMaterial { name: String, known: String },
    #[error("material {name}: {message}")]
    BadModel { name: String, message: String },
}
