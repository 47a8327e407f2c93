//! The history store: what a database backend must do (run statements in one transaction,
//! answer a query, apply migrations under a lock), with values and rows in a form both
//! backends share, so the SQL and the mapping to records are written once (`schema.rs`,
//! `db.rs`).

use super::schema::Migration;
use futures::future::BoxFuture;

/// One SQL value, as bound to a statement or read from a row.
#[derive(Debug, Clone, PartialEq)]
pub enum Value {
    Null,
    Text(String),
    Int(i64),
    Real(f64),
    Bool(bool),
}

impl Value {
    /// A real number; NaN is stored as NULL (SQLite has no NaN).
    pub fn real(x: f64) -> Value {
        if x.is_finite() {
            Value::Real(x)
        } else {
            Value::Null
        }
    }

    /// An optional text (NULL when absent).
    pub fn opt_text(s: Option<&str>) -> Value {
        s.map_or(Value::Null, |s| Value::Text(s.to_string()))
    }
}

/// A statement and the values bound to `$1`, `$2`, ….
#[derive(Debug, Clone)]
pub struct Statement {
    pub sql: &'static str,
    pub params: Vec<Value>,
}

/// A database the history can live in. Every method either completes or leaves the database
/// as it was (one transaction).
pub trait HistoryStore: Send {
    /// Runs `statements` in order in one transaction.
    fn transact(&mut self, statements: Vec<Statement>) -> BoxFuture<'_, Result<(), StoreError>>;

    /// The rows of one query.
    fn query<'a>(
        &'a mut self,
        sql: &'static str,
        params: Vec<Value>,
    ) -> BoxFuture<'a, Result<Vec<Vec<Value>>, StoreError>>;

    /// Applies the migrations newer than the database's schema, under a lock so concurrent
    /// first users apply each once; returns the schema version found before.
    fn migrate(
        &mut self,
        migrations: &'static [Migration],
    ) -> BoxFuture<'_, Result<i64, StoreError>>;
}

/// Why a backend could not do what it was asked.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error(transparent)]
    Sqlite(#[from] rusqlite::Error),
    #[error(transparent)]
    Postgres(#[from] tokio_postgres::Error),
    /// The server did not answer in time.
    #[error("no answer from the server within {0} s")]
    Timeout(u64),
    /// The database holds a newer schema than this build knows.
    #[error("the history has schema version {found}, newer than this isopach knows ({known}): upgrade isopach on this bench (or point --history at another history)")]
    Newer { found: i64, known: i64 },
}
