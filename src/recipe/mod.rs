//! Recipes: the schema of a stored map recipe, its validation with file positions, wafer
//! geometry and site patterns.

pub mod geometry;
pub mod pattern;
pub mod schema;
pub mod validate;

pub use crate::tomlcheck::Located;
pub use geometry::Wafer;
pub use pattern::Site;
pub use schema::Recipe;

use crate::optics::{MaterialLibrary, OpticsError};
use crate::tomlcheck::{self, Problem};
use std::path::{Path, PathBuf};

/// Why a recipe could not be loaded.
#[derive(Debug, thiserror::Error)]
pub enum RecipeError {
    #[error("cannot read recipe {}: {source}", path.display())]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{}", tomlcheck::join(.0))]
    Invalid(Vec<Located>),
}

/// A recipe read from a file, with where it came from.
#[derive(Debug, Clone)]
pub struct LoadedRecipe {
    pub recipe: Recipe,
    /// The file it was read from.
    pub path: PathBuf,
    /// The original text (frozen into run folders).
    pub text: String,
}

impl LoadedRecipe {
    /// Folder that relative paths in the recipe (table materials) are taken from.
    pub fn dir(&self) -> &Path {
        self.path.parent().unwrap_or(Path::new("."))
    }
    /// Wafer geometry.
    pub fn wafer(&self) -> Wafer {
        Wafer::from_spec(&self.recipe.wafer)
    }
    /// The built-in materials plus the recipe's own, table files read from [`Self::dir`].
    pub fn material_library(&self) -> Result<MaterialLibrary, OpticsError> {
        MaterialLibrary::with_materials(&self.recipe.materials, self.dir())
    }
    /// The numbered sites of the recipe's pattern.
    pub fn sites(&self) -> Vec<Site> {
        pattern::sites(&self.recipe.pattern, &self.wafer())
    }
}

/// Reads, parses and validates a recipe file; every problem is reported with its position.
pub fn load(path: &Path) -> Result<LoadedRecipe, RecipeError> {
    let bytes = std::fs::read(path).map_err(|source| RecipeError::Io {
        path: path.into(),
        source,
    })?;
    let text = String::from_utf8_lossy(&bytes).into_owned();
    parse(&text, path).map(|recipe| LoadedRecipe {
        recipe,
        path: path.into(),
        text,
    })
}

/// Parses and validates recipe text; `path` is used in messages and to find table files.
pub fn parse(text: &str, path: &Path) -> Result<Recipe, RecipeError> {
    let dir = path.parent().unwrap_or(Path::new("."));
    tomlcheck::parse_validated(text, path, |recipe: &Recipe| {
        let mut problems = validate::validate(recipe);
        // Table files are the one check that looks outside the text.
        for (name, spec) in &recipe.materials {
            if let schema::MaterialSpec::Table { file } = spec {
                let usable = crate::optics::spec::table_path_problem(file).is_none();
                if usable && !dir.join(file).is_file() {
                    problems.push(Problem::at(
                        &format!("materials.{name}.file"),
                        format!("table file {} not found", dir.join(file).display()),
                    ));
                }
            }
        }
        problems
    })
    .map_err(RecipeError::Invalid)
}
