//! Map runs: plan, sequencer, journal, run folder, history.

pub mod files;
pub mod folder;
