//! The machine file (DESIGN.md §3, a contract): the bench a recipe runs on — serial port and
//! G-code dialect of the stage controller, soft limits, how the wafer sits on the chuck, the
//! spectrometer backend — plus a `[simulation]` section for the simulated parts.
//!
//! By job: the serde types and their defaults ([`schema`]), the pure rules ([`validate`]),
//! the rules that need the recipe too ([`pair`]), and the built-in simulated bench
//! ([`builtin`]). The loader here turns key paths into `FILE:LINE:COL` with
//! [`crate::tomlcheck`]. Every firmware-specific line lives in machine files, never in code.

pub mod builtin;
pub mod chuck_edit;
pub mod pair;
pub mod schema;
pub mod validate;

pub use builtin::{builtin_loaded, builtin_simulated, BUILTIN_SIMULATED};
pub use pair::{check_pair, pair_problems};
pub use schema::*;
pub use validate::{approach_signs, validate};

use crate::tomlcheck::{self, Located};
use std::path::{Path, PathBuf};

/// Why a machine file could not be loaded.
#[derive(Debug, thiserror::Error)]
pub enum MachineError {
    #[error("cannot read machine file {}: {source}", path.display())]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{}", tomlcheck::join(.0))]
    Invalid(Vec<Located>),
}

/// A machine file read from disk, with its text (frozen into run folders).
#[derive(Debug, Clone)]
pub struct LoadedMachine {
    pub machine: MachineFile,
    pub path: PathBuf,
    pub text: String,
}

/// Reads, parses and validates a machine file; every problem is reported with its position.
pub fn load(path: &Path) -> Result<LoadedMachine, MachineError> {
    let text = std::fs::read_to_string(path).map_err(|source| MachineError::Io {
        path: path.into(),
        source,
    })?;
    parse(&text, path).map(|machine| LoadedMachine {
        machine,
        path: path.into(),
        text,
    })
}

/// Parses and validates machine-file text; `path` is used in messages.
pub fn parse(text: &str, path: &Path) -> Result<MachineFile, MachineError> {
    tomlcheck::parse_validated(text, path, validate).map_err(MachineError::Invalid)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn problems_carry_their_line() {
        let text = "name = \"b\"\n[stage]\nport = \"/dev/ttyACM0\"\ntravel_x_mm = [200, 0]\ntravel_y_mm = [0, 200]\nbacklash_mm = -1\nreset = \"\\u0018\"\n";
        let Err(MachineError::Invalid(p)) = parse(text, Path::new("m.toml")) else {
            panic!("should fail")
        };
        let lines: Vec<usize> = p.iter().map(|p| p.line).collect();
        assert_eq!(lines, vec![4, 6], "{p:?}");
        assert!(p[0].message.contains("min < max"));
    }

    #[test]
    fn unknown_keys_are_named_with_their_line() {
        let text = "name = \"b\"\n[stage]\nport = \"x\"\ntravel_x_mm = [0, 1]\ntravel_y_mm = [0, 9]\nspeed = 3\n";
        let Err(MachineError::Invalid(p)) = parse(text, Path::new("m.toml")) else {
            panic!()
        };
        let speed = p
            .iter()
            .find(|p| p.message.contains("speed"))
            .expect("speed named");
        assert_eq!(speed.line, 6, "{p:?}");
        assert!(
            speed.message.starts_with("stage.speed: unknown key"),
            "{}",
            speed.message
        );
    }
}
