//! How a user describes a material (the `[materials.NAME]` tables of a recipe), and the
//! numeric checks of such a description. Optics owns them: a new dispersion model is a
//! variant here, its checks in [`check`] and its evaluation in [`super::library`].

use super::dispersion::{cauchy_n, sellmeier_n2, sellmeier_poles_um};
use crate::tomlcheck::{Problem, Problems};
use serde::{Deserialize, Serialize};
use std::path::{Component, Path};

/// A user material (λ in µm in every formula).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "model", rename_all = "lowercase", deny_unknown_fields)]
pub enum MaterialSpec {
    /// n = a + b/λ² + c/λ⁴, constant k.
    Cauchy {
        a: f64,
        #[serde(default)]
        b: f64,
        #[serde(default)]
        c: f64,
        #[serde(default)]
        k: f64,
    },
    /// n² = 1 + Σ bᵢ λ²/(λ² − cᵢ), cᵢ in µm².
    Sellmeier { b: Vec<f64>, c: Vec<f64> },
    /// CSV `wavelength_nm,n,k`, path relative to the recipe file.
    Table { file: String },
    /// Constant n and k.
    Constant {
        n: f64,
        #[serde(default)]
        k: f64,
    },
}

/// Highest real index accepted. Solids used in thin-film work stay below about 6 in the
/// visible and near infrared (germanium, lead telluride; common practice): a larger value is
/// a typing slip, and huge ones overflow the transfer matrices.
pub const MAX_N: f64 = 10.0;
/// Highest extinction coefficient accepted; metals stay below about 10 there (common practice).
pub const MAX_K: f64 = 20.0;

/// Wavelengths (µm) at which a user's formula is sampled to check its index.
fn samples_um(window_nm: [f64; 2]) -> impl Iterator<Item = f64> {
    (0..=64).map(move |i| (window_nm[0] + (window_nm[1] - window_nm[0]) * i as f64 / 64.0) / 1000.0)
}

/// Checks a material description; `window` is the fitting window in nm when it is valid.
/// Problems carry key paths relative to the material's own table (`k`, `b`, `file`).
pub fn check(name: &str, spec: &MaterialSpec, window: Option<[f64; 2]>) -> Vec<Problem> {
    let mut r = Problems::default();
    let check_k = |k: f64, r: &mut Problems| {
        if k < 0.0 {
            r.at(
                "k",
                format!("material {name}: k = {k} is negative (k ≥ 0 means absorption)"),
            );
        } else if !(k <= MAX_K) {
            r.at(
                "k",
                format!("material {name}: k = {k} is above {MAX_K}, more than any real material"),
            );
        }
    };
    match spec {
        MaterialSpec::Cauchy { a, b, c, k } => {
            check_k(*k, &mut r);
            let finite = [a, b, c].iter().all(|v| v.is_finite());
            if let (Some(w), true) = (window, finite) {
                if let Some(n) = samples_um(w)
                    .map(|l| cauchy_n(*a, *b, *c, l))
                    .find(|n| !(*n >= 1.0 && *n <= MAX_N))
                {
                    let why = if n < 1.0 {
                        "(< 1)"
                    } else {
                        "(above the largest accepted index)"
                    };
                    r.at(
                        "a",
                        format!(
                            "material {name}: n reaches {n:.4} {why} inside the window {w:?} nm"
                        ),
                    );
                }
            }
        }
        MaterialSpec::Sellmeier { b, c } => {
            if b.len() != c.len() || b.is_empty() {
                r.at(
                    "c",
                    format!(
                        "material {name}: {} b terms and {} c terms; give one c per b",
                        b.len(),
                        c.len()
                    ),
                );
                return r.0;
            }
            let finite = b.iter().chain(c).all(|v| v.is_finite());
            if let (Some(w), true) = (window, finite) {
                let (lo, hi) = (w[0] / 1000.0, w[1] / 1000.0);
                if let Some(p) = sellmeier_poles_um(c)
                    .into_iter()
                    .find(|p| *p >= lo && *p <= hi)
                {
                    r.at("c", format!("material {name}: a Sellmeier pole at {:.1} nm lies inside the window {w:?} nm", p * 1000.0));
                } else if let Some(n2) = samples_um(w)
                    .map(|l| sellmeier_n2(b, c, l))
                    .find(|n2| !(*n2 >= 1.0 && *n2 <= MAX_N * MAX_N))
                {
                    r.at("b", format!("material {name}: n² reaches {n2:.4} (n must stay in [1, {MAX_N}]) inside the window {w:?} nm"));
                }
            }
        }
        MaterialSpec::Constant { n, k } => {
            if !(*n >= 1.0 && *n <= MAX_N) {
                r.at(
                    "n",
                    format!("material {name}: n = {n} must be in [1, {MAX_N}]"),
                );
            }
            check_k(*k, &mut r);
        }
        MaterialSpec::Table { file } => {
            if let Some(why) = table_path_problem(file) {
                r.at("file", format!("material {name}: {why}"));
            }
        }
    }
    r.0
}

/// Why a table path cannot be used, if it cannot: it must name a file inside the recipe's
/// folder, so a recipe never reads (and a run folder never copies) a file from elsewhere.
pub fn table_path_problem(file: &str) -> Option<String> {
    let p = Path::new(file);
    if file.trim().is_empty() {
        Some("no table file given".into())
    } else if p.has_root() || p.is_absolute() {
        Some(format!(
            "table file \"{file}\" is an absolute path: give a path relative to the recipe's folder, such as \"nk/film.csv\""
        ))
    } else if p.components().any(|c| matches!(c, Component::ParentDir)) {
        Some(format!(
            "table file \"{file}\" leaves the recipe's folder (\"..\"): keep n,k tables beside the recipe or below it"
        ))
    } else {
        None
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn table_paths_stay_inside_the_recipe_folder() {
        assert_eq!(table_path_problem("nk/film.csv"), None);
        assert!(table_path_problem("/etc/passwd")
            .unwrap()
            .contains("absolute"));
        assert!(table_path_problem("nk/../../x.csv")
            .unwrap()
            .contains("leaves"));
        assert!(table_path_problem(" ").is_some());
    }

    #[test]
    fn constant_index_must_be_finite_and_sane() {
        let p = check(
            "m",
            &MaterialSpec::Constant {
                n: f64::INFINITY,
                k: 0.0,
            },
            None,
        );
        assert_eq!(p.len(), 1);
        assert_eq!(p[0].path.to_string(), "n");
        assert!(check("m", &MaterialSpec::Constant { n: 1.5, k: 0.0 }, None).is_empty());
    }
}
