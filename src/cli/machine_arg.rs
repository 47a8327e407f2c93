//! Shared handling of `--machine M`: load and validate, or report every problem with its line.

use super::output::outln;
use isopach::bench::machine::{self, MachineError, MachineFile};
use std::path::Path;

/// The machine file at `path`, or `Err(exit code)` after printing its problems.
pub fn load(path: &Path) -> anyhow::Result<Result<MachineFile, u8>> {
    match machine::load(path) {
        Ok(l) => Ok(Ok(l.machine)),
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
