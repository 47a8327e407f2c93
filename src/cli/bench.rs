//! `isopach bench serve [--machine M] [--time-scale S]`: the virtual G-code controller on a
//! pseudo-terminal, whose path is printed, until Ctrl-C. Point a terminal or a machine file's
//! `stage.port` at it.
//!
//! `isopach bench centre [--recipe R] [--machine M] [--write-machine] [--json]`: find where the
//! wafer really sits (centre and flat/notch rotation) from edge scans; print it, or write it
//! into the machine file's `[chuck]`.

use super::machine_arg;
use super::output::outln;
use anyhow::Context;
use isopach::bench::centring::probe::ProbeSettings;
use isopach::bench::centring::{locate, BenchProbe, Centring, CentringSettings};
use isopach::bench::machine::builtin_simulated;
use isopach::bench::machine::chuck_edit::set_chuck;
use isopach::bench::sim::clock::SimClock;
use isopach::bench::sim::controller::VirtualConfig;
use isopach::bench::sim::pty::PtyController;
use isopach::bench::{Bench, ChuckTransform, MachineFile};
use isopach::recipe::LoadedRecipe;
use isopach::run::sequencer::{stop_stage, Scope, Stop};
use std::path::PathBuf;

/// Arguments of `isopach bench`.
#[derive(clap::Args, Debug)]
#[command(
    after_help = "Examples:\n  isopach bench serve\n  isopach bench serve --machine fixtures/machines/poll.toml --time-scale 1\n  isopach bench centre --recipe recipes/oxide-150-49.toml --machine bench-a.toml --write-machine"
)]
pub struct Args {
    #[command(subcommand)]
    action: Action,
}

#[derive(clap::Subcommand, Debug)]
enum Action {
    /// Serve the virtual controller on a pseudo-terminal and print its path.
    Serve {
        /// Take travel, feed, acceleration and [simulation] from this machine file.
        #[arg(long)]
        machine: Option<PathBuf>,
        /// Virtual time speed-up (default: the machine file's simulation.time_scale).
        #[arg(long)]
        time_scale: Option<f64>,
    },
    /// Find the wafer centre and flat/notch rotation from edge scans.
    #[command(
        after_help = "Examples:\n  isopach bench centre --recipe recipes/oxide-150-49.toml --machine bench-a.toml\n  isopach bench centre --recipe recipes/oxide-150-49.toml --machine bench-a.toml --write-machine"
    )]
    Centre(CentreArgs),
}

/// Arguments of `isopach bench centre`.
#[derive(clap::Args, Debug)]
struct CentreArgs {
    /// The recipe whose [wafer] (diameter, flat or notch and its angle) is on the chuck
    /// (default: the 150 mm wafer of the shipped oxide recipe, recipes/oxide-150-49.toml).
    #[arg(long)]
    recipe: Option<PathBuf>,
    /// The machine file of the bench (default: the built-in simulated bench).
    #[arg(long)]
    machine: Option<PathBuf>,
    /// Write the measured centre and rotation into the machine file's [chuck] (other lines
    /// and comments kept).
    #[arg(long, requires = "machine")]
    write_machine: bool,
    /// Print the result as one JSON object.
    #[arg(long)]
    json: bool,
    /// Do not ask before moving a real stage.
    #[arg(long)]
    yes: bool,
    /// Seed of the simulated bench (its wafer and placement error).
    #[arg(long, default_value_t = 0)]
    seed: u64,
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    match args.action {
        Action::Serve {
            machine,
            time_scale,
        } => serve(machine, time_scale),
        Action::Centre(a) => centre(a),
    }
}

fn serve(machine: Option<PathBuf>, time_scale: Option<f64>) -> anyhow::Result<u8> {
    let m = match &machine {
        Some(p) => match machine_arg::load_or_report(p, None)? {
            Ok(m) => m,
            Err(code) => return Ok(code),
        },
        None => builtin_simulated(),
    };
    let scale = time_scale.unwrap_or(m.simulation.time_scale);
    if !(scale > 0.0 && scale.is_finite()) {
        anyhow::bail!("--time-scale {scale} must be a positive number");
    }
    let rt = tokio::runtime::Runtime::new()?;
    rt.block_on(async move {
        let pty = PtyController::spawn(VirtualConfig::from_machine(&m), SimClock::new(scale))?;
        outln!("{}", pty.path());
        eprintln!(
            "virtual controller on {} ({}× time; travel x {:?}, y {:?} mm); Ctrl-C to stop",
            pty.path(),
            scale,
            m.stage.travel_x_mm,
            m.stage.travel_y_mm
        );
        tokio::signal::ctrl_c().await?;
        pty.abort();
        Ok(super::exit::OK)
    })
}

/// The wafer assumed when `bench centre` is given no recipe.
const DEFAULT_WAFER_RECIPE: &str = include_str!("../../recipes/oxide-150-49.toml");

fn centre(a: CentreArgs) -> anyhow::Result<u8> {
    let recipe = match &a.recipe {
        Some(path) => isopach::recipe::load(path)?,
        None => {
            eprintln!(
                "no --recipe: centring a 150 mm wafer as in recipes/oxide-150-49.toml (give --recipe for another diameter, flat or notch)"
            );
            let path = PathBuf::from("recipes/oxide-150-49.toml");
            LoadedRecipe {
                recipe: isopach::recipe::parse(DEFAULT_WAFER_RECIPE, &path)?,
                path,
                text: DEFAULT_WAFER_RECIPE.to_string(),
            }
        }
    };
    let m = match &a.machine {
        Some(p) => match machine_arg::load_or_report(p, Some(&recipe.recipe))? {
            Ok(m) => m,
            Err(code) => return Ok(code),
        },
        None => builtin_simulated(),
    };
    if !m.stage_is_simulated() {
        super::safety::confirm_motion(&m.stage.port, a.yes)?;
    }
    let nominal = ChuckTransform::from_spec(&m.chuck);
    let runtime = tokio::runtime::Runtime::new()?;
    let found = runtime.block_on(async {
        let scope = Scope::new(super::measure::stop_signals());
        let mut bench = scope
            .guard(async { Ok(Bench::open(Some(&m), &recipe, a.seed).await?) })
            .await;
        let result = match &mut bench {
            Ok(bench) => scope.guard(measure(bench, &recipe, &m)).await,
            Err(_) => Err(Stop::Interrupted),
        };
        if let (Err(_), Ok(bench)) = (&result, &mut bench) {
            if let Err(e) = stop_stage(bench).await {
                eprintln!("{e}");
            }
        }
        match (bench, result) {
            (Err(Stop::Fault(e)), _) | (_, Err(Stop::Fault(e))) => Err(e),
            (Err(Stop::Interrupted), _) | (_, Err(Stop::Interrupted)) => Ok(None),
            (Ok(_), Ok(c)) => Ok(Some(c)),
        }
    });
    runtime.shutdown_background();
    let Some(c) = found.context("centring stopped")? else {
        eprintln!("stopped: the stage was told to stop; nothing was written");
        return Ok(super::exit::INTERRUPTED);
    };
    if a.json {
        outln!("{}", serde_json::to_string(&c)?);
    } else {
        outln!("{}", c.describe(&nominal));
        outln!(
            "[chuck] center_mm = [{:.3}, {:.3}], rotation_deg = {:.3}",
            c.center_mm[0],
            c.center_mm[1],
            c.rotation_deg
        );
    }
    // clap makes --write-machine require --machine.
    if let (true, Some(path)) = (a.write_machine, &a.machine) {
        write_machine(path, &c)?;
        eprintln!(
            "wrote [chuck] center_mm and rotation_deg to {}",
            path.display()
        );
    }
    Ok(super::exit::OK)
}

/// Homes when the machine file says how, then centres with the recipe's acquisition settings.
async fn measure(
    bench: &mut Bench,
    recipe: &LoadedRecipe,
    m: &MachineFile,
) -> anyhow::Result<Centring> {
    if !m.stage.home.is_empty() {
        eprintln!("homing the stage");
        bench.stage.home().await.context("homing failed")?;
    }
    let acq = &recipe.recipe.acquire;
    let settings = ProbeSettings {
        integration_ms: acq.integration_ms,
        averages: acq.averages,
        settle_ms: acq.settle_ms,
    };
    let nominal = bench.transform;
    eprintln!(
        "centring the wafer from ({:.3}, {:.3}) mm",
        nominal.center_mm[0], nominal.center_mm[1]
    );
    let mut probe = BenchProbe::new(bench, settings).await?;
    Ok(locate(
        &mut probe,
        &recipe.wafer(),
        &nominal,
        &CentringSettings::default(),
    )
    .await?)
}

/// Writes the measured centre and rotation into the machine file's `[chuck]`, atomically.
fn write_machine(path: &std::path::Path, c: &Centring) -> anyhow::Result<()> {
    let text =
        std::fs::read_to_string(path).with_context(|| format!("cannot read {}", path.display()))?;
    let edited = set_chuck(&text, path, c.center_mm, c.rotation_deg)?;
    isopach::run::files::write_atomic(path, edited.as_bytes())
        .with_context(|| format!("cannot write {}", path.display()))
}
