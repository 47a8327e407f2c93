//! `isopach resume RUN [--yes]`: finish an interrupted run; measured sites are kept.

use super::measure::{self, Which};
use isopach::run::folder::RunFolder;
use std::path::PathBuf;

/// Arguments of `isopach resume`.
#[derive(clap::Args, Debug)]
#[command(
    after_help = "Examples:\n  isopach resume runs/20261202-090507-W07\n\nSpectra stored but not fitted before the stop are fitted first; then every site without a\nvalid result is measured on the same bench, with fresh dark and reference spectra."
)]
pub struct Args {
    /// The run folder.
    run: PathBuf,
    /// Do not ask before the first motion of a real stage.
    #[arg(long)]
    yes: bool,
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let folder = RunFolder::new(&args.run);
    measure::prepare(&folder)?;
    let meta = folder.read_run_toml()?;
    let plan = isopach::run::measure::plan_of_run(&folder, &meta)?;
    measure::session(
        &plan,
        folder,
        meta,
        Which::Missing,
        args.yes,
        "resume",
        None,
    )
}
