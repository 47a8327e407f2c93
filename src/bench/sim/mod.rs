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
