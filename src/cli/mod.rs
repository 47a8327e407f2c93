//! Command-line interface: one file per command. Parsing, printing and progress only; the
//! work is done by library calls.

use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod bench;
mod check;
mod compare;
mod fit;
mod machine_arg;
mod measure;
mod output;
mod refit;
mod remeasure;
mod render;
mod resume;
mod run;
mod safety;
mod sites;
mod stage;
mod trend;

/// Exit codes (documented in docs/cli.md).
pub mod exit {
    /// Success.
    pub const OK: u8 = 0;
    /// The work failed (hardware fault, fit failure, I/O error).
    pub const FAILED: u8 = 1;
    /// The input is invalid (recipe, machine file, spectrum, arguments).
    pub const INVALID: u8 = 2;
    /// Stopped by the user (Ctrl-C); the run can be resumed.
    #[allow(dead_code)]
    pub const INTERRUPTED: u8 = 130;
}

/// Thin-film thickness maps of wafers from reflectance spectra.
#[derive(Parser, Debug)]
#[command(name = "isopach", version, about, long_about = None, after_help = EXAMPLES)]
pub struct Cli {
    #[command(subcommand)]
    command: Command,
}

const EXAMPLES: &str = "Examples:
  isopach check recipes/oxide-150-49.toml
  isopach sites recipes/oxide-150-49.toml --out plan.svg
  isopach run recipes/oxide-150-49.toml --wafer W07 --lot L2612
  isopach fit spectrum.csv --recipe recipes/oxide-150-49.toml --json";

#[derive(Subcommand, Debug)]
enum Command {
    /// Measure a whole map (simulated bench without --machine).
    Run(run::Args),
    /// Finish an interrupted run; measured sites are kept.
    Resume(resume::Args),
    /// Measure chosen sites of a run again and update its map.
    Remeasure(remeasure::Args),
    /// Fit a run's stored spectra again (new model or window), no stage motion.
    Refit(refit::Args),
    /// Draw a run's map again.
    Render(render::Args),
    /// Compare wafers: table, wafer-to-wafer figures, delta or rate map.
    Compare(compare::Args),
    /// Run-to-run history with control limits.
    Trend(trend::Args),
    /// Fit one spectrum file.
    Fit(fit::Args),
    /// List and draw the site plan of a recipe.
    Sites(sites::Args),
    /// Validate a recipe (and machine file), listing every error with its line.
    Check(check::Args),
    /// Bench set-up: home, where, move.
    Stage(stage::Args),
    /// Simulated bench tools: serve the virtual controller on a pseudo-terminal.
    Bench(bench::Args),
}

/// Parses the command line and runs the command.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Run(a) => run::run(a),
        Command::Resume(a) => resume::run(a),
        Command::Remeasure(a) => remeasure::run(a),
        Command::Refit(a) => refit::run(a),
        Command::Render(a) => render::run(a),
        Command::Compare(a) => compare::run(a),
        Command::Trend(a) => trend::run(a),
        Command::Fit(a) => fit::run(a),
        Command::Sites(a) => sites::run(a),
        Command::Check(a) => check::run(a),
        Command::Stage(a) => stage::run(a),
        Command::Bench(a) => bench::run(a),
    };
    match result {
        Ok(code) => ExitCode::from(code),
        Err(e) => {
            eprintln!("error: {}", isopach::error_text::chain_text(&e));
            ExitCode::from(error_code(&e))
        }
    }
}

/// Invalid input exits 2, everything else 1.
fn error_code(e: &anyhow::Error) -> u8 {
    if e.chain().any(|c| {
        c.downcast_ref::<isopach::recipe::RecipeError>().is_some()
            || c.downcast_ref::<isopach::bench::MachineError>().is_some()
            || c.downcast_ref::<isopach::run::plan::PlanError>().is_some()
    }) {
        exit::INVALID
    } else {
        exit::FAILED
    }
}
