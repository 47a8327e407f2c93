//! Run-to-run history: the runs database (SQLite or PostgreSQL), control charts and the trend
//! chart.

pub mod chart;
pub mod control;
pub mod db;
pub mod location;
pub mod postgres;
pub mod record;
pub mod schema;
pub mod sqlite;
pub mod store;
