//! The answer of a thickness fit (DESIGN.md §4 `isopach fit --json`, a contract).

use serde::{Deserialize, Serialize};

/// One fitted layer.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LayerResult {
    pub material: String,
    pub thickness_nm: f64,
    pub sigma_nm: f64,
}

/// A fit: method used, fitted layers (top first), goodness of fit in 0..1, flags.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FitResult {
    pub method: String,
    pub layers: Vec<LayerResult>,
    pub gof: f64,
    pub flags: Vec<String>,
}
