//! Shared handling of `--machine M`: load and validate it (with the rules that need the recipe
//! too, such as the reference material), or report every problem with its line.

use super::output::outln;
use isopach::bench::machine::{self, MachineError, MachineFile};
use isopach::recipe::Recipe;
use std::path::Path;

/// The machine file at `path`, checked on its own and against `recipe`.
pub fn load_for(path: &Path, recipe: &Recipe) -> Result<MachineFile, MachineError> {
    let loaded = machine::load(path)?;
    machine::check_pair(recipe, Some(&loaded)).map_err(MachineError::Invalid)?;
    Ok(loaded.machine)
}

/// The machine file at `path` (checked against `recipe` when given), or `Err(exit code)`
/// after printing every problem as `FILE:LINE:COL: …`.
pub fn load_or_report(
    path: &Path,
    recipe: Option<&Recipe>,
) -> anyhow::Result<Result<MachineFile, u8>> {
    let result = match recipe {
        Some(r) => load_for(path, r),
        None => machine::load(path).map(|l| l.machine),
    };
    match result {
        Ok(m) => Ok(Ok(m)),
        Err(MachineError::Invalid(problems)) => {
            for p in &problems {
                outln!("{p}");
            }
            eprintln!("{}: {} error(s)", path.display(), problems.len());
            Ok(Err(super::exit::INVALID))
        }
        Err(e) => Err(e.into()),
    }
}
