//! `isopach watch RUN [--listen ADDR]`: the live page of a run measured by another process
//! (or a finished one), fed by following its `journal.jsonl`; serves until Ctrl-C.

use isopach::run::folder::RunFolder;
use isopach::run::live::{LiveHub, LiveState};
use std::path::PathBuf;
use std::time::Duration;

/// How often the journal is looked at.
const POLL: Duration = Duration::from_millis(250);

/// Arguments of `isopach watch`.
#[derive(clap::Args, Debug)]
#[command(after_help = "Examples:
  isopach watch runs/20261202-090507-W07            # prints http://127.0.0.1:PORT/
  isopach watch runs/20261202-090507-W07 --listen 127.0.0.1:8040")]
pub struct Args {
    /// The run folder (running or finished).
    run: PathBuf,
    /// Address of the page (loopback only; port 0 = a free one).
    #[arg(long, default_value = super::live_server::DEFAULT_LISTEN)]
    listen: std::net::SocketAddr,
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let folder = RunFolder::new(&args.run);
    let mut state = LiveState::read(&folder)?;
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()?;
    runtime.block_on(async move {
        let hub = LiveHub::new(&state);
        let bound = super::live_server::serve(hub.clone(), args.listen).await?;
        eprintln!("live view: http://{bound}/ (Ctrl-C to stop)");
        let follow = async {
            loop {
                tokio::time::sleep(POLL).await;
                match state.follow(&folder) {
                    Ok(true) => hub.publish(&state),
                    Ok(false) => {}
                    // A journal caught mid-write is read again at the next look.
                    Err(e) => tracing::debug!("journal not read: {e}"),
                }
            }
        };
        tokio::select! {
            _ = follow => {}
            _ = super::measure::wait_for_stop_signal() => {}
        }
        anyhow::Ok(())
    })?;
    runtime.shutdown_background();
    Ok(super::exit::OK)
}
