//! Shared handling of `--history URL` (or `ISOPACH_HISTORY`): which history a command reads
//! or writes. The setting is never echoed (clap's help hides the environment's value): it may
//! hold a password.

use isopach::history::location::{HistoryLocation, LocationError};
use std::path::Path;

/// The `--history` flag, flattened into every command that uses the history.
#[derive(clap::Args)]
pub struct HistoryArg {
    /// The run history: a postgres:// URL (a lab's shared server) or the path of an SQLite
    /// file; default: .history.sqlite in the runs folder. Also read from ISOPACH_HISTORY.
    #[arg(
        long = "history",
        value_name = "URL",
        env = "ISOPACH_HISTORY",
        hide_env_values = true
    )]
    setting: Option<String>,
}

impl HistoryArg {
    /// The history of the runs in `runs_dir`.
    pub fn location(&self, runs_dir: &Path) -> Result<HistoryLocation, LocationError> {
        HistoryLocation::from_setting(self.setting.as_deref(), runs_dir)
    }

    /// The history of the run in `run_folder` (its runs folder's, by default).
    pub fn location_of_run(&self, run_folder: &Path) -> Result<HistoryLocation, LocationError> {
        self.location(isopach::run::history_entry::runs_dir_of(run_folder))
    }
}

impl std::fmt::Debug for HistoryArg {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        // Shown without its password, like every history location.
        let shown = self
            .setting
            .as_deref()
            .map(isopach::history::location::redact);
        f.debug_struct("HistoryArg")
            .field("setting", &shown)
            .finish()
    }
}

/// Runs a history call (the server client is async) from a command that runs no runtime of
/// its own.
pub fn block_on<F: std::future::Future>(f: F) -> anyhow::Result<F::Output> {
    let runtime = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()?;
    Ok(runtime.block_on(f))
}
