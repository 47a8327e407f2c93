//! Recipes: the schema of a stored map recipe, its validation with file positions, wafer
//! geometry and site patterns.

pub mod geometry;
pub mod locate;
pub mod pattern;
pub mod schema;
pub mod validate;

pub use geometry::Wafer;
pub use pattern::Site;
pub use schema::Recipe;

use std::fmt;
use std::path::{Path, PathBuf};

/// A problem located in a file: `FILE:LINE:COL: message`.
#[derive(Debug, Clone, PartialEq)]
pub struct Located {
    pub file: PathBuf,
    pub line: usize,
    pub col: usize,
    pub message: String,
}

impl fmt::Display for Located {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{}:{}:{}: {}",
            self.file.display(),
            self.line,
            self.col,
            self.message
        )
    }
}

/// Why a recipe could not be loaded.
#[derive(Debug, thiserror::Error)]
pub enum RecipeError {
    #[error("cannot read recipe {}: {source}", path.display())]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{}", list(.0))]
    Invalid(Vec<Located>),
}

fn list(problems: &[Located]) -> String {
    problems
        .iter()
        .map(|p| p.to_string())
        .collect::<Vec<_>>()
        .join("\n")
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
    let at = |offset: usize, message: String| {
        let lc = locate::line_col(text, offset);
        Located {
            file: path.into(),
            line: lc.line,
            col: lc.col,
            message,
        }
    };
    let recipe: Recipe = match toml::from_str(text) {
        Ok(r) => r,
        Err(e) => {
            let offset = e.span().map(|s| s.start).unwrap_or(0);
            return Err(RecipeError::Invalid(vec![at(
                offset,
                e.message().trim().to_string(),
            )]));
        }
    };
    let mut problems: Vec<Located> = validate::validate(&recipe)
        .into_iter()
        .map(|p| {
            let lc = locate::locate(text, &p.path).unwrap_or(locate::LineCol { line: 1, col: 1 });
            Located {
                file: path.into(),
                line: lc.line,
                col: lc.col,
                message: format!("{}: {}", p.path, p.message),
            }
        })
        .collect();
    let dir = path.parent().unwrap_or(Path::new("."));
    for (name, spec) in &recipe.materials {
        if let schema::MaterialSpec::Table { file } = spec {
            if !file.trim().is_empty() && !dir.join(file).is_file() {
                let key = validate::KeyPath::parse(&format!("materials.{name}.file"));
                let lc = locate::locate(text, &key).unwrap_or(locate::LineCol { line: 1, col: 1 });
                problems.push(Located {
                    file: path.into(),
                    line: lc.line,
                    col: lc.col,
                    message: format!("{key}: table file {} not found", dir.join(file).display()),
                });
            }
        }
    }
    if problems.is_empty() {
        Ok(recipe)
    } else {
        problems.sort_by_key(|p| (p.line, p.col));
        Err(RecipeError::Invalid(problems))
    }
}
