//! The materials a recipe can use: the built-ins plus the recipe's own `[materials.NAME]`
//! descriptions (a recipe's name wins over a built-in one).

use super::material::{Dispersion, Material};
use super::spec::MaterialSpec;
use super::table::NkTable;
use super::{builtin, OpticsError};
use std::collections::BTreeMap;
use std::path::Path;
use std::sync::Arc;

/// Materials by name.
#[derive(Debug, Clone)]
pub struct MaterialLibrary {
    materials: BTreeMap<String, Material>,
}

impl MaterialLibrary {
    /// The built-in materials only.
    pub fn builtin() -> MaterialLibrary {
        MaterialLibrary {
            materials: builtin::all()
                .into_iter()
                .map(|m| (m.name().to_string(), m))
                .collect(),
        }
    }

    /// The built-ins plus a recipe's own materials (which win over built-ins of the same
    /// name); table files are read relative to `recipe_dir`.
    pub fn with_materials(
        materials: &BTreeMap<String, MaterialSpec>,
        recipe_dir: &Path,
    ) -> Result<MaterialLibrary, OpticsError> {
        let mut lib = MaterialLibrary::builtin();
        for (name, spec) in materials {
            lib.insert(from_spec(name, spec, recipe_dir)?);
        }
        Ok(lib)
    }

    /// Adds or replaces a material.
    pub fn insert(&mut self, material: Material) {
        self.materials.insert(material.name().to_string(), material);
    }

    /// The material called `name`.
    pub fn get(&self, name: &str) -> Option<&Material> {
        self.materials.get(name)
    }

    /// The material called `name`, or an error listing the known names.
    pub fn require(&self, name: &str) -> Result<&Material, OpticsError> {
        self.get(name).ok_or_else(|| OpticsError::UnknownMaterial {
            name: name.to_string(),
            known: self
                .materials
                .keys()
                .cloned()
                .collect::<Vec<_>>()
                .join(", "),
        })
    }

    /// Names of all materials.
    pub fn names(&self) -> impl Iterator<Item = &str> {
        self.materials.keys().map(String::as_str)
    }
}

/// A material from its recipe description.
pub fn from_spec(
    name: &str,
    spec: &MaterialSpec,
    recipe_dir: &Path,
) -> Result<Material, OpticsError> {
    let dispersion = match spec {
        MaterialSpec::Cauchy {
            a, b, c, k, urbach, ..
        } => {
            let d = Dispersion::Cauchy {
                a: *a,
                b: *b,
                c: *c,
                k: *k,
            };
            return Ok(Material::new(name, d).with_tail(*urbach));
        }
        MaterialSpec::Sellmeier { b, c, .. } => {
            if b.len() != c.len() || b.is_empty() {
                return Err(OpticsError::BadModel {
                    name: name.to_string(),
                    message: format!(
                        "{} b terms and {} c terms; give one c per b",
                        b.len(),
                        c.len()
                    ),
                });
            }
            Dispersion::Sellmeier {
                b: b.clone(),
                c: c.clone(),
            }
        }
        MaterialSpec::Constant { n, k } => Dispersion::Constant { n: *n, k: *k },
        MaterialSpec::Table { file } => {
            Dispersion::Table(Arc::new(NkTable::read_csv(&recipe_dir.join(file))?))
        }
    };
    Ok(Material::new(name, dispersion))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn recipe_material_wins_over_builtin() {
        let materials = BTreeMap::from([(
            "sio2".to_string(),
            MaterialSpec::Constant { n: 1.5, k: 0.0 },
        )]);
        let lib = MaterialLibrary::with_materials(&materials, Path::new(".")).unwrap();
        assert_eq!(lib.get("sio2").unwrap().index(500.0).re, 1.5);
        assert!(lib.get("si").is_some());
        let e = lib.require("sio").unwrap_err().to_string();
        assert!(e.contains("sio2"), "{e}");
    }
}
