//! `isopach sites RECIPE [--out FILE.svg] [--csv]`: list and draw the site plan.

use super::output::outln;
use anyhow::Context;
use isopach::map::site_plan;
use isopach::recipe::{self, Site};
use isopach::run::plan::Plan;
use std::path::PathBuf;

/// Arguments of `isopach sites`.
#[derive(clap::Args, Debug)]
#[command(
    after_help = "Examples:\n  isopach sites recipes/oxide-150-49.toml\n  isopach sites recipes/oxide-150-49.toml --csv > plan.csv\n  isopach sites recipes/oxide-150-49.toml --out plan.svg"
)]
pub struct Args {
    /// The recipe file (TOML).
    recipe: PathBuf,
    /// Draw the plan to this SVG file.
    #[arg(long)]
    out: Option<PathBuf>,
    /// Print CSV (site,x_mm,y_mm,r_mm) instead of a table.
    #[arg(long)]
    csv: bool,
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let loaded = recipe::load(&args.recipe)?;
    // The sites of the plan `run` would measure, listed by number.
    let plan = Plan::new(&loaded, None)?;
    let mut sites: Vec<Site> = plan.sites().map(|s| s.site).collect();
    sites.sort_by_key(|s| s.number);
    if args.csv {
        outln!("site,x_mm,y_mm,r_mm");
        for s in &sites {
            // Full precision: rounding would push rim sites past the usable radius.
            outln!("{},{},{},{}", s.number, s.x_mm, s.y_mm, s.radius());
        }
    } else {
        outln!("{:>5} {:>9} {:>9} {:>9}", "site", "x_mm", "y_mm", "r_mm");
        for s in &sites {
            outln!(
                "{:>5} {:>9.3} {:>9.3} {:>9.3}",
                s.number,
                s.x_mm,
                s.y_mm,
                s.radius()
            );
        }
        outln!("{} sites", sites.len());
    }
    if let Some(out) = &args.out {
        let svg = site_plan::svg(&loaded.wafer(), &sites, &loaded.recipe.name);
        isopach::run::files::write_atomic(out, svg.as_bytes())
            .with_context(|| format!("cannot write {}", out.display()))?;
        eprintln!("site plan written to {}", out.display());
    }
    Ok(super::exit::OK)
}
