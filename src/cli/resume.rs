//! `isopach resume RUN [--machine M] [--yes]`: finish an interrupted run; measured sites are
//! kept. `--machine` takes a corrected machine file (a port, a timeout, a limit), journals the
//! change and freezes it in `run.toml`; a change of the chuck geometry is refused.

use super::measure::{self, Which};
use anyhow::Context;
use isopach::bench::machine::builtin_simulated;
use isopach::run::events::{now, Event};
use isopach::run::folder::{RunFolder, RunToml};
use isopach::run::journal::Journal;
use isopach::run::machine_change::MachineChange;
use isopach::run::measure::{machine_of, plan_on_machine};
use isopach::run::new_run;
use std::path::{Path, PathBuf};

/// Arguments of `isopach resume`.
#[derive(clap::Args, Debug)]
#[command(
    after_help = "Examples:\n  isopach resume runs/20261202-090507-W07\n  isopach resume runs/20261202-090507-W07 --machine bench-a.toml\n\nSpectra stored but not fitted before the stop are fitted first; then every site without a\nvalid result is measured on the same bench, with fresh dark and reference spectra.\nWith --machine, the corrected machine file replaces the frozen one (the change is journalled);\na change of [chuck] centre, rotation or flips, which would move the sites, is refused."
)]
pub struct Args {
    /// The run folder.
    run: PathBuf,
    /// A corrected machine file for this and later sessions (same chuck geometry).
    #[arg(long)]
    machine: Option<PathBuf>,
    /// Do not ask before the first motion of a real stage.
    #[arg(long)]
    yes: bool,
    #[command(flatten)]
    history: super::history_arg::HistoryArg,
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let history = args.history.location_of_run(&args.run)?;
    let folder = RunFolder::new(&args.run);
    measure::prepare(&folder)?;
    let mut meta = folder.read_run_toml()?;
    let plan = match &args.machine {
        None => isopach::run::measure::plan_of_run(&folder, &meta)?,
        Some(path) => {
            let new = match super::machine_arg::load_or_report(path, Some(&meta.recipe))? {
                Ok(m) => m,
                Err(code) => return Ok(code),
            };
            let old = machine_of(&meta)?.unwrap_or_else(builtin_simulated);
            let change = MachineChange::between(&old, &new);
            let moving = change.moving_sites();
            if !moving.is_empty() {
                eprintln!(
                    "error: {}: {} differ from the run's machine file {}: the chuck geometry places the sites on the stage, so the sites already measured would not be the ones measured now; keep [chuck] as frozen in {} (or measure a new run)",
                    path.display(),
                    moving.join(", "),
                    old.name,
                    folder.run_toml().display()
                );
                return Ok(super::exit::INVALID);
            }
            // The plan is checked against the new soft limits before anything is touched.
            let plan = plan_on_machine(&folder, &meta, Some(&new))?;
            if !change.is_empty() {
                adopt(&folder, &mut meta, path, &old.name, &new, &change)?;
            }
            plan
        }
    };
    measure::session(
        &plan,
        folder,
        meta,
        Which::Missing,
        args.yes,
        "resume",
        measure::Outlets {
            history: &history,
            watch: None,
        },
    )
}

/// Journals the change and freezes the new machine file in `run.toml` (the previous one kept
/// as `run-before-resume-<time>.toml`).
fn adopt(
    folder: &RunFolder,
    meta: &mut RunToml,
    path: &Path,
    old_name: &str,
    new: &isopach::bench::MachineFile,
    change: &MachineChange,
) -> anyhow::Result<()> {
    let mut journal = Journal::open(&folder.journal())?;
    journal.append(&Event::MachineChanged {
        time: now(),
        old: old_name.to_string(),
        new: new.name.clone(),
        keys: change.keys.clone(),
    })?;
    let backup = folder.root.join(format!(
        "run-before-resume-{}.toml",
        chrono::Local::now().format("%Y%m%d-%H%M%S")
    ));
    std::fs::copy(folder.run_toml(), &backup)
        .with_context(|| format!("cannot keep the old run.toml as {}", backup.display()))?;
    meta.machine = Some(toml::Table::try_from(new).context("cannot freeze the machine file")?);
    new_run::write_run_toml(folder, meta)?;
    eprintln!(
        "machine file {} ({}) replaces {old_name}: {} changed (previous run.toml kept as {})",
        path.display(),
        new.name,
        change.keys.join(", "),
        backup.display()
    );
    Ok(())
}
