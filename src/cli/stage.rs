//! `isopach stage home|where|move X Y [--machine M] [--yes]`: bench set-up.
//!
//! Without `--machine` the built-in simulated bench is used. Before the first motion on a real
//! port the user is asked to confirm (`--yes` skips it); Ctrl-C stops motion. A virtual stage
//! starts where the previous `stage` command of the bench session left it.

use super::machine_arg;
use super::output::outln;
use isopach::bench::machine::builtin_simulated;
use isopach::bench::open::open_stage_with;
use isopach::bench::sim::clock::SimClock;
use isopach::bench::sim::controller::VirtualConfig;
use isopach::bench::sim::stage_memory::StageMemory;
use isopach::bench::{ChuckTransform, Stage};
use std::path::PathBuf;

/// Arguments of `isopach stage`.
#[derive(clap::Args, Debug)]
#[command(
    after_help = "Examples:\n  isopach stage where --machine machine.toml\n  isopach stage home --machine machine.toml\n  isopach stage move 100 100 --machine machine.toml\n  isopach stage move 0 0 --wafer --machine machine.toml   # the wafer centre"
)]
pub struct Args {
    #[command(subcommand)]
    action: Action,
    /// The machine file (default: the built-in simulated bench).
    #[arg(long, global = true)]
    machine: Option<PathBuf>,
    /// Do not ask before moving a real stage.
    #[arg(long, global = true)]
    yes: bool,
}

#[derive(clap::Subcommand, Debug)]
enum Action {
    /// Home the stage with the machine file's homing lines (resets a latched alarm first).
    Home,
    /// Print the stage position (stage and wafer frames).
    Where,
    /// Move to X Y (stage frame, mm; wafer frame with --wafer), within the soft limits.
    #[command(
        after_help = "Examples:\n  isopach stage move 100 100 --machine bench-a.toml\n  isopach stage move -20 35 --wafer --machine bench-a.toml   # a wafer site"
    )]
    Move {
        /// Target X, mm (negative values allowed).
        #[arg(allow_negative_numbers = true)]
        x_mm: f64,
        /// Target Y, mm.
        #[arg(allow_negative_numbers = true)]
        y_mm: f64,
        /// X and Y are wafer coordinates, placed by the machine file's [chuck].
        #[arg(long)]
        wafer: bool,
    },
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let m = match &args.machine {
        Some(p) => match machine_arg::load_or_report(p, None)? {
            Ok(m) => m,
            Err(code) => return Ok(code),
        },
        None => builtin_simulated(),
    };
    let transform = ChuckTransform::from_spec(&m.chuck);
    let target = match args.action {
        Action::Move {
            x_mm,
            y_mm,
            wafer: true,
        } => Some(transform.to_stage(x_mm, y_mm)),
        Action::Move { x_mm, y_mm, .. } => Some([x_mm, y_mm]),
        _ => None,
    };
    let moves = !matches!(args.action, Action::Where);
    if moves && !m.stage_is_simulated() {
        match target {
            Some(p) => eprintln!("target: stage ({:.3}, {:.3}) mm", p[0], p[1]),
            None => eprintln!("target: home ({})", m.stage.home.join(", ")),
        }
        super::safety::confirm_motion(&m.stage.port, args.yes)?;
    }
    // A virtual stage powers up where the last command of this bench session left it.
    let memory = m
        .stage_is_simulated()
        .then(|| StageMemory::of(args.machine.as_deref()));
    let mut cfg = VirtualConfig::from_machine(&m);
    if let Some(mem) = &memory {
        mem.recall(&mut cfg);
    }
    let rt = tokio::runtime::Runtime::new()?;
    rt.block_on(async move {
        let mut stage = open_stage_with(&m, SimClock::new(m.simulation.time_scale), cfg).await?;
        let keep = |pos: Option<[f64; 2]>| {
            if let Some(mem) = &memory {
                if let Err(e) = mem.keep(pos) {
                    eprintln!(
                        "warning: cannot keep the virtual stage's position in {}: {e}",
                        mem.file().display()
                    );
                }
            }
        };
        let work = async {
            match (&args.action, target) {
                (Action::Home, _) => stage.home().await?,
                (Action::Move { .. }, Some(p)) => {
                    stage.move_to(p[0], p[1]).await?;
                    stage.wait_idle().await?;
                }
                _ => {}
            }
            stage.position().await
        };
        let pos = tokio::select! {
            r = work => r?,
            _ = tokio::signal::ctrl_c() => {
                stage.stop().await?;
                // Stopped mid-move: the virtual board keeps where the carriage stopped.
                keep(stage.position().await.ok().flatten());
                eprintln!("stopped by Ctrl-C");
                return Ok(super::exit::INTERRUPTED);
            }
        };
        keep(pos);
        print_position(&*stage, pos, &transform);
        Ok(super::exit::OK)
    })
}

fn print_position(stage: &dyn Stage, pos: Option<[f64; 2]>, t: &ChuckTransform) {
    match pos {
        Some(p) => {
            let w = t.to_wafer(p[0], p[1]);
            outln!(
                "{}: stage ({:.3}, {:.3}) mm, wafer ({:.3}, {:.3}) mm",
                stage.describe(),
                p[0],
                p[1],
                w[0],
                w[1]
            );
        }
        None => outln!(
            "{}: position unknown (the controller gives no status report; home or move first)",
            stage.describe()
        ),
    }
}
