//! `isopach refit RUN [--recipe R]`: fit the stored spectra again, no stage motion.

use super::figures::{figures_line, no_valid_site, verdict_code, verdict_line};
use super::output::outln;
use anyhow::Context;
use indicatif::ProgressBar;
use isopach::recipe;
use isopach::run::events::{now, Event};
use isopach::run::folder::RunFolder;
use isopach::run::journal::Journal;
use isopach::run::measure::{machine_of, reference_material};
use isopach::run::{derive, history_entry, new_run, refit};
use std::path::PathBuf;

/// Arguments of `isopach refit`.
#[derive(clap::Args, Debug)]
#[command(after_help = "Examples:
  isopach refit runs/20261202-090507-W07
  isopach refit runs/20261202-090507-W07 --recipe recipes/oxide-150-49-wide-window.toml

With --recipe, the run takes that recipe's [film], [accept] and [materials] (its [wafer] and
[pattern] must match the run's); the previous run.toml is kept beside it. Every stored spectrum
is fitted again and the maps are redrawn; nothing moves.")]
pub struct Args {
    /// The run folder.
    run: PathBuf,
    /// A recipe with a new film model, window or method.
    #[arg(long)]
    recipe: Option<PathBuf>,
    #[command(flatten)]
    history: super::history_arg::HistoryArg,
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let history = args.history.location_of_run(&args.run)?;
    let folder = RunFolder::new(&args.run);
    super::measure::prepare(&folder)?;
    let mut meta = folder.read_run_toml()?;
    let (journalled, states) = derive::read_states(&folder, &meta)?;
    let attempts = refit::stored_attempts(&states);
    let mut previous = None;
    let mut recipe_name = meta.recipe.name.clone();
    if let Some(path) = &args.recipe {
        let new = recipe::load(path)?;
        recipe_name = new.recipe.name.clone();
        let updated = refit::refit_recipe(&meta.recipe, &new.recipe)?;
        meta.recipe = new_run::freeze_tables(&updated, new.dir(), &folder.root)?;
        let name = format!(
            "run-before-refit-{}.toml",
            chrono::Local::now().format("%Y%m%d-%H%M%S")
        );
        let backup = folder.root.join(&name);
        std::fs::copy(folder.run_toml(), &backup)
            .with_context(|| format!("cannot keep the old run.toml as {}", backup.display()))?;
        previous = Some((path, name));
    }
    // The fitter is built before anything is journalled: a recipe it refuses changes nothing.
    let loaded = new_run::loaded_recipe(&folder, &meta);
    let machine = machine_of(&meta)?;
    let fitter = isopach::fit::Fitter::from_recipe(&loaded)?.with_resolution_nm(
        machine
            .as_ref()
            .map_or(0.0, |m| m.spectrometer.resolution_nm),
    );
    for w in fitter.warnings() {
        eprintln!("warning: {w}");
    }
    let material = reference_material(&machine);
    // All or nothing: the fits count only once refit-finished is journalled; a refit killed
    // before that is discarded by the next session (run.toml restored from `previous`).
    // Each spectrum normalised by the reference interpolated in time, as when measured.
    let timeline = isopach::run::drift::ReferenceTimeline::from_events(&journalled);
    let mut journal = Journal::open(&folder.journal())?;
    journal.append(&Event::RunStarted {
        time: now(),
        command: "refit".into(),
        sites_planned: states.len(),
    })?;
    journal.append(&Event::RefitStarted {
        time: now(),
        recipe: recipe_name,
        previous: previous.as_ref().map(|(_, name)| name.clone()),
        spectra: attempts.len(),
    })?;
    if let Some((path, name)) = &previous {
        new_run::write_run_toml(&folder, &meta)?;
        eprintln!(
            "run.toml updated from {} (previous kept as {})",
            path.display(),
            folder.root.join(name).display()
        );
    }
    let bar = ProgressBar::new(attempts.len() as u64);
    let started = std::time::Instant::now();
    let events = if fitter.shared_dispersion() {
        // One dispersion for every site (film.dispersion = "shared"), then the fits with it.
        refit::shared_dispersion_fits(
            &folder,
            &attempts,
            &timeline,
            &fitter,
            &loaded,
            &material,
            &meta.recipe.accept,
            &|| bar.inc(1),
        )?
    } else {
        refit::fit_all(
            &folder,
            &attempts,
            &timeline,
            &fitter,
            &material,
            &meta.recipe.accept,
            &|| bar.inc(1),
        )
    };
    bar.finish_and_clear();
    if let Some(line) = super::figures::dispersion_line(&events) {
        outln!("{line}");
    }
    // One write and one sync for all the fits: they count only once refit-finished is
    // journalled, so a kill in between loses nothing that counted.
    journal.append_all(&events)?;
    journal.append(&Event::RefitFinished { time: now() })?;
    let took = started.elapsed().as_secs_f64();
    eprintln!(
        "fitted {} spectra in {took:.3} s ({:.0} spectra/s), journalled with one sync",
        attempts.len(),
        attempts.len() as f64 / took.max(1e-9)
    );
    let rebuilt = derive::rebuild(&folder)?;
    if let Some(note) =
        super::history_arg::block_on(history_entry::record(&history, &folder, &rebuilt.events))?
    {
        eprintln!("warning: {note}");
    }
    let summary = rebuilt.summary;
    let f = &summary.first;
    outln!(
        "refitted {} spectra of run {}: {}",
        attempts.len(),
        meta.run.id,
        figures_line(f)
    );
    if let Some(why) = no_valid_site(f, &folder.root) {
        eprintln!("refit failed: {why}");
        return Ok(super::exit::FAILED);
    }
    if let Some(line) = verdict_line(summary.verdict.as_ref()) {
        outln!("  {line}");
    }
    Ok(verdict_code(summary.verdict.as_ref()))
}
