//! `isopach run RECIPE [--machine M] [--wafer ID] [--lot L] [--runs DIR] [--yes] [--dry-run]
//! [--centre]`.

use super::measure::{self, Which};
use super::output::outln;
use anyhow::Context;
use isopach::bench::centring::CentringSettings;
use isopach::recipe;
use isopach::run::new_run;
use isopach::run::plan::{path_length, Plan, Step};
use std::path::PathBuf;

/// Arguments of `isopach run`.
#[derive(clap::Args, Debug)]
#[command(after_help = "Examples:
  isopach run recipes/oxide-150-49.toml                          # on the built-in simulated bench
  isopach run recipes/oxide-150-49.toml --wafer W07 --lot L2612 --machine bench-a.toml
  isopach run recipes/resist-100-grid.toml --machine bench-a.toml --dry-run

A run folder runs/<time>-<wafer>/ keeps the frozen recipe, the journal, every raw spectrum,
sites.csv, summary.json and the maps. Ctrl-C stops the stage and keeps everything measured;
`isopach resume RUN` finishes the run.")]
pub struct Args {
    /// The recipe file (TOML).
    recipe: PathBuf,
    /// The machine file of the bench; without it, the built-in simulated bench.
    #[arg(long)]
    machine: Option<PathBuf>,
    /// Wafer id (goes into the run id: letters, digits, '-', '_', '.').
    #[arg(long, default_value = "wafer")]
    wafer: String,
    /// Lot id.
    #[arg(long, default_value = "")]
    lot: String,
    /// Operator name or initials.
    #[arg(long, default_value = "")]
    operator: String,
    /// Folder holding the run folders.
    #[arg(long, default_value = "runs")]
    runs: PathBuf,
    /// Do not ask before the first motion of a real stage (scripted use on a checked bench).
    #[arg(long)]
    yes: bool,
    /// Print the plan, its path length and estimated duration; move nothing.
    #[arg(long)]
    dry_run: bool,
    /// Seed of the simulated bench: its wafer and this run's noise (default: the wafer from
    /// the wafer id, so each wafer differs, and fresh noise every run).
    #[arg(long)]
    seed: Option<u64>,
    /// Centre the wafer from edge scans first and place the sites by the measured centre
    /// and flat/notch rotation (journalled; `resume` keeps it).
    #[arg(long)]
    centre: bool,
    #[command(flatten)]
    history: super::history_arg::HistoryArg,
    /// Serve a live page of the run on the loopback interface (the address is printed); it
    /// stays up after the run until Ctrl-C.
    #[arg(long)]
    watch: bool,
    /// Address of the live page with --watch (loopback only; port 0 = a free one).
    #[arg(long, default_value = super::live_server::DEFAULT_LISTEN, requires = "watch")]
    listen: std::net::SocketAddr,
}

/// Runs the command. The plan is made and checked first: an invalid recipe, machine file or
/// plan leaves no folder and opens no port.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let loaded = recipe::load(&args.recipe)?;
    let machine = match &args.machine {
        Some(p) => Some(super::machine_arg::load_for(p, &loaded.recipe)?),
        None => None,
    };
    if args.watch {
        super::live_server::loopback_only(args.listen)?;
    }
    let mut plan = Plan::new(&loaded, machine.as_ref())?;
    if args.centre {
        plan = plan.with_centring(CentringSettings::default());
    }
    let history = args.history.location(&args.runs)?;
    if args.dry_run {
        return dry_run(&plan);
    }
    let plan = plan.checked()?;
    let seeds = new_run::sim_seeds(&args.wafer, args.seed);
    let table = machine
        .as_ref()
        .map(toml::Table::try_from)
        .transpose()
        .context("cannot freeze the machine file")?;
    let new = new_run::NewRun {
        wafer: args.wafer,
        lot: args.lot,
        operator: args.operator,
        runs_dir: args.runs,
        machine: table,
        seeds,
    };
    let (folder, meta) = new_run::create(&plan, &new)?;
    eprintln!("run {} in {}", meta.run.id, folder.root.display());
    measure::session(
        &plan,
        folder,
        meta,
        Which::Missing,
        args.yes,
        "run",
        measure::Outlets {
            history: &history,
            watch: args.watch.then_some(args.listen),
        },
    )
}

/// Prints the plan in measuring order, its path length and its estimated duration; exit 2
/// (after printing) when it breaks the soft limits.
fn dry_run(plan: &Plan) -> anyhow::Result<u8> {
    outln!(
        "{:>5} {:>5} {:>9} {:>9} {:>10} {:>10}",
        "order",
        "site",
        "x_mm",
        "y_mm",
        "stage_x",
        "stage_y"
    );
    let mut order = 0;
    // The lamp-drift references between sites are steps of the plan too.
    for step in plan
        .steps
        .iter()
        .skip_while(|s| !matches!(s, Step::Site(_)))
    {
        match step {
            Step::Site(s) => {
                order += 1;
                outln!(
                    "{:>5} {:>5} {:>9.3} {:>9.3} {:>10.3} {:>10.3}",
                    order,
                    s.site.number,
                    s.site.x_mm,
                    s.site.y_mm,
                    s.stage_mm[0],
                    s.stage_mm[1]
                );
            }
            Step::Reference(_) => outln!("{:>5} reference taken again (lamp drift)", ""),
            // Before the sites, said below the table.
            Step::Home | Step::Centre(_) => {}
            // A map plan has no gauge steps.
            Step::Gauge(_) | Step::Reload { .. } => {}
        }
    }
    let a = plan.acquire();
    let m = &plan.machine;
    let per_site = (a.settle_ms + a.integration_ms * a.averages as f64) / 1000.0;
    let sites: Vec<_> = plan.sites().map(|s| s.site).collect();
    outln!(
        "{} sites, path {:.1} mm from the wafer centre, at least {:.1} s from the stage's home corner ({}: feed {} mm/min, accel {} mm/s², {:.0} ms per site)",
        sites.len(),
        path_length((0.0, 0.0), &sites),
        plan.duration_s,
        m.name,
        m.stage.feed_mm_min,
        m.stage.accel_mm_s2,
        per_site * 1000.0
    );
    if let Some(s) = &plan.centring {
        outln!(
            "the wafer is centred first ({} rays, edges searched ±{} mm about the rim): the stage positions above move by the measured centre and rotation",
            s.rays, s.search_mm
        );
    }
    if let Some(problem) = plan.limit_problem() {
        eprintln!("error: {problem}");
        return Ok(super::exit::INVALID);
    }
    Ok(super::exit::OK)
}
