//! Simulated twins of the bench, in the library so the demo and the tests run the same code
//! paths as a real bench: a virtual G-code controller (served in-process or on a
//! pseudo-terminal), a virtual wafer and a virtual spectrometer, all in virtual time.

pub mod clock;
pub mod controller;
pub mod mechanics;
pub mod placement;
pub mod pty;
pub mod server;
pub mod spectrometer;
pub mod stage_memory;
pub mod wafer;

/// A stable 64-bit hash of a name (FNV-1a): the same name gives the same seed or file key on
/// every machine and version.
pub fn name_hash(name: &str) -> u64 {
    name.bytes().fold(0xcbf2_9ce4_8422_2325u64, |h, b| {
        (h ^ b as u64).wrapping_mul(0x100_0000_01b3)
    })
}
