//! Command-line interface: one file per command. Parsing, printing and progress only; the
//! work is done by library calls.

use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod bench;
mod check;
mod compare;
mod csv_table;
mod figures;
mod fit;
mod gauge;
mod history_arg;
mod live_server;
mod machine_arg;
mod material;
mod measure;
mod output;
mod refit;
mod remeasure;
mod render;
mod report;
mod resume;
mod run;
mod safety;
mod sites;
mod stage;
mod trend;
mod watch;

/// Exit codes (documented in docs/cli.md and the README).
pub mod exit {
    /// Success.
    pub const OK: u8 = 0;
    /// The work failed (hardware fault, fit failure, I/O error, a run with no valid site).
    pub const FAILED: u8 = 1;
    /// The input is invalid (recipe, machine file, spectrum, arguments, a run folder or site
    /// that does not exist); clap's usage errors exit 2 as well.
    pub const INVALID: u8 = 2;
    /// The run completed but fails its recipe's `[accept]` run limits (mean, 1σ, NU, share
    /// of valid sites): the work was done, the wafer is out.
    pub const ACCEPT_FAILED: u8 = 3;
    /// Stopped by the user (Ctrl-C); the run can be resumed.
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
    /// Gauge study: repeat sites (static, dynamic, reload) for the bench's own precision.
    Gauge(gauge::Args),
    /// Measure chosen sites of a run again and update its map.
    Remeasure(remeasure::Args),
    /// Fit a run's stored spectra again (new model or window), no stage motion.
    Refit(refit::Args),
    /// Draw a run's map again.
    Render(render::Args),
    /// Serve the live page of a running or finished run (loopback only).
    Watch(watch::Args),
    /// One page for the process log: map, sites, histogram, figures, PASS/FAIL verdict.
    Report(report::Args),
    /// Compare wafers: table, wafer-to-wafer figures, delta or rate map.
    Compare(compare::Args),
    /// Run-to-run history with control limits.
    Trend(trend::Args),
    /// Fit one spectrum file.
    Fit(fit::Args),
    /// Materials from known samples: fit a film's dispersion (material fit).
    Material(material::Args),
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
    let cli = Cli::try_parse().unwrap_or_else(|mut e| {
        if let Some(tip) = remeasure::tip_for(&e) {
            e.insert(
                clap::error::ContextKind::Suggested,
                clap::error::ContextValue::StyledStrs(vec![tip.into()]),
            );
        }
        e.exit()
    });
    let result = match cli.command {
        Command::Run(a) => run::run(a),
        Command::Resume(a) => resume::run(a),
        Command::Gauge(a) => gauge::run(a),
        Command::Remeasure(a) => remeasure::run(a),
        Command::Refit(a) => refit::run(a),
        Command::Render(a) => render::run(a),
        Command::Report(a) => report::run(a),
        Command::Watch(a) => watch::run(a),
        Command::Compare(a) => compare::run(a),
        Command::Trend(a) => trend::run(a),
        Command::Fit(a) => fit::run(a),
        Command::Material(a) => material::run(a),
        Command::Sites(a) => sites::run(a),
        Command::Check(a) => check::run(a),
        Command::Stage(a) => stage::run(a),
        Command::Bench(a) => bench::run(a),
    };
    let code = match result {
        Ok(code) => code,
        Err(e) => {
            eprintln!("error: {}", isopach::error_text::chain_text(&e));
            error_code(&e)
        }
    };
    // A closed pipe ends printing quietly; any other failure to print fails the command.
    match output::finish() {
        Some(e) if code == exit::OK => {
            eprintln!("error: cannot write to standard output: {e}");
            ExitCode::from(exit::FAILED)
        }
        _ => ExitCode::from(code),
    }
}

/// The exit code of an error, from its kind (never from its wording).
fn error_code(e: &anyhow::Error) -> u8 {
    match isopach::error::kind(e) {
        isopach::error::Kind::InvalidInput => exit::INVALID,
        isopach::error::Kind::Failed => exit::FAILED,
    }
}

#[cfg(test)]
mod tests {
    use super::Cli;
    use clap::CommandFactory;

    /// The reference page, compiled in so a change to it reruns this test.
    const DOC: &str = include_str!("../../docs/cli.md");

    /// The text of the `## \`isopach NAME …\`` section of docs/cli.md.
    fn section<'a>(doc: &'a str, name: &str) -> Option<&'a str> {
        let head = format!("## `isopach {name}");
        let start = doc.find(&head)?;
        let rest = &doc[start + head.len()..];
        let body = &rest[rest.find('\n').unwrap_or(rest.len())..];
        Some(&body[..body.find("\n## ").unwrap_or(body.len())])
    }

    /// Whether `text` mentions `--flag` as a whole word (`--out` is not `--outline`).
    fn mentions_flag(text: &str, flag: &str) -> bool {
        let needle = format!("--{flag}");
        text.match_indices(&needle).any(|(i, _)| {
            !text[i + needle.len()..]
                .starts_with(|c: char| c.is_ascii_alphanumeric() || c == '-' || c == '_')
        })
    }

    /// Every flag of `cmd` and of its subcommands, and every subcommand's name, must be in `text`.
    fn walk(
        cmd: &clap::Command,
        path: &str,
        text: &str,
        seen: &mut usize,
        missing: &mut Vec<String>,
    ) {
        for arg in cmd.get_arguments() {
            if let Some(long) = arg.get_long().filter(|l| !["help", "version"].contains(l)) {
                *seen += 1;
                if !mentions_flag(text, long) {
                    missing.push(format!("isopach {path} --{long}"));
                }
            }
        }
        for sub in cmd.get_subcommands().filter(|s| s.get_name() != "help") {
            let sub_path = format!("{path} {}", sub.get_name());
            if !text.contains(&format!("isopach {sub_path}")) {
                missing.push(format!("isopach {sub_path}"));
            }
            walk(sub, &sub_path, text, seen, missing);
        }
    }

    #[test]
    fn docs_cli_md_lists_every_command_and_flag() {
        let (mut seen, mut missing) = (0, Vec::new());
        for cmd in Cli::command().get_subcommands() {
            let name = cmd.get_name();
            let (Some(text), true) = (
                section(DOC, name),
                DOC.contains(&format!("| `isopach {name}")),
            ) else {
                missing.push(format!("isopach {name} (a table row and a `## ` section)"));
                continue;
            };
            walk(cmd, name, text, &mut seen, &mut missing);
        }
        // The walk reached the flags (41 when this was written), not an empty definition.
        assert!(seen > 35, "only {seen} flags found in the clap definitions");
        assert!(
            missing.is_empty(),
            "docs/cli.md does not document:\n  {}",
            missing.join("\n  ")
        );
    }

    #[test]
    fn a_flag_is_found_only_as_a_whole_word() {
        assert!(mentions_flag("use `--out F` here", "out"));
        assert!(mentions_flag("ends with --out", "out"));
        assert!(!mentions_flag("the --outline flag", "out"));
        assert!(!mentions_flag("--no-values", "no"));
        assert!(section(DOC, "run").is_some_and(|s| !s.contains("## ")));
    }
}
