//! [`Fitter`]: everything a recipe fixes about fitting (materials, stack, window, angles,
//! bounds) resolved once, then any number of spectra fitted with it, from any thread.

use super::dispersion::{self, Coefficients, SiteModel};
use super::instrument::Slit;
use super::kernel::{channels, Channel, Prepared, MAX_LAYERS};
use super::model::{self, SearchPixels, Setup};
use super::quality::{self, gof};
use super::result::{FitResult, LayerResult, Term};
use super::{extrema, fourier, FitError};
use crate::optics::tmm::{cone_nodes, cone_samples, cos_theta};
use crate::optics::{reflectance, Material, MaterialLibrary, Stack};
use crate::recipe::schema::{DispersionMode, FitMethod};
use crate::recipe::LoadedRecipe;
use crate::spectrum::{normalise_raw, RawSpectrum, SignalQuality, Spectrum};
use std::borrow::Cow;
use std::sync::{Arc, RwLock};

/// One layer of the recipe's stack, resolved.
#[derive(Debug, Clone)]
struct FitLayer {
    name: String,
    material: Material,
    nominal: f64,
    min: f64,
    max: f64,
    fit: bool,
}

/// Fits spectra for one recipe. `Send + Sync`: share one across threads.
#[derive(Debug)]
pub struct Fitter {
    library: MaterialLibrary,
    ambient: Material,
    substrate: Material,
    layers: Vec<FitLayer>,
    fitted: Vec<usize>,
    window: [f64; 2],
    method: FitMethod,
    incidence_deg: f64,
    na: f64,
    min_gof: f64,
    channels: Vec<Channel>,
    fit_scale: bool,
    fit_tilt: bool,
    /// FWHM of the spectrometer's slit function, nm (0: ideal).
    resolution_nm: f64,
    /// The material whose coefficients are fitted, if any, and where.
    coefficients: Option<Coefficients>,
    dispersion_mode: DispersionMode,
    /// The stack prepared on the slit's fine grid, for the last pixel grid seen.
    smeared: RwLock<Option<Arc<Smeared>>>,
    warnings: Vec<String>,
    /// The per-pixel model of the last wavelength grid seen (a map uses one grid).
    cache: RwLock<Option<Arc<Prepared>>>,
    /// The last grid search's pixels: for that model and that thickest stack.
    search_cache: RwLock<Option<SearchCache>>,
    /// FFT plans of the Fourier and extrema methods.
    fft: fourier::Plans,
    /// The last reference reflectance computed: (material, wavelengths, R_ref).
    reference_cache: RwLock<Option<ReferenceCache>>,
}

type ReferenceCache = (String, Vec<f64>, Arc<Vec<f64>>);

/// A grid search's pixels, for the model they were chosen on (held, so that its address
/// is not reused) and the thickest stack searched.
type SearchCache = (Arc<Prepared>, Vec<f64>, Arc<SearchPixels>);

/// A pixel grid (`Prepared::wavelength_nm` of the pixels), its slit and the stack prepared on
/// the slit's fine grid.
#[derive(Debug)]
struct Smeared {
    pixels_nm: Vec<f64>,
    slit: Slit,
    fine: Prepared,
}

/// What a method returns: thickness of every layer, σ of the fitted ones, χ², flags.
type Outcome = (Vec<f64>, Vec<f64>, f64, Vec<String>, Vec<Term>);

/// Fewest pixels the window must hold.
const MIN_PIXELS: usize = 16;
/// Grid points per fringe-order basin: the search step is λ_min/(STEPS_PER_WAVE · n).
const STEPS_PER_WAVE: f64 = 10.0;
/// Fewer fringes than this across the window and the grid step shrinks in proportion.
const FEW_FRINGES: f64 = 4.0;
/// At most this much finer.
const MAX_REFINEMENT: f64 = 20.0;
/// Fewest pixels a grid search scores, however few fringes the window holds.
const MIN_SEARCH_PIXELS: usize = 48;
/// The search reaches this many fringe orders (at the longest wavelength) beyond each bound.
const ORDER_MARGIN: f64 = 1.5;
/// Fewer pixels per fringe than this and `auto` uses the Fourier method.
const MODEL_MIN_PIXELS_PER_FRINGE: f64 = 3.0;

// Recipe validation promises every stack it accepts can be modelled.
const _: () = assert!(crate::recipe::validate::MAX_LAYERS <= MAX_LAYERS);

impl Fitter {
    /// Resolves the recipe's materials and stack; errors name the recipe and what to fix.
    pub fn from_recipe(loaded: &LoadedRecipe) -> Result<Fitter, FitError> {
        let recipe = &loaded.recipe;
        let film = &recipe.film;
        let bad = |message: String| FitError::Recipe {
            recipe: loaded.path.clone(),
            message,
        };
        let library = loaded.material_library()?;
        let ambient = library.require(&film.ambient)?.clone();
        let substrate = library.require(&film.substrate)?.clone();
        let mut layers = Vec::new();
        for l in &film.layers {
            layers.push(FitLayer {
                name: l.material.clone(),
                material: library.require(&l.material)?.clone(),
                nominal: l.nominal_nm,
                min: l.min(),
                max: l.max(),
                fit: l.fit,
            });
        }
        if layers.len() > MAX_LAYERS {
            return Err(bad(format!(
                "{} layers; at most {MAX_LAYERS} can be modelled",
                layers.len()
            )));
        }
        let fitted: Vec<usize> = (0..layers.len()).filter(|i| layers[*i].fit).collect();
        if fitted.is_empty() || fitted.len() > 3 {
            return Err(bad(format!("{} fitted layers; fit 1 to 3", fitted.len())));
        }
        for &i in &fitted {
            let l = &layers[i];
            if !(l.min >= 0.0 && l.min < l.max) {
                return Err(bad(format!(
                    "layer {}: the search range [{}, {}] nm is empty",
                    i + 1,
                    l.min,
                    l.max
                )));
            }
        }
        if matches!(film.method, FitMethod::Fourier | FitMethod::Extrema) && fitted.len() != 1 {
            return Err(bad(format!(
                "method {} fits one layer, the recipe fits {}: use method = \"model\"",
                film.method.as_str(),
                fitted.len()
            )));
        }
        let window = film.wavelength_nm;
        let mut warnings = Vec::new();
        let mut seen = Vec::new();
        for m in std::iter::once(&ambient)
            .chain(layers.iter().map(|l| &l.material))
            .chain(std::iter::once(&substrate))
        {
            if !seen.contains(&m.name()) {
                seen.push(m.name());
                warnings.extend(m.range_warning(window[0], window[1]));
            }
        }
        // Angle samples fine enough for the thickest stack the search may try.
        let thickest = layers
            .iter()
            .fold(Stack::bare(ambient.clone(), substrate.clone()), |s, l| {
                s.with_layer(l.material.clone(), if l.fit { l.max } else { l.nominal })
            });
        let nodes = cone_nodes(&thickest, &window, film.na);
        let channels = channels(&cone_samples(film.incidence_deg, film.na, nodes));
        Ok(Fitter {
            library,
            ambient,
            substrate,
            layers,
            fitted,
            window,
            method: film.method,
            incidence_deg: film.incidence_deg,
            na: film.na,
            min_gof: recipe.accept.min_gof,
            channels,
            fit_scale: film.fit_scale,
            fit_tilt: film.fit_tilt,
            resolution_nm: 0.0,
            coefficients: recipe
                .materials
                .iter()
                .find_map(|(name, spec)| Coefficients::of(name, spec)),
            dispersion_mode: film.dispersion,
            smeared: RwLock::new(None),
            warnings,
            cache: RwLock::new(None),
            search_cache: RwLock::new(None),
            reference_cache: RwLock::new(None),
            fft: fourier::Plans::default(),
        })
    }

    /// Also fits an intensity scale factor (for spectra whose absolute level is uncertain,
    /// e.g. a reference taken at another focus), on top of the recipe's `fit_scale`. Off by
    /// default: it correlates with the thickness of very thin films, which are read from
    /// the absolute level.
    pub fn with_scale_factor(mut self, on: bool) -> Fitter {
        self.fit_scale |= on;
        self
    }

    /// Also fits a linear tilt of the intensity across the window, on top of the recipe's
    /// `fit_tilt`.
    pub fn with_tilt(mut self, on: bool) -> Fitter {
        self.fit_tilt |= on;
        self
    }

    /// Models the spectrometer's slit function: a Gaussian of this FWHM in nm (0: ideal),
    /// as the machine file's `spectrometer.resolution_nm` says.
    pub fn with_resolution_nm(mut self, fwhm_nm: f64) -> Fitter {
        self.resolution_nm = if fwhm_nm.is_finite() {
            fwhm_nm.max(0.0)
        } else {
            0.0
        };
        self
    }

    /// The material whose coefficients the recipe fits, if any.
    pub fn fitted_coefficients(&self) -> Option<&Coefficients> {
        self.coefficients.as_ref()
    }

    /// Whether the recipe fits one dispersion shared by every site (`film.dispersion =
    /// "shared"`): each spectrum is then fitted at the nominal coefficients, and the shared
    /// fit ([`Fitter::fit_shared`]) runs over all of them.
    pub fn shared_dispersion(&self) -> bool {
        self.coefficients.is_some() && self.dispersion_mode == DispersionMode::Shared
    }

    /// The model of one spectrum (its window's pixels) with the fitted material's
    /// coefficients free, the layers at thicknesses `base`.
    pub fn site_model<'a>(
        &'a self,
        c: &'a Coefficients,
        wavelengths_nm: &[f64],
        base: Vec<f64>,
    ) -> SiteModel<'a> {
        SiteModel {
            ambient: &self.ambient,
            layers: self.layers.iter().map(|l| l.material.clone()).collect(),
            substrate: &self.substrate,
            channels: &self.channels,
            coefficients: c,
            base,
            fitted: self.fitted.clone(),
            scale: self.fit_scale,
            tilt: self.fit_tilt,
            pixels_nm: wavelengths_nm.to_vec(),
            slit: (self.resolution_nm > 0.0)
                .then(|| Slit::gaussian(wavelengths_nm, self.resolution_nm)),
        }
    }

    /// The part of a spectrum inside the fitting window, checked to be fit for fitting
    /// (the spectrum itself when it lies inside the window).
    pub fn windowed<'a>(&self, spectrum: &'a Spectrum) -> Result<Cow<'a, Spectrum>, FitError> {
        let [from, to] = self.window;
        let w = if spectrum.within(from, to) {
            Cow::Borrowed(spectrum)
        } else {
            Cow::Owned(spectrum.window(from, to))
        };
        w.validate(MIN_PIXELS).map_err(|e| match e {
            crate::spectrum::SpectrumError::Invalid(m) => crate::spectrum::SpectrumError::Invalid(
                format!("window {}–{} nm: {m}", self.window[0], self.window[1]),
            ),
            e => e,
        })?;
        Ok(w)
    }

    /// The search range of each fitted layer, widened as the thickness search widens it.
    pub fn search_limits(&self, w: &Spectrum) -> Vec<(f64, f64)> {
        self.widened(w, &self.bounds())
    }

    /// Indices of the fitted layers, top first.
    pub fn fitted_layers(&self) -> &[usize] {
        &self.fitted
    }

    /// Thicknesses of every layer with the fitted ones at `fitted` (top first).
    pub fn stack_thickness(&self, fitted: &[f64]) -> Vec<f64> {
        let mut d = self.nominal();
        for (&i, v) in self.fitted.iter().zip(fitted) {
            d[i] = *v;
        }
        d
    }

    /// FWHM of the slit function modelled, nm (0: ideal).
    pub fn resolution_nm(&self) -> f64 {
        self.resolution_nm
    }

    /// Warnings found while resolving the recipe (a window outside a material's range).
    pub fn warnings(&self) -> &[String] {
        &self.warnings
    }

    /// The fitting window, nm.
    pub fn window_nm(&self) -> [f64; 2] {
        self.window
    }

    /// A note when wavelengths (ascending) cover only part of the fitting window; the fit
    /// then uses the part they cover.
    pub fn coverage_note(&self, wavelengths_nm: &[f64]) -> Option<String> {
        coverage_note(wavelengths_nm, self.window)
    }

    /// Names of the fitted layers' materials, top first.
    pub fn fitted_materials(&self) -> Vec<&str> {
        self.fitted
            .iter()
            .map(|i| self.layers[*i].name.as_str())
            .collect()
    }

    /// Fits one spectrum; a spectrum that cannot be fitted gives a result flagged `no-fit`.
    pub fn fit(&self, spectrum: &Spectrum) -> FitResult {
        self.fit_with_quality(spectrum, &SignalQuality::default())
    }

    /// Fits one spectrum, adding the flags its counts earned (`saturated`, `low-signal`).
    pub fn fit_with_quality(&self, spectrum: &Spectrum, quality: &SignalQuality) -> FitResult {
        self.try_fit(spectrum, quality).unwrap_or_else(|_| {
            let mut r = FitResult {
                method: self.method.as_str().to_string(),
                layers: self.failed_layers(),
                gof: 0.0,
                flags: vec![quality::NO_FIT.to_string()],
                terms: Vec::new(),
            };
            r.flags.extend(quality_flags(quality));
            r
        })
    }

    /// Normalises raw counts against the bare `reference_material` and fits.
    pub fn fit_raw(
        &self,
        raw: &RawSpectrum,
        reference_material: &str,
    ) -> Result<FitResult, FitError> {
        let (spectrum, quality) = self.reflectance_of_raw(raw, reference_material)?;
        Ok(self.fit_with_quality(&spectrum, &quality))
    }

    /// Counts as the fit sees them: reflectance from sample, dark and reference (taken on
    /// `reference_material`), with the flags the counts earned.
    pub fn reflectance_of_raw(
        &self,
        raw: &RawSpectrum,
        reference_material: &str,
    ) -> Result<(Spectrum, SignalQuality), FitError> {
        let r_ref = self.cached_reference(reference_material, &raw.reference.wavelength_nm)?;
        Ok(normalise_raw(raw, &r_ref)?)
    }

    /// Fits one spectrum, or says why it cannot be fitted.
    pub fn try_fit(
        &self,
        spectrum: &Spectrum,
        quality: &SignalQuality,
    ) -> Result<FitResult, FitError> {
        self.try_fit_with_terms(spectrum, quality).map(|(r, _)| r)
    }

    /// [`Fitter::try_fit`], with the fitted systematic terms (scale, tilt) of a model fit.
    pub fn try_fit_with_terms(
        &self,
        spectrum: &Spectrum,
        quality: &SignalQuality,
    ) -> Result<(FitResult, Vec<Term>), FitError> {
        let w = self.windowed(spectrum)?;
        let prep = self.prepared(&w.wavelength_nm);
        let recipe_bounds = self.bounds();
        let (mut method, bounds) = match self.method {
            FitMethod::Auto
                if self.fitted.len() == 1
                    && self.pixels_per_fringe(&w, &recipe_bounds) < MODEL_MIN_PIXELS_PER_FRINGE =>
            {
                // Too few pixels per fringe to search the whole range with the model, but
                // the film itself may be well sampled: search around the Fourier estimate.
                match self.fourier_guided_range(&w) {
                    Some(b) => (FitMethod::Model, vec![b]),
                    None => (FitMethod::Fourier, recipe_bounds.clone()),
                }
            }
            FitMethod::Auto => (FitMethod::Model, recipe_bounds.clone()),
            m => (m, recipe_bounds.clone()),
        };
        let mut outcome = self.run_method(method, &prep, &w, &bounds)?;
        if method == FitMethod::Model && bounds != recipe_bounds {
            // Ending on an edge of the narrowed range means the Fourier guess misled the
            // search: the Fourier answer itself is the safer one.
            let d = outcome.0[self.fitted[0]];
            let (lo, hi) = (
                self.widened(&w, &bounds)[0],
                self.widened(&w, &recipe_bounds)[0],
            );
            let edge = |x: f64, r: f64| (d - x).abs() <= 1e-3 && (x - r).abs() > 1e-3;
            if edge(lo.0, hi.0) || edge(lo.1, hi.1) {
                method = FitMethod::Fourier;
                outcome = self.run_method(method, &prep, &w, &recipe_bounds)?;
            }
        }
        let (thickness, sigma, chi2, mut flags, terms) = outcome;
        let g = gof(chi2, &w.reflectance);
        let at_bound = self.fitted.iter().any(|&i| {
            let l = &self.layers[i];
            let tol = (1e-3f64).max(1e-6 * (l.max - l.min));
            (thickness[i] - l.min).abs() <= tol || (thickness[i] - l.max).abs() <= tol
        });
        if at_bound {
            flags.push(quality::AT_BOUND.to_string());
        }
        if g < self.min_gof && !flags.iter().any(|f| f == quality::POOR_FIT) {
            flags.push(quality::POOR_FIT.to_string());
        }
        flags.extend(quality_flags(quality));
        let result = FitResult {
            method: method.as_str().to_string(),
            layers: self
                .fitted
                .iter()
                .zip(&sigma)
                .map(|(&i, s)| LayerResult {
                    material: self.layers[i].name.clone(),
                    thickness_nm: thickness[i],
                    sigma_nm: *s,
                })
                .collect(),
            gof: g,
            flags,
            terms: terms.clone(),
        };
        Ok((result, terms))
    }

    /// Checks that `material` is known here (built in, or the recipe's own).
    pub fn check_material(&self, material: &str) -> Result<(), FitError> {
        self.library.require(material)?;
        Ok(())
    }

    /// Reflectance of the bare `material` under the recipe's ambient, angle and NA: the
    /// R_ref of normalisation.
    pub fn reference_reflectance(
        &self,
        material: &str,
        wavelengths_nm: &[f64],
    ) -> Result<Vec<f64>, FitError> {
        let m = self.library.require(material)?.clone();
        Ok(reflectance(
            &Stack::bare(self.ambient.clone(), m),
            wavelengths_nm,
            self.incidence_deg,
            self.na,
        ))
    }

    /// The modelled reflectance of a result's stack (undetermined thicknesses at nominal),
    /// for plots and simulations.
    pub fn model_reflectance(&self, result: &FitResult, wavelengths_nm: &[f64]) -> Vec<f64> {
        let mut d = self.nominal();
        for (&i, l) in self.fitted.iter().zip(&result.layers) {
            if l.thickness_nm.is_finite() {
                d[i] = l.thickness_nm;
            }
        }
        reflectance(&self.stack(&d), wavelengths_nm, self.incidence_deg, self.na)
    }

    /// The stack with the given thickness for every layer (top first).
    pub fn stack(&self, thickness_nm: &[f64]) -> Stack {
        self.layers.iter().zip(thickness_nm).fold(
            Stack::bare(self.ambient.clone(), self.substrate.clone()),
            |s, (l, d)| s.with_layer(l.material.clone(), *d),
        )
    }

    /// Smallest thickness of the (first) fitted layer the Fourier method resolves over
    /// these wavelengths.
    pub fn fourier_resolution_nm(&self, wavelengths_nm: &[f64]) -> f64 {
        let (n, c) = self.film_index(wavelengths_nm);
        fourier::resolution_nm(&fourier::fringe_coordinate(wavelengths_nm, &n, &c))
    }

    /// [`Fitter::reference_reflectance`], remembered for the last material and grid (every
    /// site of a map shares them).
    fn cached_reference(
        &self,
        material: &str,
        wavelengths: &[f64],
    ) -> Result<Arc<Vec<f64>>, FitError> {
        if let Ok(guard) = self.reference_cache.read() {
            if let Some((m, w, r)) = guard.as_ref() {
                if m == material && w == wavelengths {
                    return Ok(Arc::clone(r));
                }
            }
        }
        let r = Arc::new(self.reference_reflectance(material, wavelengths)?);
        if let Ok(mut guard) = self.reference_cache.write() {
            *guard = Some((material.to_string(), wavelengths.to_vec(), Arc::clone(&r)));
        }
        Ok(r)
    }

    fn failed_layers(&self) -> Vec<LayerResult> {
        self.fitted
            .iter()
            .map(|&i| LayerResult {
                material: self.layers[i].name.clone(),
                thickness_nm: f64::NAN,
                sigma_nm: f64::NAN,
            })
            .collect()
    }

    fn nominal(&self) -> Vec<f64> {
        self.layers.iter().map(|l| l.nominal).collect()
    }

    fn prepared(&self, wavelengths: &[f64]) -> Arc<Prepared> {
        if let Ok(guard) = self.cache.read() {
            if let Some(p) = guard.as_ref().filter(|p| p.wavelength_nm == wavelengths) {
                return Arc::clone(p);
            }
        }
        let materials: Vec<Material> = self.layers.iter().map(|l| l.material.clone()).collect();
        let p = Arc::new(Prepared::new(
            &self.ambient,
            &materials,
            &self.substrate,
            &self.channels,
            wavelengths,
        ));
        if let Ok(mut guard) = self.cache.write() {
            *guard = Some(Arc::clone(&p));
        }
        p
    }

    /// The grid search's pixels for the thickest stack searched (cached like
    /// [`Fitter::prepared`]: a map fits every site on one grid and one range).
    fn search_pixels(&self, prep: &Arc<Prepared>, thickest: &[f64]) -> Arc<SearchPixels> {
        if let Ok(guard) = self.search_cache.read() {
            if let Some((_, _, s)) = guard
                .as_ref()
                .filter(|(p, d, _)| Arc::ptr_eq(p, prep) && d.as_slice() == thickest)
            {
                return Arc::clone(s);
            }
        }
        let s = Arc::new(SearchPixels::by_phase(prep, thickest, MIN_SEARCH_PIXELS));
        if let Ok(mut guard) = self.search_cache.write() {
            *guard = Some((Arc::clone(prep), thickest.to_vec(), Arc::clone(&s)));
        }
        s
    }

    /// The slit and the fine-grid model for a pixel grid (cached like [`Fitter::prepared`]).
    fn smeared(&self, pixels_nm: &[f64]) -> Arc<Smeared> {
        if let Ok(guard) = self.smeared.read() {
            if let Some(s) = guard.as_ref().filter(|s| s.pixels_nm == pixels_nm) {
                return Arc::clone(s);
            }
        }
        let slit = Slit::gaussian(pixels_nm, self.resolution_nm);
        let materials: Vec<Material> = self.layers.iter().map(|l| l.material.clone()).collect();
        let fine = Prepared::new(
            &self.ambient,
            &materials,
            &self.substrate,
            &self.channels,
            &slit.fine_nm,
        );
        let s = Arc::new(Smeared {
            pixels_nm: pixels_nm.to_vec(),
            slit,
            fine,
        });
        if let Ok(mut guard) = self.smeared.write() {
            *guard = Some(Arc::clone(&s));
        }
        s
    }

    /// The recipe's search range of each fitted layer.
    fn bounds(&self) -> Vec<(f64, f64)> {
        self.fitted
            .iter()
            .map(|i| (self.layers[*i].min, self.layers[*i].max))
            .collect()
    }

    /// Optical thickness Σ n·d of the thickest stack searched within `bounds`, at λ_min.
    fn max_optical_thickness(&self, l_min: f64, bounds: &[(f64, f64)]) -> f64 {
        let mut fitted = bounds.iter();
        self.layers
            .iter()
            .map(|l| {
                let d = if l.fit {
                    fitted.next().map_or(l.max, |b| b.1)
                } else {
                    l.nominal
                };
                l.material.index(l_min).re.max(1.0) * d
            })
            .sum()
    }

    /// Pixels per fringe at the shortest wavelength for the thickest stack within `bounds`.
    fn pixels_per_fringe(&self, w: &Spectrum, bounds: &[(f64, f64)]) -> f64 {
        let l_min = w.wavelength_nm[0];
        let l_max = w.wavelength_nm[w.len() - 1];
        let spacing = (l_max - l_min) / (w.len() - 1) as f64;
        l_min * l_min / (2.0 * self.max_optical_thickness(l_min, bounds)).max(1e-9) / spacing
    }

    /// A search range of ± one Fourier resolution (several fringe orders; the estimate is
    /// typically within a few tenths of a nm) around the Fourier estimate, if the film there
    /// is sampled well enough for the model.
    fn fourier_guided_range(&self, w: &Spectrum) -> Option<(f64, f64)> {
        let l = &self.layers[self.fitted[0]];
        let (n, c) = self.film_index(&w.wavelength_nm);
        let x = fourier::fringe_coordinate(&w.wavelength_nm, &n, &c);
        let e = fourier::estimate(&self.fft, &x, &w.reflectance, l.min, l.max).ok()?;
        let range = (
            (e.thickness_nm - e.resolution_nm).max(l.min),
            (e.thickness_nm + e.resolution_nm).min(l.max),
        );
        (self.pixels_per_fringe(w, &[range]) >= MODEL_MIN_PIXELS_PER_FRINGE).then_some(range)
    }

    /// Thicknesses of every layer, σ of the fitted ones, χ² and method flags.
    fn run_method(
        &self,
        method: FitMethod,
        prep: &Arc<Prepared>,
        w: &Spectrum,
        bounds: &[(f64, f64)],
    ) -> Result<Outcome, FitError> {
        match method {
            FitMethod::Fourier | FitMethod::Extrema => {
                let (d, s, flags) = self.single_layer_method(method, w)?;
                let mut all = self.nominal();
                all[self.fitted[0]] = d;
                let chi2 = chi2(prep, &w.reflectance, &all);
                Ok((all, vec![s], chi2, flags, Vec::new()))
            }
            _ => {
                let fit = self.model_fit(prep, w, bounds).ok_or_else(|| FitError::Method {
                    method: "model",
                    message: "the model gives no finite reflectance over the window: check the materials' formulas".into(),
                })?;
                let fit = match (&self.coefficients, self.dispersion_mode) {
                    (Some(c), DispersionMode::Site) => self.with_dispersion(w, &fit, c),
                    _ => fit,
                };
                let flags = self.model_flags(&fit);
                let mut thickness = fit.thickness.clone();
                // An answer outside the range is reported at the bound it passed (flagged
                // invalid): the recipe's range is a promise about what the map shows.
                for (&i, (lo, hi)) in self.fitted.iter().zip(self.bounds()) {
                    thickness[i] = thickness[i].clamp(lo, hi);
                }
                let terms = self.terms(&fit);
                Ok((thickness, fit.sigma, fit.chi2, flags, terms))
            }
        }
    }

    /// The thickness search's answer refined with the material's coefficients free: from
    /// the best minimum and from every rival order (with a wrong index a neighbouring order
    /// may fit as well), by Levenberg–Marquardt; the best becomes the fit, the others that
    /// come within noise of it its rivals. The covariance covers thicknesses, systematic
    /// terms and coefficients, in that order.
    fn with_dispersion(
        &self,
        w: &Spectrum,
        seed: &model::ModelFit,
        c: &Coefficients,
    ) -> model::ModelFit {
        let site = self.site_model(c, &w.wavelength_nm, seed.thickness.clone());
        let (lo, hi) = dispersion::local_limits(&site, &self.search_limits(w));
        let p0 = c.start();
        let starts = std::iter::once(seed.thickness.clone()).chain(
            seed.rivals
                .iter()
                .map(|r| self.stack_thickness(&r.thickness)),
        );
        let mut fits: Vec<dispersion::SiteFit> = starts
            .map(|d| {
                dispersion::fit_site(
                    &site,
                    &w.reflectance,
                    &site.local_start(&d),
                    &p0,
                    (&lo, &hi),
                )
            })
            .collect();
        fits.sort_by(|a, b| a.chi2.total_cmp(&b.chi2));
        let best = fits.remove(0);
        let np = best.params();
        let noise = quality::noise_sigma(&w.reflectance, &best.residuals);
        let var = (best.chi2 / (w.len() as f64 - np as f64).max(1.0)).max(noise * noise);
        let nf = self.fitted.len();
        let mut rivals: Vec<model::Minimum> = Vec::new();
        for f in &fits {
            let distinct = (0..nf).any(|a| (f.local[a] - best.local[a]).abs() >= 0.5)
                && rivals
                    .iter()
                    .all(|r| (0..nf).any(|a| (f.local[a] - r.thickness[a]).abs() >= 0.5));
            if distinct && f.chi2 - best.chi2 < model::AMBIGUITY_DCHI2 * var {
                rivals.push(model::Minimum {
                    thickness: f.local[..nf].to_vec(),
                    chi2: f.chi2,
                });
            }
        }
        let (scale, tilt) = {
            let mut a = nf;
            let s = if self.fit_scale {
                a += 1;
                best.local[a - 1]
            } else {
                1.0
            };
            let t = if self.fit_tilt { best.local[a] } else { 0.0 };
            (s, t)
        };
        model::ModelFit {
            thickness: site.thickness(&best.local),
            sigma: (0..nf).map(|a| best.sigma(a)).collect(),
            scale,
            tilt,
            chi2: best.chi2,
            params: np,
            noise_sigma: noise,
            rivals,
            dispersion: best.coefficients.clone(),
            covariance: best.covariance,
            residuals: best.residuals,
        }
    }

    /// The fitted scale and tilt, and the fitted coefficients of a per-site dispersion fit
    /// (named `MATERIAL.COEFFICIENT`), with σ and correlation with the first thickness, from
    /// the full covariance.
    fn terms(&self, fit: &model::ModelFit) -> Vec<Term> {
        let nf = self.fitted.len();
        let np = fit.params;
        let cov = |a: usize, b: usize| fit.covariance.as_ref().map_or(f64::NAN, |c| c[a * np + b]);
        let mut out = Vec::new();
        let mut a = nf;
        for (on, name, value) in [
            (self.fit_scale, "scale", fit.scale),
            (self.fit_tilt, "tilt", fit.tilt),
        ] {
            if on {
                out.push(Term {
                    name: name.to_string(),
                    value,
                    sigma: cov(a, a).max(0.0).sqrt(),
                    correlation_with_thickness: cov(a, 0) / (cov(a, a) * cov(0, 0)).sqrt(),
                });
                a += 1;
            }
        }
        if let Some(c) = self
            .coefficients
            .as_ref()
            .filter(|_| !fit.dispersion.is_empty())
        {
            for (name, value) in c.names.iter().zip(&fit.dispersion) {
                out.push(Term {
                    name: format!("{}.{name}", c.material),
                    value: *value,
                    sigma: cov(a, a).max(0.0).sqrt(),
                    correlation_with_thickness: cov(a, 0) / (cov(a, a) * cov(0, 0)).sqrt(),
                });
                a += 1;
            }
        }
        out
    }

    /// Flags of a model fit: a best or rival solution outside the recipe's range, rivals
    /// within noise, and a residual far above the spectrum's own noise.
    fn model_flags(&self, fit: &model::ModelFit) -> Vec<String> {
        let mut flags = Vec::new();
        let bounds = self.bounds();
        let outside = |d: &[f64]| {
            d.iter().zip(&bounds).any(|(d, (lo, hi))| {
                let tol = (1e-3f64).max(1e-6 * (hi - lo));
                *d < lo - tol || *d > hi + tol
            })
        };
        let best: Vec<f64> = self.fitted.iter().map(|&i| fit.thickness[i]).collect();
        if outside(&best) || fit.rivals.iter().any(|r| outside(&r.thickness)) {
            flags.push(quality::OUTSIDE_RANGE.to_string());
        }
        if !fit.rivals.is_empty() {
            flags.push(quality::AMBIGUOUS.to_string());
        }
        let red = quality::reduced_chi2(fit.chi2, fit.residuals.len(), fit.params, fit.noise_sigma);
        if red > quality::STRUCTURE_REDUCED_CHI2
            && quality::lag1_autocorrelation(&fit.residuals) > quality::STRUCTURE_AUTOCORRELATION
        {
            flags.push(quality::RESIDUAL_STRUCTURE.to_string());
        }
        if red > quality::MAX_REDUCED_CHI2 {
            flags.push(quality::POOR_FIT.to_string());
        }
        flags
    }

    /// The search range of each fitted layer widened by more than one fringe order on each
    /// side (never below zero), so that a film just outside the recipe's range is found
    /// there instead of being mistaken for a neighbouring order inside it.
    fn widened(&self, w: &Spectrum, bounds: &[(f64, f64)]) -> Vec<(f64, f64)> {
        let l_max = w.wavelength_nm[w.len() - 1];
        let sin0 = self.ambient.index(l_max).re * self.incidence_deg.to_radians().sin();
        self.fitted
            .iter()
            .zip(bounds)
            .map(|(&i, &(lo, hi))| {
                let n = self.layers[i].material.index(l_max).re.max(1.0);
                // One order at the longest wavelength (the widest spacing), with a margin.
                let order = l_max / (2.0 * (n * n - sin0 * sin0).max(0.01).sqrt());
                (
                    (lo - ORDER_MARGIN * order).max(0.0),
                    hi + ORDER_MARGIN * order,
                )
            })
            .collect()
    }

    fn model_fit(
        &self,
        prep: &Arc<Prepared>,
        w: &Spectrum,
        bounds: &[(f64, f64)],
    ) -> Option<model::ModelFit> {
        let bounds = &self.widened(w, bounds);
        let smeared = (self.resolution_nm > 0.0).then(|| self.smeared(&w.wavelength_nm));
        let l_min = w.wavelength_nm[0];
        let l_max = w.wavelength_nm[w.len() - 1];
        let mut thickest = self.nominal();
        for (&i, b) in self.fitted.iter().zip(bounds) {
            thickest[i] = b.1;
        }
        let search = self.search_pixels(prep, &thickest);
        let setup = Setup {
            prep,
            measured: &w.reflectance,
            base: self.nominal(),
            fitted: self.fitted.clone(),
            lower: bounds.iter().map(|b| b.0).collect(),
            upper: bounds.iter().map(|b| b.1).collect(),
            steps: self
                .fitted
                .iter()
                .zip(bounds)
                .map(|(i, b)| {
                    let n = self.layers[*i].material.index(l_min).re.max(1.0);
                    // Fringes the thickest film shows across the window: with few, every
                    // order's basin looks alike and only a finer grid ranks them right.
                    let fringes = 2.0 * n * b.1 * (1.0 / l_min - 1.0 / l_max);
                    let finer = (FEW_FRINGES / fringes.max(1e-9)).clamp(1.0, MAX_REFINEMENT);
                    l_min / (STEPS_PER_WAVE * finer * n)
                })
                .collect(),
            scale: self.fit_scale,
            tilt: self.fit_tilt,
            slit: smeared.as_ref().map(|s| (&s.fine, &s.slit)),
        };
        model::fit(&setup, &search)
    }

    /// Re n and Re cos θ of the fitted film at each wavelength (chief ray).
    fn film_index(&self, wavelengths: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let m = &self.layers[self.fitted[0]].material;
        let theta = self.incidence_deg.to_radians();
        wavelengths
            .iter()
            .map(|w| {
                let n = m.index(*w);
                let inv = self.ambient.index(*w).re * theta.sin();
                (n.re, cos_theta(n, inv).re)
            })
            .unzip()
    }

    fn single_layer_method(
        &self,
        method: FitMethod,
        w: &Spectrum,
    ) -> Result<(f64, f64, Vec<String>), FitError> {
        let l = &self.layers[self.fitted[0]];
        let (n, c) = self.film_index(&w.wavelength_nm);
        let x = fourier::fringe_coordinate(&w.wavelength_nm, &n, &c);
        let fail = |name: &'static str| {
            move |message: String| FitError::Method {
                method: name,
                message,
            }
        };
        match method {
            FitMethod::Fourier => {
                let e = fourier::estimate(&self.fft, &x, &w.reflectance, l.min, l.max)
                    .map_err(fail("fourier"))?;
                let mut flags = Vec::new();
                if e.thickness_nm < 1.2 * e.resolution_nm {
                    flags.push(quality::BELOW_RESOLUTION.to_string());
                }
                Ok((e.thickness_nm, e.sigma_nm, flags))
            }
            _ => {
                // Smooth over about an eighth of the shortest fringe period: of the film the
                // Fourier transform sees, or else of the thickest film searched.
                let bounds = self.bounds();
                let ppf_max = self.pixels_per_fringe(w, &bounds);
                let ppf = fourier::estimate(&self.fft, &x, &w.reflectance, l.min, l.max)
                    .map(|e| {
                        ppf_max * self.max_optical_thickness(w.wavelength_nm[0], &bounds)
                            / (n[0] * e.thickness_nm)
                    })
                    .unwrap_or(ppf_max);
                let smooth = ((ppf / 8.0).round() as usize).clamp(1, (w.len() / 20).max(1));
                let e =
                    extrema::estimate(&w.wavelength_nm, &w.reflectance, &x, l.min, l.max, smooth)
                        .map_err(fail("extrema"))?;
                Ok((e.thickness_nm, e.sigma_nm, Vec::new()))
            }
        }
    }
}

/// Σ (R_model − R_m)² at thicknesses `d`.
fn chi2(prep: &Prepared, measured: &[f64], d: &[f64]) -> f64 {
    (0..prep.len())
        .map(|j| (prep.reflectance(j, d) - measured[j]).powi(2))
        .sum()
}

fn quality_flags(q: &SignalQuality) -> Vec<String> {
    let mut f = Vec::new();
    if q.saturated_pixels > 0 {
        f.push(quality::SATURATED.to_string());
    }
    if q.low_signal {
        f.push(quality::LOW_SIGNAL.to_string());
    }
    f
}

/// See [`Fitter::coverage_note`].
fn coverage_note(wavelengths_nm: &[f64], [lo, hi]: [f64; 2]) -> Option<String> {
    let (first, last) = (*wavelengths_nm.first()?, *wavelengths_nm.last()?);
    let (from, to) = (first.max(lo), last.min(hi));
    // Half a typical pixel of slack: a spectrum sampled from 420.2 nm still covers 420.
    let slack = 0.5 * (last - first) / wavelengths_nm.len().max(2) as f64;
    (from > lo + slack || to < hi - slack).then(|| {
        format!(
            "the spectrum ({first:.0}–{last:.0} nm) covers only {from:.0}–{to:.0} nm of the recipe's {lo:.0}–{hi:.0} nm window; the fit uses that part"
        )
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn partial_coverage_is_noted_and_full_coverage_is_not() {
        let full: Vec<f64> = (0..=700).map(|i| 350.0 + i as f64).collect();
        assert_eq!(coverage_note(&full, [420.0, 980.0]), None);
        let part: Vec<f64> = (600..=800).map(f64::from).collect();
        let note = coverage_note(&part, [420.0, 980.0]).unwrap();
        assert!(note.contains("covers only 600–800 nm"), "{note}");
        let edge: Vec<f64> = (0..=560).map(|i| 420.4 + i as f64).collect();
        assert_eq!(coverage_note(&edge, [420.0, 980.0]), None);
    }

    fn assert_send_sync<T: Send + Sync>() {}

    #[test]
    fn fitter_is_send_and_sync() {
        assert_send_sync::<Fitter>();
    }
}
