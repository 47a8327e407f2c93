//! `isopach render RUN [--out FILE.svg|.png] [--levels N] [--no-values] [--site-numbers] [--layer K]`: draw a
//! run's map again from its `run.toml` and `sites.csv`.

use super::figures::figures_line;
use super::output::{outln, page_format, write_scene};
use isopach::error::InputError;
use isopach::map::layout::page;
use isopach::map::{sites_table, RenderOptions};
use isopach::run::folder::RunFolder;
use isopach::run::outputs::{run_map_input, run_summary, write_run_maps};
use std::path::PathBuf;

/// Arguments of `isopach render`.
#[derive(clap::Args, Debug)]
#[command(
    after_help = "Examples:\n  isopach render runs/oxide-150-49-W07\n  isopach render runs/oxide-150-49-W07 --out w07.png --levels 6 --no-values"
)]
pub struct Args {
    /// The run folder (holds run.toml and sites.csv).
    run: PathBuf,
    /// Write only this file (.svg or .png); default: map.svg and map.png in the run folder.
    #[arg(long)]
    out: Option<PathBuf>,
    /// About how many isolines to draw (round levels are chosen near this count).
    #[arg(long, default_value_t = 10, value_parser = clap::value_parser!(u16).range(1..=60))]
    levels: u16,
    /// Do not print site values beside the markers.
    #[arg(long)]
    no_values: bool,
    /// Print each site's number above its marker, so a site named in a list can be found.
    #[arg(long)]
    site_numbers: bool,
    /// Which fitted layer to map with --out (1 = top); without --out every layer is drawn.
    #[arg(long, default_value_t = 1, value_parser = clap::value_parser!(u16).range(1..))]
    layer: u16,
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    if let Some(out) = &args.out {
        page_format(out)?;
    }
    let folder = RunFolder::new(&args.run);
    let meta = folder.read_run_toml()?;
    let rows = sites_table::read_file(&folder.sites_csv())?;
    let opts = RenderOptions {
        levels: args.levels as usize,
        values: !args.no_values,
        numbers: args.site_numbers,
        ..RenderOptions::default()
    };
    let summary = run_summary(&rows, &meta);
    let layers = summary.all_layers();
    let layer = args.layer as usize - 1;
    if layer >= layers.len() {
        return Err(InputError::NoSuchLayer {
            layer: args.layer as usize,
            layers: layers.len(),
        }
        .into());
    }
    match &args.out {
        Some(out) => {
            write_scene(out, &page(&run_map_input(&rows, &meta, layer), &opts))?;
            eprintln!("map written to {}", out.display());
        }
        None => {
            for path in write_run_maps(&folder, &rows, &meta, &opts)? {
                eprintln!("map written to {}", path.display());
            }
        }
    }
    let s = &layers[layer];
    let name = if s.layer.is_empty() {
        "layer"
    } else {
        &s.layer
    };
    outln!("{name}: {}", figures_line(s));
    Ok(super::exit::OK)
}
