//! Map runs: the plan (a value), the sequencer that executes it, the event stream and its
//! subscribers (journal, fitting workers), the run folder and what is derived from it.

pub mod derive;
pub mod drift;
pub mod events;
pub mod files;
pub mod fit_workers;
pub mod folder;
pub mod gauge;
pub mod history_entry;
pub mod id;
pub mod journal;
pub mod journal_writer;
pub mod live;
pub mod machine_change;
pub mod measure;
pub mod new_run;
pub mod outputs;
pub mod plan;
pub mod refit;
pub mod report;
pub mod sequencer;
pub mod stream;
