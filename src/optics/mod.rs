//! Optics: materials (dispersion models, built-in library), layer stacks and
//! transfer-matrix reflectance. Pure code, no I/O beyond reading a user's n,k table.

pub mod dispersion;

/// Names of the built-in materials (a recipe's own `[materials.NAME]` wins over these).
pub const BUILTIN_NAMES: [&str; 5] = ["air", "si", "sio2", "si3n4", "resist"];
