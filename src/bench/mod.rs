//! The bench: a G-code XY stage and a spectrometer, real or simulated.
//!
//! - [`machine`]: the machine file (schema, validation with file positions);
//! - [`gcode`]: the G-code protocol (codec, state machine, async link);
//! - [`transport`]: opening a serial port as a byte stream;
//! - [`chuck`], [`limits`]: wafer→stage transform, soft limits, anti-backlash approach;
//! - [`centring`]: the wafer's true centre and rotation from edge scans;
//! - [`stage`]: the [`stage::Stage`] trait and the G-code stage;
//! - [`spectrometer`]: the [`spectrometer::Spectrometer`] trait and the `command` backend;
//!   [`helper_process`]: running its program with capped output in its own process group;
//!   [`helper_protocol`], [`helper_spectrometer`]: the `helper` backend, one long-running
//!   program spoken to over a line protocol;
//! - [`sim`]: the simulated twins (virtual controller, wafer, spectrometer, pseudo-terminal).

pub mod centring;
pub mod chuck;
pub mod gcode;
pub mod helper_process;
pub mod helper_protocol;
pub mod helper_spectrometer;
pub mod kinematics;
pub mod limits;
pub mod machine;
pub mod open;
pub mod sim;
pub mod spectrometer;
pub mod stage;
pub mod transport;

pub use chuck::ChuckTransform;
pub use machine::{LoadedMachine, MachineError, MachineFile};
pub use open::{open_stage, Bench, BenchError, SimSeeds};
pub use spectrometer::{Spectrometer, SpectrometerError};
pub use stage::{PositionHandle, Stage, StageError};

/// Longest wait the bench ever computes, s (a year: far past any real timeout).
const LONGEST_WAIT_S: f64 = 365.0 * 24.0 * 3600.0;

/// Seconds as a `Duration` that cannot panic, whatever a machine file held: negative and NaN
/// give zero, anything past a year is a year (`Instant + Duration` overflows far beyond).
pub fn duration_s(s: f64) -> std::time::Duration {
    if s > 0.0 {
        std::time::Duration::from_secs_f64(s.min(LONGEST_WAIT_S))
    } else {
        std::time::Duration::ZERO
    }
}
