//! `isopach gauge RECIPE [--machine M] [--sites N,…] [--repeats K] [--passes P]
//! [--mode static|dynamic|reload] [--away-mm D] [--runs DIR] [--seed S]`: a gauge study,
//! journalled in a run folder like a map (`resume` continues it), with `gauge.json` and
//! `gauge.html`.

use super::measure::{self, Which};
use super::output::outln;
use anyhow::Context;
use isopach::recipe;
use isopach::run::gauge::GaugeReport;
use isopach::run::new_run;
use isopach::run::plan::{GaugeMode, GaugeSettings, Plan};
use std::path::PathBuf;

/// Arguments of `isopach gauge`.
#[derive(clap::Args, Debug)]
#[command(after_help = "Examples:
  isopach gauge recipes/oxide-150-49.toml                              # static, site 1, simulated bench
  isopach gauge recipes/oxide-150-49.toml --sites 1,5,9 --mode dynamic --away-mm 20
  isopach gauge recipes/oxide-150-49.toml --machine bench-a.toml --mode reload --passes 3

Each pass takes dark and reference spectra, then measures every site --repeats times in a
row: static without motion, dynamic leaving by --away-mm and coming back each time, reload
with the wafer unloaded and loaded again between passes (you are asked). gauge.json and
gauge.html in the run folder give per site and pooled: mean, repeatability σ, reproducibility
σ, combined σ, the fit's own σ, the Cramér–Rao bound, P/T against the recipe's
[accept] spec_nm, ndc and the verdict. Ctrl-C keeps everything; `isopach resume RUN` goes on.")]
pub struct Args {
    /// The recipe file (TOML).
    recipe: PathBuf,
    /// The machine file of the bench; without it, the built-in simulated bench.
    #[arg(long)]
    machine: Option<PathBuf>,
    /// The sites to repeat, by recipe number.
    #[arg(long, value_delimiter = ',', default_value = "1")]
    sites: Vec<usize>,
    /// Acquisitions per site in each pass.
    #[arg(long, default_value_t = 10, value_parser = clap::value_parser!(u32).range(2..=1000))]
    repeats: u32,
    /// Passes, each with fresh dark and reference spectra.
    #[arg(long, default_value_t = 3, value_parser = clap::value_parser!(u32).range(1..=100))]
    passes: u32,
    /// How the repeats are taken.
    #[arg(long, value_enum, default_value = "static")]
    mode: GaugeMode,
    /// Distance the stage leaves a site between dynamic repeats, mm.
    #[arg(long, default_value_t = 10.0)]
    away_mm: f64,
    /// Wafer id (goes into the run id).
    #[arg(long, default_value = "gauge")]
    wafer: String,
    /// Operator name or initials.
    #[arg(long, default_value = "")]
    operator: String,
    /// Folder holding the run folders.
    #[arg(long, default_value = "runs")]
    runs: PathBuf,
    /// Do not ask before the first motion of a real stage.
    #[arg(long)]
    yes: bool,
    /// Seed of the simulated bench: its wafer and this study's noise (default: the wafer from
    /// the wafer id, fresh noise every study).
    #[arg(long)]
    seed: Option<u64>,
    #[command(flatten)]
    history: super::history_arg::HistoryArg,
}

/// Runs the command: the plan is made and checked before any folder or port is touched.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let loaded = recipe::load(&args.recipe)?;
    let machine = match &args.machine {
        Some(p) => Some(super::machine_arg::load_for(p, &loaded.recipe)?),
        None => None,
    };
    if !(args.away_mm.is_finite() && args.away_mm > 0.0 && args.away_mm <= 1000.0) {
        Err(isopach::error::InputError::argument(format!(
            "--away-mm {}: give a distance in mm above 0 and at most 1000",
            args.away_mm
        )))?;
    }
    let all = loaded.sites();
    let mut sites = Vec::new();
    for n in &args.sites {
        match all.iter().find(|s| s.number == *n) {
            Some(s) if !sites.contains(s) => sites.push(*s),
            Some(_) => {}
            None => Err(isopach::error::InputError::argument(format!(
                "--sites: the recipe {} has no site {n} (its sites are 1–{})",
                args.recipe.display(),
                all.len()
            )))?,
        }
    }
    let settings = GaugeSettings {
        mode: args.mode,
        repeats: args.repeats,
        passes: args.passes,
        away_mm: args.away_mm,
    };
    let plan = Plan::gauge(&loaded, machine.as_ref(), &sites, settings)?.checked()?;
    let history = args.history.location(&args.runs)?;
    let seeds = new_run::sim_seeds(&args.wafer, args.seed);
    let table = machine
        .as_ref()
        .map(toml::Table::try_from)
        .transpose()
        .context("cannot freeze the machine file")?;
    let new = new_run::NewRun {
        wafer: args.wafer,
        lot: String::new(),
        operator: args.operator,
        runs_dir: args.runs,
        machine: table,
        seeds,
    };
    let (folder, meta) = new_run::create(&plan, &new)?;
    eprintln!(
        "gauge study {} in {}: {} site(s) × {} pass(es) × {} repeat(s), {}",
        meta.run.id,
        folder.root.display(),
        sites.len(),
        settings.passes,
        settings.repeats,
        settings.mode.as_str()
    );
    measure::session(
        &plan,
        folder,
        meta,
        Which::Missing,
        args.yes,
        "gauge",
        measure::Outlets {
            history: &history,
            watch: None,
        },
    )
}

fn nm(v: Option<f64>) -> String {
    v.map_or("-".to_string(), |x| format!("{x:.4}"))
}

/// The study's figures as printed after a session.
pub fn print_report(r: &GaugeReport) {
    let p = &r.pooled;
    outln!(
        "  gauge ({}, {} of {} readings): mean {} nm, repeatability σ {} nm, reproducibility σ {} nm, combined σ {} nm, fit σ {} nm, Cramér–Rao bound {} nm",
        r.study.mode.as_str(),
        r.measured,
        r.planned,
        nm(p.mean_nm),
        nm(p.repeatability_nm),
        nm(p.reproducibility_nm),
        nm(p.combined_nm),
        nm(p.fit_sigma_nm),
        nm(p.crb_nm)
    );
    let c = &r.capability;
    let spec = c.spec_nm.map_or(String::new(), |[lo, hi]| {
        format!(" against [{lo}, {hi}] nm")
    });
    outln!(
        "  verdict: {} (P/T {}{spec}; ndc {})",
        c.verdict,
        c.p_to_t.map_or("-".to_string(), |v| format!("{v:.3}")),
        c.ndc.map_or("-".to_string(), |v| v.to_string())
    );
}
