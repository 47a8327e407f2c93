//! `isopach compare` (not built yet).

/// Arguments of `isopach compare`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Arguments (not built yet).
    #[arg(trailing_var_arg = true, allow_hyphen_values = true)]
    rest: Vec<String>,
}

/// Runs the command.
pub fn run(_args: Args) -> anyhow::Result<u8> {
    anyhow::bail!("isopach compare is not built yet")
}
