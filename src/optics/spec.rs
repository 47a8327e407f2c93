//! How a user describes a material (the `[materials.NAME]` tables of a recipe), and the
//! numeric checks of such a description. Optics owns them: a new dispersion model is a
//! variant here, its checks in [`check`] and its evaluation in [`super::library`].

use super::coefficients;
use super::dispersion::{cauchy_n, sellmeier_n2, sellmeier_poles_um, Urbach};
use crate::tomlcheck::{Problem, Problems};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Component, Path};

/// A user material (λ in µm in every formula).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "model", rename_all = "lowercase", deny_unknown_fields)]
pub enum MaterialSpec {
    /// n = a + b/λ² + c/λ⁴, constant k plus an optional Urbach tail.
    Cauchy {
        a: f64,
        #[serde(default)]
        b: f64,
        #[serde(default)]
        c: f64,
        #[serde(default)]
        k: f64,
        /// A weak-absorption tail added to k.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        urbach: Option<Urbach>,
        /// Coefficients fitted to the spectra (see [`FitSpec`]).
        #[serde(default, skip_serializing_if = "Vec::is_empty")]
        fit: Vec<String>,
        /// `[lower, upper]` of fitted coefficients.
        #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
        bounds: BTreeMap<String, [f64; 2]>,
    },
    /// n² = 1 + Σ bᵢ λ²/(λ² − cᵢ), cᵢ in µm².
    Sellmeier {
        b: Vec<f64>,
        c: Vec<f64>,
        /// Coefficients fitted to the spectra (see [`FitSpec`]).
        #[serde(default, skip_serializing_if = "Vec::is_empty")]
        fit: Vec<String>,
        /// `[lower, upper]` of fitted coefficients.
        #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
        bounds: BTreeMap<String, [f64; 2]>,
    },
    /// CSV `wavelength_nm,n,k`, path relative to the recipe file.
    Table { file: String },
    /// Constant n and k.
    Constant {
        n: f64,
        #[serde(default)]
        k: f64,
    },
}

/// Which coefficients of a formula are fitted to the spectra, and their bounds (names as in
/// [`coefficients::names`]: `a`, `b`, `c`, `k`, `k0`, `beta` for Cauchy; `b1`, `c1`, … for
/// Sellmeier). The values written in the formula are the starting point; a coefficient
/// without bounds keeps only its physical limits.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitSpec<'a> {
    pub fit: &'a [String],
    pub bounds: &'a BTreeMap<String, [f64; 2]>,
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
        MaterialSpec::Cauchy {
            a, b, c, k, urbach, ..
        } => {
            check_k(*k, &mut r);
            if let Some(u) = urbach {
                check_urbach(name, u, window, &mut r);
            }
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
        MaterialSpec::Sellmeier { b, c, .. } => {
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
    check_fit(name, spec, &mut r);
    r.0
}

fn check_urbach(name: &str, u: &Urbach, window: Option<[f64; 2]>, r: &mut Problems) {
    if !(u.k0 >= 0.0 && u.k0 <= MAX_K) {
        r.at(
            "urbach.k0",
            format!(
                "material {name}: urbach.k0 = {} must be in [0, {MAX_K}]",
                u.k0
            ),
        );
    }
    if !(u.e0_ev > 0.0 && u.e0_ev.is_finite()) {
        r.at(
            "urbach.e0_ev",
            format!(
                "material {name}: urbach.e0_ev = {} must be a positive photon energy in eV",
                u.e0_ev
            ),
        );
    }
    if !u.beta_per_ev.is_finite() {
        r.at(
            "urbach.beta_per_ev",
            format!("material {name}: urbach.beta_per_ev must be a finite number (1/eV)"),
        );
    } else if let (Some(w), true) = (window, u.k0 <= MAX_K && u.e0_ev > 0.0) {
        let k = u.k(w[0]).max(u.k(w[1]));
        if !(k <= MAX_K) {
            r.at(
                "urbach.beta_per_ev",
                format!("material {name}: the Urbach tail reaches k = {k:.3e} inside the window {w:?} nm (at most {MAX_K})"),
            );
        }
    }
}

/// The fitted coefficients must exist in the formula, once each; bounds only for fitted
/// ones, lower < upper, holding the starting value.
fn check_fit(name: &str, spec: &MaterialSpec, r: &mut Problems) {
    let Some(fit) = spec.fit_spec() else { return };
    let known = coefficients::names(spec);
    let known: Vec<String> = known.iter().map(|s| s.to_string()).collect();
    for (i, f) in fit.fit.iter().enumerate() {
        let at = format!("fit[{i}]");
        if !known.contains(f) {
            r.at(
                &at,
                format!(
                    "material {name}: \"{f}\" is not a coefficient of this formula (fitted ones can be: {})",
                    known.join(", ")
                ),
            );
        } else if fit.fit[..i].contains(f) {
            r.at(&at, format!("material {name}: \"{f}\" is listed twice"));
        }
    }
    for (key, [lo, hi]) in fit.bounds {
        let at = format!("bounds.{key}");
        if !fit.fit.contains(key) {
            r.at(
                &at,
                format!("material {name}: bounds for \"{key}\", which is not in fit = [...]"),
            );
        } else if !(lo < hi) || !lo.is_finite() || !hi.is_finite() {
            r.at(
                &at,
                format!("material {name}: bounds.{key} = [{lo}, {hi}] must be finite with lower < upper"),
            );
        } else if let Some(v) = coefficients::get(spec, key) {
            if !(v >= *lo && v <= *hi) {
                r.at(
                    &at,
                    format!("material {name}: the starting value {key} = {v} lies outside its bounds [{lo}, {hi}]"),
                );
            }
        }
    }
}

impl MaterialSpec {
    /// The fitted coefficients and bounds of a formula that can have them.
    pub fn fit_spec(&self) -> Option<FitSpec<'_>> {
        match self {
            MaterialSpec::Cauchy { fit, bounds, .. }
            | MaterialSpec::Sellmeier { fit, bounds, .. } => Some(FitSpec { fit, bounds }),
            _ => None,
        }
    }

    /// Whether any coefficient is fitted.
    pub fn has_fitted_coefficients(&self) -> bool {
        self.fit_spec().is_some_and(|f| !f.fit.is_empty())
    }
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
