//! The built-in simulated bench: the machine file used when none is given.

use super::{parse, LoadedMachine, MachineFile};
use std::path::Path;

/// The machine file of the built-in simulated bench: a 480 mm square stage (any wafer up to
/// 450 mm fits) with the chuck in the middle, confirmed by polling, virtual time 25× faster.
pub const BUILTIN_SIMULATED: &str = r#"
name = "built-in simulated bench"
[stage]
port = "simulated"
init = ["G21", "G90"]
unlock = ["$X"]
home = ["$H"]
motion_complete = "poll"
status_query = "?"
poll_interval_ms = 20
reset = "\u0018"
banner = "isopach virtual stage"
startup_wait_s = 0.5
feed_mm_min = 6000
accel_mm_s2 = 1000
travel_x_mm = [0, 480]
travel_y_mm = [0, 480]
margin_mm = 1
backlash_mm = 0.5
[chuck]
center_mm = [240, 240]
[spectrometer]
kind = "simulated"
[simulation]
time_scale = 25
[simulation.controller]
start_locked = true
"#;

/// The built-in simulated bench's machine file, parsed.
pub fn builtin_simulated() -> MachineFile {
    parse(BUILTIN_SIMULATED, Path::new("<built-in>")).expect("the built-in machine file is valid")
}

/// The built-in bench as if loaded from a file named `<built-in>`.
pub fn builtin_loaded() -> LoadedMachine {
    LoadedMachine {
        machine: builtin_simulated(),
        path: Path::new("<built-in>").into(),
        text: BUILTIN_SIMULATED.to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bench::machine::MotionComplete;

    #[test]
    fn builtin_machine_is_valid() {
        let m = builtin_simulated();
        assert!(m.stage_is_simulated());
        assert_eq!(m.stage.motion_complete, MotionComplete::Poll);
    }
}
