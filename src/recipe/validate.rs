//! Recipe validation: every problem at once, each tied to the key it concerns.
//!
//! Pure: takes a parsed [`Recipe`] and returns [`Problem`]s with a key path; the loader turns
//! paths into file, line and column.

use super::geometry::Wafer;
use super::pattern::{self, STANDARD_COUNTS};
use super::schema::{FilmSpec, MaterialSpec, PatternSpec, Recipe};
use crate::optics::dispersion::{cauchy_n, sellmeier_n2, sellmeier_poles_um};
use crate::optics::BUILTIN_NAMES;
use std::fmt;

/// One step of a key path into the recipe document.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Seg {
    Key(String),
    Index(usize),
}

/// A key path such as `film.layers[0].material`.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct KeyPath(pub Vec<Seg>);

impl KeyPath {
    /// Parses `a.b[2].c` (keys with dots are not expected in recipes).
    pub fn parse(s: &str) -> KeyPath {
        let mut segs = Vec::new();
        for part in s.split('.').filter(|p| !p.is_empty()) {
            let mut rest = part;
            if let Some(i) = rest.find('[') {
                segs.push(Seg::Key(rest[..i].to_string()));
                rest = &rest[i..];
                while let Some(end) = rest.find(']') {
                    if let Ok(n) = rest[1..end].parse() {
                        segs.push(Seg::Index(n));
                    }
                    rest = &rest[end + 1..];
                }
            } else {
                segs.push(Seg::Key(rest.to_string()));
            }
        }
        KeyPath(segs)
    }
}

impl fmt::Display for KeyPath {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for (i, s) in self.0.iter().enumerate() {
            match s {
                Seg::Key(k) if i == 0 => write!(f, "{k}")?,
                Seg::Key(k) => write!(f, ".{k}")?,
                Seg::Index(n) => write!(f, "[{n}]")?,
            }
        }
        Ok(())
    }
}

/// A validation problem: where (key path) and what, in plain words.
#[derive(Debug, Clone, PartialEq)]
pub struct Problem {
    pub path: KeyPath,
    pub message: String,
}

/// Collects problems with less ceremony.
#[derive(Default)]
pub struct Report(pub Vec<Problem>);

impl Report {
    /// Adds a problem unless `value` is finite and inside `[lo, hi]`.
    pub fn range(&mut self, path: &str, value: f64, lo: f64, hi: f64, unit: &str) {
        if !(value >= lo && value <= hi) {
            self.at(
                path,
                format!("{value} {unit} is outside [{lo}, {hi}] {unit}"),
            );
        }
    }

    /// Adds a problem at a key path written like `film.layers[0].material`.
    pub fn at(&mut self, path: &str, message: impl Into<String>) {
        self.0.push(Problem {
            path: KeyPath::parse(path),
            message: message.into(),
        });
    }
}

/// Wavelengths a fitting window may use, nm.
pub const WINDOW_LIMITS_NM: [f64; 2] = [200.0, 2000.0];
/// Diameters accepted, mm.
pub const DIAMETER_LIMITS_MM: [f64; 2] = [25.0, 450.0];
/// Most layers whose thickness can be fitted at once.
pub const MAX_FITTED_LAYERS: usize = 3;

/// Validates a recipe; an empty list means it is good.
pub fn validate(recipe: &Recipe) -> Vec<Problem> {
    let mut r = Report::default();
    if recipe.name.trim().is_empty() {
        r.at("name", "the recipe name is empty");
    }
    match check_wafer(recipe, &mut r) {
        WaferCheck::Good => check_pattern(recipe, &Wafer::from_spec(&recipe.wafer), &mut r),
        // With a bad exclusion, listed sites can still be checked against the wafer itself.
        WaferCheck::BadExclusion => {
            let mut spec = recipe.wafer.clone();
            spec.edge_exclusion_mm = 0.0;
            check_pattern(recipe, &Wafer::from_spec(&spec), &mut r)
        }
        WaferCheck::BadDiameter => {}
    }
    check_film(recipe, &mut r);
    check_acquire(recipe, &mut r);
    r.0
}

/// How far the wafer section is usable for checking the pattern.
enum WaferCheck {
    Good,
    BadExclusion,
    BadDiameter,
}

fn check_wafer(recipe: &Recipe, r: &mut Report) -> WaferCheck {
    let w = &recipe.wafer;
    if !w.orientation_angle_deg.is_finite() {
        r.at(
            "wafer.orientation_angle_deg",
            "orientation angle is not a number",
        );
    }
    let [lo, hi] = DIAMETER_LIMITS_MM;
    if !(w.diameter_mm >= lo && w.diameter_mm <= hi) {
        r.at(
            "wafer.diameter_mm",
            format!("diameter {} mm is outside {lo}–{hi} mm", w.diameter_mm),
        );
        return WaferCheck::BadDiameter;
    }
    if !(w.edge_exclusion_mm >= 0.0) {
        r.at(
            "wafer.edge_exclusion_mm",
            "edge exclusion must be zero or more",
        );
        return WaferCheck::BadExclusion;
    }
    if w.edge_exclusion_mm >= w.diameter_mm / 2.0 {
        r.at(
            "wafer.edge_exclusion_mm",
            format!(
                "edge exclusion {} mm leaves nothing to measure: it must be smaller than the radius {} mm",
                w.edge_exclusion_mm,
                w.diameter_mm / 2.0
            ),
        );
        return WaferCheck::BadExclusion;
    }
    WaferCheck::Good
}

fn check_pattern(recipe: &Recipe, wafer: &Wafer, r: &mut Report) {
    let usable = wafer.usable_radius();
    match &recipe.pattern {
        PatternSpec::Polar {
            rings, radii_mm, ..
        } => {
            if rings.is_empty() {
                r.at(
                    "pattern.rings",
                    "rings is empty: give the number of sites on each ring, e.g. [8, 16]",
                );
            }
            for (i, n) in rings.iter().enumerate() {
                if *n == 0 {
                    r.at(
                        &format!("pattern.rings[{i}]"),
                        format!("ring {} has zero sites", i + 1),
                    );
                }
            }
            if let Some(radii) = radii_mm {
                if radii.len() != rings.len() {
                    r.at(
                        "pattern.radii_mm",
                        format!(
                            "{} radii given for {} rings: give one radius per ring",
                            radii.len(),
                            rings.len()
                        ),
                    );
                }
                for (i, rad) in radii.iter().enumerate() {
                    if !(*rad > 0.0) || *rad > usable + 1e-9 {
                        r.at(
                            &format!("pattern.radii_mm[{i}]"),
                            format!("ring radius {rad} mm is outside (0, {usable}] mm, the usable radius"),
                        );
                    }
                }
            }
        }
        PatternSpec::Grid { pitch_mm, .. } => {
            if !(*pitch_mm > 0.0) {
                r.at(
                    "pattern.pitch_mm",
                    format!("grid pitch {pitch_mm} mm must be greater than zero"),
                );
            } else if pattern::sites(&recipe.pattern, wafer).is_empty() {
                r.at(
                    "pattern.pitch_mm",
                    format!("grid pitch {pitch_mm} mm with this offset puts no site inside the usable disc (radius {usable} mm)"),
                );
            }
        }
        PatternSpec::Custom { sites_mm } => {
            if sites_mm.is_empty() {
                r.at(
                    "pattern.sites_mm",
                    "sites_mm is empty: list at least one [x, y] site",
                );
            }
            for (i, p) in sites_mm.iter().enumerate() {
                let out = wafer.outside_usable_by(p[0], p[1]);
                if out > 1e-9 || !p[0].is_finite() || !p[1].is_finite() {
                    r.at(
                        &format!("pattern.sites_mm[{i}]"),
                        format!(
                            "site {} at ({}, {}) mm lies {:.2} mm outside {}",
                            i + 1,
                            p[0],
                            p[1],
                            out,
                            if wafer.edge_exclusion_mm > 0.0 {
                                format!(
                                    "the usable area (edge exclusion {} mm)",
                                    wafer.edge_exclusion_mm
                                )
                            } else {
                                "the wafer".to_string()
                            }
                        ),
                    );
                }
            }
        }
        PatternSpec::Standard { sites } => {
            if pattern::standard_rings(*sites).is_none() {
                r.at(
                    "pattern.sites",
                    format!(
                        "no standard pattern has {sites} sites; choose one of {STANDARD_COUNTS:?}"
                    ),
                );
            }
        }
    }
}

fn check_film(recipe: &Recipe, r: &mut Report) {
    let film = &recipe.film;
    let [wlo, whi] = film.wavelength_nm;
    let [llo, lhi] = WINDOW_LIMITS_NM;
    let window_ok = wlo < whi && wlo >= llo && whi <= lhi;
    if !(wlo < whi) {
        r.at("film.wavelength_nm", format!("wavelength window [{wlo}, {whi}] nm is reversed or empty: write it as [from, to] with from < to"));
    } else if !(wlo >= llo && whi <= lhi) {
        r.at(
            "film.wavelength_nm",
            format!("wavelength window [{wlo}, {whi}] nm reaches outside {llo}–{lhi} nm"),
        );
    }
    let known = known_materials(recipe);
    let check_name = |path: &str, name: &str, r: &mut Report| {
        if !known.iter().any(|k| k == name) {
            let hint = nearest(name, &known)
                .map(|n| format!("; did you mean \"{n}\"?"))
                .unwrap_or_default();
            r.at(
                path,
                format!(
                    "unknown material \"{name}\"{hint} (known: {})",
                    known.join(", ")
                ),
            );
        }
    };
    check_name("film.ambient", &film.ambient, r);
    check_name("film.substrate", &film.substrate, r);
    if film.layers.is_empty() {
        r.at(
            "film.layers",
            "layers is empty: give at least one layer, top first",
        );
    }
    for (i, layer) in film.layers.iter().enumerate() {
        let at = |k: &str| format!("film.layers[{i}].{k}");
        check_name(&at("material"), &layer.material, r);
        let (min, max) = (layer.min(), layer.max());
        if !(min >= 0.0) {
            r.at(
                &at("min_nm"),
                format!("layer {}: min_nm {min} must be zero or more", i + 1),
            );
        }
        if !(min < max) {
            r.at(
                &at("min_nm"),
                format!(
                    "layer {}: min_nm {min} must be smaller than max_nm {max}",
                    i + 1
                ),
            );
        } else if !(layer.nominal_nm >= min && layer.nominal_nm <= max) {
            r.at(
                &at("nominal_nm"),
                format!(
                    "layer {}: nominal_nm {} is outside [min_nm, max_nm] = [{min}, {max}]",
                    i + 1,
                    layer.nominal_nm
                ),
            );
        }
    }
    let fitted = film.layers.iter().filter(|l| l.fit).count();
    if !film.layers.is_empty() && fitted == 0 {
        r.at(
            "film.layers",
            "no layer is fitted: set fit = true on at least one",
        );
    }
    if fitted > MAX_FITTED_LAYERS {
        r.at(
            "film.layers",
            format!("{fitted} fitted layers; at most {MAX_FITTED_LAYERS} can be fitted at once"),
        );
    }
    if !(film.incidence_deg >= 0.0 && film.incidence_deg < 85.0) {
        r.at(
            "film.incidence_deg",
            format!("incidence {}° must be in [0, 85)", film.incidence_deg),
        );
    }
    if !(film.na >= 0.0 && film.na < 1.0) {
        r.at(
            "film.na",
            format!("numerical aperture {} must be in [0, 1)", film.na),
        );
    }
    for (name, spec) in &recipe.materials {
        check_material(name, spec, window_ok.then_some(film.wavelength_nm), r);
    }
    if let Some([lo, hi]) = recipe.accept.spec_nm {
        if !(lo < hi) {
            r.at(
                "accept.spec_nm",
                format!("spec window [{lo}, {hi}] nm is reversed or empty"),
            );
        }
    }
    if !(recipe.accept.min_gof >= 0.0 && recipe.accept.min_gof <= 1.0) {
        r.at(
            "accept.min_gof",
            format!("min_gof {} must be in [0, 1]", recipe.accept.min_gof),
        );
    }
}

fn check_acquire(recipe: &Recipe, r: &mut Report) {
    let a = &recipe.acquire;
    if !(a.integration_ms > 0.0 && a.integration_ms <= 60_000.0) {
        r.at(
            "acquire.integration_ms",
            format!(
                "integration time {} ms must be in (0, 60000]",
                a.integration_ms
            ),
        );
    }
    if a.averages == 0 {
        r.at("acquire.averages", "averages must be at least 1");
    }
    if !(a.settle_ms >= 0.0 && a.settle_ms <= 60_000.0) {
        r.at(
            "acquire.settle_ms",
            format!("settle time {} ms must be in [0, 60000]", a.settle_ms),
        );
    }
}

/// Material names a recipe may use: its own plus the built-ins.
pub fn known_materials(recipe: &Recipe) -> Vec<String> {
    let mut names: Vec<String> = recipe.materials.keys().cloned().collect();
    for b in BUILTIN_NAMES {
        if !names.iter().any(|n| n == b) {
            names.push(b.to_string());
        }
    }
    names
}

/// Wavelengths (µm) at which a user's formula is sampled to check n ≥ 1.
fn samples_um(window_nm: [f64; 2]) -> impl Iterator<Item = f64> {
    (0..=64).map(move |i| (window_nm[0] + (window_nm[1] - window_nm[0]) * i as f64 / 64.0) / 1000.0)
}

fn check_material(name: &str, spec: &MaterialSpec, window: Option<[f64; 2]>, r: &mut Report) {
    let at = |k: &str| format!("materials.{name}.{k}");
    match spec {
        MaterialSpec::Cauchy { a, b, c, k } => {
            if *k < 0.0 {
                r.at(
                    &at("k"),
                    format!("material {name}: k = {k} is negative (k ≥ 0 means absorption)"),
                );
            }
            if let Some(w) = window {
                if let Some(n) = samples_um(w)
                    .map(|l| cauchy_n(*a, *b, *c, l))
                    .find(|n| !(*n >= 1.0))
                {
                    r.at(
                        &at("a"),
                        format!(
                            "material {name}: n falls to {n:.4} (< 1) inside the window {w:?} nm"
                        ),
                    );
                }
            }
        }
        MaterialSpec::Sellmeier { b, c } => {
            if b.len() != c.len() || b.is_empty() {
                r.at(
                    &at("c"),
                    format!(
                        "material {name}: {} b terms and {} c terms; give one c per b",
                        b.len(),
                        c.len()
                    ),
                );
                return;
            }
            if let Some(w) = window {
                let (lo, hi) = (w[0] / 1000.0, w[1] / 1000.0);
                if let Some(p) = sellmeier_poles_um(c)
                    .into_iter()
                    .find(|p| *p >= lo && *p <= hi)
                {
                    r.at(&at("c"), format!("material {name}: a Sellmeier pole at {:.1} nm lies inside the window {w:?} nm", p * 1000.0));
                } else if let Some(n2) = samples_um(w)
                    .map(|l| sellmeier_n2(b, c, l))
                    .find(|n2| !(*n2 >= 1.0))
                {
                    r.at(&at("b"), format!("material {name}: n² falls to {n2:.4} (n < 1) inside the window {w:?} nm"));
                }
            }
        }
        MaterialSpec::Constant { n, k } => {
            if !(*n >= 1.0) {
                r.at(&at("n"), format!("material {name}: n = {n} is below 1"));
            }
            if *k < 0.0 {
                r.at(
                    &at("k"),
                    format!("material {name}: k = {k} is negative (k ≥ 0 means absorption)"),
                );
            }
        }
        MaterialSpec::Table { file } => {
            if file.trim().is_empty() {
                r.at(&at("file"), format!("material {name}: no table file given"));
            }
        }
    }
}

/// The known name closest to `name` by edit distance, if it is close enough to be a typo.
pub fn nearest<'a>(name: &str, known: &'a [String]) -> Option<&'a str> {
    let name = name.to_lowercase();
    known
        .iter()
        .map(|k| (edit_distance(&name, &k.to_lowercase()), k))
        .filter(|(d, k)| *d <= (k.len().max(name.len()) / 2).max(1))
        .min_by_key(|(d, _)| *d)
        .map(|(_, k)| k.as_str())
}

/// Levenshtein distance over chars.
fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut cur = vec![i + 1; b.len() + 1];
        for (j, cb) in b.iter().enumerate() {
            cur[j + 1] = (prev[j] + usize::from(ca != *cb))
                .min(prev[j + 1] + 1)
                .min(cur[j] + 1);
        }
        prev = cur;
    }
    prev[b.len()]
}

/// The fitted layers of a film, with their index in the stack.
pub fn fitted_layers(film: &FilmSpec) -> impl Iterator<Item = (usize, &super::schema::LayerSpec)> {
    film.layers.iter().enumerate().filter(|(_, l)| l.fit)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn key_paths_round_trip() {
        for s in ["film.layers[0].material", "pattern.sites_mm[3]", "name"] {
            assert_eq!(KeyPath::parse(s).to_string(), s);
        }
    }

    #[test]
    fn suggests_close_names_only() {
        let known: Vec<String> = BUILTIN_NAMES.iter().map(|s| s.to_string()).collect();
        assert_eq!(nearest("si02", &known), Some("sio2"));
        assert_eq!(nearest("SiN4", &known), Some("si3n4"));
        assert_eq!(nearest("unobtainium", &known), None);
    }
}
