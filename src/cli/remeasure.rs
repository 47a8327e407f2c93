//! `isopach remeasure RUN (--site N ... | --failed) [--yes]`: measure chosen sites again.

use super::measure::{self, Which};
use isopach::error::InputError;
use isopach::run::folder::RunFolder;
use std::path::PathBuf;

/// Arguments of `isopach remeasure`.
#[derive(clap::Args, Debug)]
#[command(
    after_help = "Examples:\n  isopach remeasure runs/20261202-090507-W07 --site 17\n  isopach remeasure runs/20261202-090507-W07 --site 3 --site 44\n  isopach remeasure runs/20261202-090507-W07 --failed\n\nNew attempts are added to the journal; a site's newest valid attempt is what the map shows,\nand its earlier attempts stay in the history."
)]
pub struct Args {
    /// The run folder.
    run: PathBuf,
    /// Site number to measure again (repeat for several).
    #[arg(
        long = "site",
        value_name = "N",
        required_unless_present = "failed",
        conflicts_with = "failed"
    )]
    sites: Vec<usize>,
    /// Every site without a valid result.
    #[arg(long)]
    failed: bool,
    /// Do not ask before the first motion of a real stage.
    #[arg(long)]
    yes: bool,
    #[command(flatten)]
    history: super::history_arg::HistoryArg,
}

/// A tip for `isopach remeasure RUN 12`: site numbers go after `--site`.
pub fn tip_for(e: &clap::Error) -> Option<String> {
    use clap::error::{ContextKind, ContextValue, ErrorKind};
    if e.kind() != ErrorKind::UnknownArgument {
        return None;
    }
    let ContextValue::String(arg) = e.get(ContextKind::InvalidArg)? else {
        return None;
    };
    let site: usize = arg.parse().ok()?;
    let remeasure = std::env::args().nth(1).is_some_and(|c| c == "remeasure");
    remeasure.then(|| format!("to measure site {site} again, write '--site {site}'"))
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let history = args.history.location_of_run(&args.run)?;
    let folder = RunFolder::new(&args.run);
    measure::prepare(&folder)?;
    let meta = folder.read_run_toml()?;
    let plan = isopach::run::measure::plan_of_run(&folder, &meta)?;
    let planned: Vec<_> = plan.sites().map(|s| s.site).collect();
    let which = if args.failed {
        Which::Missing
    } else {
        if let Some(bad) = args
            .sites
            .iter()
            .find(|n| !planned.iter().any(|s| s.number == **n))
        {
            return Err(InputError::SiteNotInPlan {
                site: *bad,
                sites: planned.len(),
            }
            .into());
        }
        Which::Sites(args.sites)
    };
    measure::session(
        &plan,
        folder,
        meta,
        which,
        args.yes,
        "remeasure",
        measure::Outlets {
            history: &history,
            watch: None,
        },
    )
}
