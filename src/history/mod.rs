//! Run-to-run history: the runs database, control charts and the trend chart.

pub mod chart;
pub mod control;
pub mod db;
pub mod record;
