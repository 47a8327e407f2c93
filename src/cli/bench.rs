//! `isopach bench serve [--machine M] [--time-scale S]`: the virtual G-code controller on a
//! pseudo-terminal, whose path is printed, until Ctrl-C. Point a terminal or a machine file's
//! `stage.port` at it.

use super::machine_arg;
use super::output::outln;
use isopach::bench::machine::builtin_simulated;
use isopach::bench::sim::clock::SimClock;
use isopach::bench::sim::controller::VirtualConfig;
use isopach::bench::sim::pty::PtyController;
use std::path::PathBuf;

/// Arguments of `isopach bench`.
#[derive(clap::Args, Debug)]
#[command(
    after_help = "Examples:\n  isopach bench serve\n  isopach bench serve --machine fixtures/machines/poll.toml --time-scale 1"
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
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let Action::Serve {
        machine,
        time_scale,
    } = args.action;
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
