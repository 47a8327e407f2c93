//! `isopach fit SPECTRUM.csv --recipe RECIPE [--json] [--plot FILE.svg]`: one spectrum, one
//! answer. Exit 0 when the fit is valid for the recipe's `min_gof`, 1 when it is flagged
//! invalid or no answer is found, 2 when the input cannot be used (an unreadable spectrum, an
//! unknown reference material, no pixel in the fitting window).

use super::output::outln;
use anyhow::Context;
use isopach::fit::{plot, Fitter};
use isopach::recipe;
use isopach::spectrum::{self, SpectrumFile};
use std::path::PathBuf;

/// Arguments of `isopach fit`.
#[derive(clap::Args, Debug)]
#[command(
    after_help = "Examples:\n  isopach fit site-07.csv --recipe recipes/oxide-150-49.toml\n  isopach fit site-07.csv --recipe recipes/oxide-150-49.toml --json\n  isopach fit raw.csv --recipe recipes/stack-200-diameter.toml --plot fit.svg"
)]
pub struct Args {
    /// The spectrum: wavelength_nm,reflectance or wavelength_nm,sample,dark,reference.
    spectrum: PathBuf,
    /// The recipe whose [film] section says what to fit.
    #[arg(long)]
    recipe: PathBuf,
    /// Print the result as one JSON object.
    #[arg(long)]
    json: bool,
    /// Draw measured and modelled spectra to this SVG file.
    #[arg(long, value_name = "FILE.svg")]
    plot: Option<PathBuf>,
    /// Material the reference counts were taken on (counts files only).
    #[arg(long, default_value = "si", value_name = "MATERIAL")]
    reference_material: String,
    /// Also fit an intensity scale factor (when the reference level is uncertain).
    #[arg(long)]
    scale: bool,
    /// Also fit a linear tilt of the intensity across the window (a slow baseline drift).
    #[arg(long)]
    tilt: bool,
    /// FWHM of the spectrometer's slit function in nm; the model is convolved with it.
    #[arg(long, value_name = "NM", default_value_t = 0.0)]
    resolution_nm: f64,
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    if !(args.resolution_nm >= 0.0 && args.resolution_nm <= 50.0) {
        Err(isopach::error::InputError::argument(format!(
            "--resolution-nm {}: give the slit function's FWHM in nm, 0 to 50",
            args.resolution_nm
        )))?;
    }
    let loaded = recipe::load(&args.recipe)?;
    // A material or stack the recipe describes but that cannot be built is bad input.
    let fitter = Fitter::from_recipe(&loaded)
        .with_context(|| format!("cannot set up fitting for {}", args.recipe.display()))?
        .with_scale_factor(args.scale)
        .with_tilt(args.tilt)
        .with_resolution_nm(args.resolution_nm);
    for w in fitter.warnings() {
        eprintln!("warning: {w}");
    }
    // Refused whatever the spectrum file holds, so a typo never passes unnoticed.
    fitter
        .check_material(&args.reference_material)
        .context("--reference-material")?;
    let (measured, quality) = match spectrum::read_csv(&args.spectrum)? {
        SpectrumFile::Reflectance(s) => (s, Default::default()),
        SpectrumFile::Counts(raw) => {
            let r_ref = fitter
                .reference_reflectance(&args.reference_material, &raw.reference.wavelength_nm)?;
            spectrum::normalise_raw(&raw, &r_ref)
                .with_context(|| args.spectrum.display().to_string())?
        }
    };
    if let Some(note) = fitter.coverage_note(&measured.wavelength_nm) {
        eprintln!("warning: {}: {note}", args.spectrum.display());
    }
    // No pixel in the window is bad input (exit 2); a method that finds no answer failed (1).
    let (result, terms) = fitter
        .try_fit_with_terms(&measured, &quality)
        .with_context(|| args.spectrum.display().to_string())?;
    // The part of the spectrum the fit used.
    let [lo, hi] = fitter.window_nm();
    let w = measured.window(lo, hi);
    if args.json {
        // The contract object, with the fitted terms (scale, tilt, coefficients) when any.
        outln!("{}", serde_json::to_string(&result)?);
    } else {
        for l in &result.layers {
            outln!(
                "{:<10} {:>10.2} ± {:.2} nm",
                l.material,
                l.thickness_nm,
                l.sigma_nm
            );
        }
        for t in &terms {
            outln!(
                "{:<10} {:>10.5} ± {:.5}    (correlation with thickness {:+.2})",
                t.name,
                t.value,
                t.sigma,
                t.correlation_with_thickness
            );
        }
        outln!("method {}, gof {:.5}", result.method, result.gof);
        if result.method == "fourier" {
            outln!(
                "smallest thickness this window resolves: {:.0} nm",
                fitter.fourier_resolution_nm(&w.wavelength_nm)
            );
        }
        if !result.flags.is_empty() {
            outln!("flags: {}", result.flags.join(", "));
        }
    }
    if let Some(out) = &args.plot {
        let model = fitter.model_reflectance(&result, &w.wavelength_nm);
        let svg = plot::svg(&w.wavelength_nm, &w.reflectance, &model, &result);
        isopach::run::files::write_atomic(out, svg.as_bytes())
            .with_context(|| format!("cannot write {}", out.display()))?;
        eprintln!("plot written to {}", out.display());
    }
    let min_gof = loaded.recipe.accept.min_gof;
    Ok(if result.is_valid(min_gof) {
        super::exit::OK
    } else {
        super::exit::FAILED
    })
}
