//! `isopach material fit SPECTRUM... --recipe R [--thickness-nm D] [--name NAME]`: the
//! dispersion of a film from spectra of a known sample, printed as a ready
//! `[materials.NAME]` block. Exit 0 with an answer, 1 when thickness and index cannot be
//! told apart (the fit is refused), 2 on bad input.

use super::output::outln;
use anyhow::Context;
use isopach::error::InputError;
use isopach::fit::{shared, Fitter};
use isopach::optics::library::from_spec;
use isopach::recipe;
use isopach::spectrum::{self, SpectrumFile};
use std::collections::BTreeMap;
use std::path::PathBuf;

/// |correlation| of a coefficient with the thickness above which the two cannot be told
/// apart: the fit is refused.
const MAX_CORRELATION: f64 = 0.999;

/// Arguments of `isopach material`.
#[derive(clap::Args, Debug)]
pub struct Args {
    #[command(subcommand)]
    command: Sub,
}

#[derive(clap::Subcommand, Debug)]
enum Sub {
    /// Fit a film's dispersion to spectra of a known sample; print a [materials.NAME] block.
    Fit(FitArgs),
}

/// Arguments of `isopach material fit`.
#[derive(clap::Args, Debug)]
#[command(after_help = "Examples:
  isopach material fit resist-a.csv resist-b.csv --recipe recipes/resist-fit.toml
  isopach material fit oxide.csv --recipe recipes/pecvd.toml --thickness-nm 1012.4 --name pecvd-ox

The recipe's [materials.NAME] table marks the coefficients to fit (fit = [\"a\", \"b\"]) and
its [film] the stack. Several spectra of one film (sites of different thickness) share one
dispersion and are far better conditioned than one; a thickness known from another
instrument (--thickness-nm, the same in every spectrum) removes the correlation entirely.")]
pub struct FitArgs {
    /// Spectra of the film: wavelength_nm,reflectance or wavelength_nm,sample,dark,reference.
    #[arg(required = true)]
    spectra: Vec<PathBuf>,
    /// The recipe: its stack, window and the material whose coefficients are fitted.
    #[arg(long)]
    recipe: PathBuf,
    /// The film's thickness known from another instrument, nm (held in every spectrum).
    #[arg(long, value_name = "NM")]
    thickness_nm: Option<f64>,
    /// Name of the printed material (default: the recipe's).
    #[arg(long)]
    name: Option<String>,
    /// Material the reference counts were taken on (counts files only).
    #[arg(long, default_value = "si", value_name = "MATERIAL")]
    reference_material: String,
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    match args.command {
        Sub::Fit(a) => fit(a),
    }
}

fn fit(args: FitArgs) -> anyhow::Result<u8> {
    if let Some(d) = args.thickness_nm {
        if !(d > 0.0 && d <= 100_000.0) {
            Err(InputError::argument(format!(
                "--thickness-nm {d}: give the film's thickness in nm, above 0 and at most 100000"
            )))?;
        }
    }
    let loaded = recipe::load(&args.recipe)?;
    let fitter = Fitter::from_recipe(&loaded)
        .with_context(|| format!("cannot set up fitting for {}", args.recipe.display()))?;
    let Some(c) = fitter.fitted_coefficients() else {
        Err(InputError::argument(format!(
            "recipe {}: no material has fitted coefficients; mark them in its [materials.NAME] table, e.g. fit = [\"a\", \"b\"]",
            args.recipe.display()
        )))?
    };
    for w in fitter.warnings() {
        eprintln!("warning: {w}");
    }
    fitter
        .check_material(&args.reference_material)
        .context("--reference-material")?;
    let mut spectra = Vec::new();
    for path in &args.spectra {
        let s = match spectrum::read_csv(path)? {
            SpectrumFile::Reflectance(s) => s,
            SpectrumFile::Counts(raw) => {
                let r_ref = fitter.reference_reflectance(
                    &args.reference_material,
                    &raw.reference.wavelength_nm,
                )?;
                spectrum::normalise_raw(&raw, &r_ref)
                    .with_context(|| path.display().to_string())?
                    .0
            }
        };
        fitter
            .windowed(&s)
            .with_context(|| path.display().to_string())?;
        spectra.push(s);
    }
    // Seeds: each spectrum's thickness at the nominal coefficients (global search).
    let mut seeds = Vec::new();
    for (s, path) in spectra.iter().zip(&args.spectra) {
        let r = fitter
            .try_fit(s, &Default::default())
            .with_context(|| path.display().to_string())?;
        seeds.push(
            r.layers
                .iter()
                .map(|l| l.thickness_nm)
                .collect::<Vec<f64>>(),
        );
    }
    let joint = shared::fit_spectra(&fitter, &spectra, &seeds, args.thickness_nm)?;
    let name = args.name.clone().unwrap_or_else(|| c.material.clone());
    if args.thickness_nm.is_none() {
        if let Some(t) = joint.coefficients.iter().find(|t| {
            let r = t.correlation_with_thickness;
            r.is_nan() || r.abs() >= MAX_CORRELATION
        }) {
            eprintln!(
                "refused: {} is {} correlated with the thickness ({:+.3}); thickness and index cannot be told apart from {}.\n\
                 Give more fringes (a thicker film or a wider window), spectra of several thicknesses of the film, \
                 fewer fitted coefficients, or the thickness from another instrument (--thickness-nm).",
                t.name,
                if t.correlation_with_thickness.is_finite() { "almost fully" } else { "inseparably" },
                t.correlation_with_thickness,
                if spectra.len() == 1 { "this spectrum".to_string() } else { format!("these {} spectra", spectra.len()) }
            );
            return Ok(super::exit::FAILED);
        }
    }
    let block = toml::to_string(&BTreeMap::from([(
        "materials",
        BTreeMap::from([(name.as_str(), &joint.spec)]),
    )]))?;
    outln!(
        "# fitted by isopach material fit from {} spectra",
        joint.spectra
    );
    for t in &joint.coefficients {
        outln!(
            "# {} = {:.6} ± {:.2e} (correlation with thickness {})",
            t.name,
            t.value,
            t.sigma,
            super::figures::num(t.correlation_with_thickness)
        );
    }
    outln!("{}", block.trim_end());
    let material = from_spec(&name, &joint.spec, loaded.dir())?;
    let [lo, hi] = fitter.window_nm();
    let mut at: Vec<f64> = [lo, 450.0, 550.0, 632.8, 800.0, 950.0, hi]
        .into_iter()
        .filter(|l| *l >= lo && *l <= hi)
        .collect();
    at.dedup();
    outln!("");
    outln!("  λ (nm)       n         k");
    for l in at {
        let n = material.index(l);
        outln!("  {l:>7.1}   {:.5}   {:.2e}", n.re, n.im);
    }
    for ((path, d), s) in args
        .spectra
        .iter()
        .zip(&joint.thickness_nm)
        .zip(&joint.thickness_sigma_nm)
    {
        outln!("  {}: thickness {d:.2} ± {s:.2} nm", path.display());
    }
    Ok(super::exit::OK)
}
