//! A layer stack: ambient, thin layers (top, ambient side, first) and a semi-infinite substrate.

use super::material::Material;

/// One thin layer.
#[derive(Debug, Clone, PartialEq)]
pub struct Layer {
    pub material: Material,
    pub thickness_nm: f64,
}

/// Ambient | layers (top first) | substrate.
#[derive(Debug, Clone, PartialEq)]
pub struct Stack {
    pub ambient: Material,
    pub layers: Vec<Layer>,
    pub substrate: Material,
}

impl Stack {
    /// A bare substrate under the ambient.
    pub fn bare(ambient: Material, substrate: Material) -> Stack {
        Stack {
            ambient,
            layers: Vec::new(),
            substrate,
        }
    }

    /// Adds a layer below the ones already there (builder style, top first).
    pub fn with_layer(mut self, material: Material, thickness_nm: f64) -> Stack {
        self.layers.push(Layer {
            material,
            thickness_nm,
        });
        self
    }
}
