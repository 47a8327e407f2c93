//! `isopach check RECIPE [--machine M]`: validate, with the line and reason of each error.

use super::output::outln;
use anyhow::Context;
use isopach::recipe::{self, schema::PatternSpec, LoadedRecipe};
use isopach::run::plan::{Plan, ReferencePlacement};
use std::path::PathBuf;

/// Arguments of `isopach check`.
#[derive(clap::Args, Debug)]
#[command(
    after_help = "Examples:\n  isopach check recipes/oxide-150-49.toml\n  isopach check recipes/oxide-150-49.toml --machine machine.toml"
)]
pub struct Args {
    /// The recipe file (TOML).
    recipe: PathBuf,
    /// A machine file to validate as well.
    #[arg(long)]
    machine: Option<PathBuf>,
}

/// Runs the command: exit 0 with a summary, or 2 with every error as `FILE:LINE:COL: message`.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let loaded = match recipe::load(&args.recipe) {
        Ok(l) => l,
        Err(recipe::RecipeError::Invalid(problems)) => {
            for p in &problems {
                outln!("{p}");
            }
            eprintln!("{}: {} error(s)", args.recipe.display(), problems.len());
            return Ok(super::exit::INVALID);
        }
        Err(e) => return Err(e).context("check failed"),
    };
    outln!("ok: {}", summary(&loaded));
    let machine = match &args.machine {
        Some(path) => match super::machine_arg::load_or_report(path, Some(&loaded.recipe))? {
            Ok(m) => Some(m),
            Err(code) => return Ok(code),
        },
        None => None,
    };
    // The same plan `run` would execute: fit set-up, reference material and soft limits.
    let plan = match Plan::new(&loaded, machine.as_ref()) {
        Ok(plan) => plan,
        Err(e) => {
            outln!("{}: {e}", args.recipe.display());
            return Ok(super::exit::INVALID);
        }
    };
    if let Some(problem) = plan.limit_problem() {
        outln!("{}: {problem}", args.recipe.display());
        return Ok(super::exit::INVALID);
    }
    if let Some(m) = &machine {
        outln!(
            "ok: {}: every site within the soft limits (stage {}, {} motion check); at least {:.0} s per map",
            m.name,
            m.stage.port,
            m.stage.motion_complete.as_str(),
            plan.duration_s
        );
        if plan.reference() == ReferencePlacement::ByHand {
            outln!(
                "note: {} gives no [reference] position_mm: the run will ask the operator to place the {} reference under the probe (run it on a terminal)",
                m.name, plan.reference_material
            );
        }
        if plan.repeats_reference() {
            outln!(
                "note: the reference is taken {} times in a map (lamp drift: [reference] every_sites/every_min); each site is normalised by the reference interpolated in time",
                plan.references()
            );
        }
    }
    Ok(super::exit::OK)
}

/// One line: wafer, pattern, site count, stack.
pub fn summary(loaded: &LoadedRecipe) -> String {
    let r = &loaded.recipe;
    let w = &r.wafer;
    let mark = match w.orientation {
        recipe::schema::OrientationKind::None => String::new(),
        o => format!(
            ", {} at {}°",
            format!("{o:?}").to_lowercase(),
            w.orientation_angle_deg
        ),
    };
    let pattern = match &r.pattern {
        PatternSpec::Polar { rings, center, .. } => {
            format!(
                "polar {}rings {:?}",
                if *center { "centre + " } else { "" },
                rings
            )
        }
        PatternSpec::Grid { pitch_mm, .. } => format!("grid {pitch_mm} mm"),
        PatternSpec::Custom { .. } => "custom".to_string(),
        PatternSpec::Standard { sites } => format!("standard {sites}"),
    };
    let layers: Vec<String> = r
        .film
        .layers
        .iter()
        .map(|l| {
            format!(
                "{} {} nm{}",
                l.material,
                l.nominal_nm,
                if l.fit { "" } else { " (fixed)" }
            )
        })
        .collect();
    format!(
        "{}: {} mm wafer{mark}, {} mm edge exclusion; {pattern}, {} sites; {} / {} / {}; {}–{} nm, method {}",
        r.name,
        w.diameter_mm,
        w.edge_exclusion_mm,
        loaded.sites().len(),
        r.film.ambient,
        layers.join(" / "),
        r.film.substrate,
        r.film.wavelength_nm[0],
        r.film.wavelength_nm[1],
        r.film.method.as_str()
    )
}
