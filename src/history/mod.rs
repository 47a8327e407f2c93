//! Run-to-run history: control charts and the runs database.

pub mod control;
pub mod db;
