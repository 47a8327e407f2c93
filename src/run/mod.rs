//! Map runs: plan, sequencer, journal, run folder, history.

pub mod derive;
pub mod events;
pub mod files;
pub mod folder;
pub mod history_entry;
pub mod id;
pub mod journal;
pub mod measure;
pub mod outputs;
pub mod plan;
pub mod refit;
pub mod sequencer;
pub mod session;
