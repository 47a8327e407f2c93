//! Recipe rules: every problem at once, each tied to the key it concerns.
//!
//! Pure: takes a parsed [`Recipe`] and returns [`Problem`]s with a key path; the generic
//! machinery (key paths, reading past type errors, file positions) is [`crate::tomlcheck`].
//! Everything a run would refuse is a problem here, before any folder or port is opened.

use super::geometry::Wafer;
use super::pattern::{self, STANDARD_COUNTS};
use super::schema::{AcceptSpec, DispersionMode, FilmSpec, FitMethod, PatternSpec, Recipe};
use crate::optics::{spec, BUILTIN_NAMES};
use crate::tomlcheck::{nearest, num, KeyPath, Problem, Problems, Seg};

/// Wavelengths a fitting window may use, nm.
pub const WINDOW_LIMITS_NM: [f64; 2] = [200.0, 2000.0];
/// Diameters accepted, mm.
pub const DIAMETER_LIMITS_MM: [f64; 2] = [25.0, 450.0];
/// Most layers whose thickness can be fitted at once.
pub const MAX_FITTED_LAYERS: usize = 3;
/// Most layers a stack may have (the fitting kernel holds this many; `fit` asserts it).
pub const MAX_LAYERS: usize = 16;
/// Most sites a map may have. At a few seconds a site, 10 000 sites is a day of stage time;
/// a larger map is a typing slip, and its plan and route would not fit in memory or time.
pub const MAX_SITES: u64 = 10_000;
/// Thickest film (nominal or search bound) accepted, nm. Beyond 100 µm the fringes,
/// λ²/(2nd) ≈ 0.6 nm apart at 420 nm in n = 1.5, are finer than a spectrometer pixel
/// resolves; larger numbers are typing slips that would only make the search unbounded.
pub const MAX_THICKNESS_NM: f64 = 100_000.0;
/// Most averages or retries per site (each multiplies the time per site).
pub const MAX_AVERAGES: u32 = 10_000;
pub const MAX_RETRIES: u32 = 100;

/// Validates a recipe; an empty list means it is good.
pub fn validate(recipe: &Recipe) -> Vec<Problem> {
    let mut r = Problems::default();
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

fn check_wafer(recipe: &Recipe, r: &mut Problems) -> WaferCheck {
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

fn check_pattern(recipe: &Recipe, wafer: &Wafer, r: &mut Problems) {
    let usable = wafer.usable_radius();
    match &recipe.pattern {
        PatternSpec::Polar {
            rings,
            radii_mm,
            start_angle_deg,
            ..
        } => {
            if !(start_angle_deg.abs() <= 360.0) {
                r.at(
                    "pattern.start_angle_deg",
                    format!("start angle {start_angle_deg}° must be in [-360, 360]"),
                );
            }
            if rings.is_empty() {
                r.at(
                    "pattern.rings",
                    "rings is empty: give the number of sites on each ring, e.g. [8, 16]",
                );
            }
            let count: u64 = rings.iter().map(|n| u64::from(*n)).sum();
            if count > MAX_SITES {
                r.at("pattern.rings", too_many(count));
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
        PatternSpec::Grid {
            pitch_mm,
            offset_mm,
        } => {
            // The count is estimated from the area before any site is generated: a tiny pitch
            // would otherwise take hours and gigabytes just to list the sites.
            let estimate = std::f64::consts::PI * (usable / pitch_mm).powi(2);
            if !offset_mm.iter().all(|v| v.is_finite()) {
                // Reported where it was read.
            } else if !(*pitch_mm > 0.0) {
                r.at(
                    "pattern.pitch_mm",
                    format!("grid pitch {pitch_mm} mm must be greater than zero"),
                );
            } else if !(estimate <= MAX_SITES as f64) {
                r.at("pattern.pitch_mm", too_many(estimate.min(1e18) as u64));
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
            if sites_mm.len() as u64 > MAX_SITES {
                r.at("pattern.sites_mm", too_many(sites_mm.len() as u64));
                return;
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

fn check_film(recipe: &Recipe, r: &mut Problems) {
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
    let check_name = |path: &str, name: &str, r: &mut Problems| {
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
    if film.layers.len() > MAX_LAYERS {
        r.at(
            "film.layers",
            format!(
                "{} layers; at most {MAX_LAYERS} can be modelled",
                film.layers.len()
            ),
        );
    }
    for (i, layer) in film.layers.iter().enumerate() {
        let at = |k: &str| format!("film.layers[{i}].{k}");
        check_name(&at("material"), &layer.material, r);
        let mut sane = true;
        for (key, v) in [
            ("nominal_nm", Some(layer.nominal_nm)),
            ("min_nm", layer.min_nm),
            ("max_nm", layer.max_nm),
        ] {
            match v {
                // Not finite: reported where it was read; its bounds cannot be judged.
                Some(v) if !v.is_finite() => sane = false,
                Some(v) if v > MAX_THICKNESS_NM => {
                    sane = false;
                    r.at(
                        &at(key),
                        format!(
                            "layer {}: {key} {} nm is above {MAX_THICKNESS_NM} nm (100 µm): thicker films give fringes finer than a spectrometer pixel resolves",
                            i + 1,
                            num(v)
                        ),
                    );
                }
                _ => {}
            }
        }
        if !sane {
            continue;
        }
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
    if matches!(film.method, FitMethod::Fourier | FitMethod::Extrema) && fitted > 1 {
        r.at(
            "film.method",
            format!(
                "method {} fits one layer, the recipe fits {fitted}: use method = \"model\" (or \"auto\"), or set fit = false on all layers but one",
                film.method.as_str()
            ),
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
    for (name, m) in &recipe.materials {
        for p in spec::check(name, m, window_ok.then_some(film.wavelength_nm)) {
            let mut path = KeyPath(vec![Seg::Key("materials".into()), Seg::Key(name.clone())]);
            path.0.extend(p.path.0);
            r.0.push(Problem {
                path,
                message: p.message,
            });
        }
    }
    check_fitted_dispersion(recipe, r);
    if let Some([lo, hi]) = recipe.accept.spec_nm {
        if !(lo.is_finite() && hi.is_finite()) {
            // Reported where it was read.
        } else if !(lo < hi) {
            r.at(
                "accept.spec_nm",
                format!("spec window [{lo}, {hi}] nm is reversed or empty"),
            );
        }
    }
    check_run_limits(&recipe.accept, r);
    if !(recipe.accept.min_gof >= 0.0 && recipe.accept.min_gof <= 1.0) {
        r.at(
            "accept.min_gof",
            format!("min_gof {} must be in [0, 1]", recipe.accept.min_gof),
        );
    }
}

/// A material with fitted coefficients: one at most, the material of a fitted layer (never
/// the ambient or substrate), fitted by the model method; `dispersion = "shared"` needs one.
fn check_fitted_dispersion(recipe: &Recipe, r: &mut Problems) {
    let film = &recipe.film;
    let fitted: Vec<&String> = recipe
        .materials
        .iter()
        .filter(|(_, m)| m.has_fitted_coefficients())
        .map(|(n, _)| n)
        .collect();
    if fitted.len() > 1 {
        r.at(
            &format!("materials.{}.fit", fitted[1]),
            format!(
                "materials {} all have fitted coefficients: fit the dispersion of one material at a time",
                fitted.iter().map(|n| n.as_str()).collect::<Vec<_>>().join(", ")
            ),
        );
    }
    for name in &fitted {
        let at = format!("materials.{name}.fit");
        if film.ambient == **name || film.substrate == **name {
            r.at(&at, format!("material {name} is the ambient or substrate: only a fitted layer's coefficients can be fitted"));
        } else if !film.layers.iter().any(|l| l.fit && l.material == **name) {
            r.at(&at, format!("material {name} has fitted coefficients but no fitted layer is made of it: set fit = true on its layer, or remove fit = [...]"));
        }
        if matches!(film.method, FitMethod::Fourier | FitMethod::Extrema) {
            r.at(
                "film.method",
                format!(
                    "method {} cannot fit the coefficients of material {name}: use method = \"model\" (or \"auto\")",
                    film.method.as_str()
                ),
            );
        }
    }
    if film.dispersion == DispersionMode::Shared && fitted.is_empty() {
        r.at("film.dispersion", "dispersion = \"shared\" but no material has fitted coefficients: mark some with fit = [\"a\", \"b\"] in its [materials.NAME] table");
    }
}

/// The limits a completed run must meet: a mean window that is a window, and limits that can
/// be met (non-finite numbers are reported where they were read).
fn check_run_limits(a: &AcceptSpec, r: &mut Problems) {
    if let Some([lo, hi]) = a.mean_nm.filter(|w| w.iter().all(|v| v.is_finite())) {
        if !(lo < hi) {
            r.at(
                "accept.mean_nm",
                format!("mean window [{lo}, {hi}] nm is reversed or empty; write [lower, upper]"),
            );
        }
    }
    for (key, v) in [("max_std_nm", a.max_std_nm), ("max_nu_pct", a.max_nu_pct)] {
        if let Some(v) = v.filter(|v| v.is_finite() && *v < 0.0) {
            r.at(
                &format!("accept.{key}"),
                format!("{key} {v} is negative: no run could pass; give a limit ≥ 0"),
            );
        }
    }
    if let Some(v) = a.min_valid_pct.filter(|v| v.is_finite()) {
        if !(0.0..=100.0).contains(&v) {
            r.at(
                "accept.min_valid_pct",
                format!("min_valid_pct {v} must be a share in [0, 100] %"),
            );
        }
    }
}

fn check_acquire(recipe: &Recipe, r: &mut Problems) {
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
    if !(1..=MAX_AVERAGES).contains(&a.averages) {
        r.at(
            "acquire.averages",
            format!("averages {} must be in [1, {MAX_AVERAGES}]", a.averages),
        );
    }
    if a.retries > MAX_RETRIES {
        r.at(
            "acquire.retries",
            format!("retries {} must be at most {MAX_RETRIES}", a.retries),
        );
    }
    if !(a.settle_ms >= 0.0 && a.settle_ms <= 60_000.0) {
        r.at(
            "acquire.settle_ms",
            format!("settle time {} ms must be in [0, 60000]", a.settle_ms),
        );
    }
}

/// The site-count problem, with the ceiling and why.
fn too_many(count: u64) -> String {
    format!(
        "this pattern has about {count} sites, more than the {MAX_SITES} a map may have (at a few seconds a site, {MAX_SITES} sites already take a day): use fewer rings or sites, or a larger pitch"
    )
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

/// The fitted layers of a film, with their index in the stack.
pub fn fitted_layers(film: &FilmSpec) -> impl Iterator<Item = (usize, &super::schema::LayerSpec)> {
    film.layers.iter().enumerate().filter(|(_, l)| l.fit)
}
