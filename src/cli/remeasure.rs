//! `isopach remeasure` (not built yet).

/// Arguments of `isopach remeasure`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Arguments (not built yet).
    #[arg(trailing_var_arg = true, allow_hyphen_values = true)]
    rest: Vec<String>,
}

/// Runs the command.
pub fn run(_args: Args) -> anyhow::Result<u8> {
    anyhow::bail!("isopach remeasure is not built yet")
}
