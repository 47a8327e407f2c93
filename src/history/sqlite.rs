//! The SQLite backend (bundled, nothing to install): the default history of one bench, a file
//! in its runs folder. Writers wait for each other (busy timeout) instead of failing, so
//! several processes can share one file.

use super::schema::{self, Migration};
use super::store::{HistoryStore, Statement, StoreError, Value};
use futures::future::{self, BoxFuture, FutureExt};
use rusqlite::types::{ToSqlOutput, ValueRef};
use rusqlite::{Connection, ToSql, TransactionBehavior};
use std::path::Path;
use std::time::Duration;

/// How long a writer waits for another to finish before giving up.
const BUSY_WAIT: Duration = Duration::from_secs(30);

/// An open SQLite history file.
pub struct SqliteStore {
    conn: Connection,
}

impl SqliteStore {
    /// Opens (creating if needed) the file at `path`.
    pub fn open(path: &Path) -> Result<SqliteStore, rusqlite::Error> {
        let conn = Connection::open(path)?;
        conn.busy_timeout(BUSY_WAIT)?;
        conn.execute_batch("PRAGMA foreign_keys = ON; PRAGMA journal_mode = WAL;")?;
        Ok(SqliteStore { conn })
    }

    fn transact_now(&mut self, statements: &[Statement]) -> rusqlite::Result<()> {
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)?;
        for s in statements {
            tx.prepare_cached(s.sql)?
                .execute(rusqlite::params_from_iter(s.params.iter().map(Bind)))?;
        }
        tx.commit()
    }

    fn query_now(&mut self, sql: &str, params: &[Value]) -> rusqlite::Result<Vec<Vec<Value>>> {
        let mut stmt = self.conn.prepare_cached(sql)?;
        let n = stmt.column_count();
        let rows = stmt.query_map(rusqlite::params_from_iter(params.iter().map(Bind)), |r| {
            (0..n).map(|i| r.get_ref(i).map(value_of)).collect()
        })?;
        rows.collect()
    }

    fn migrate_now(&mut self, migrations: &'static [Migration]) -> Result<i64, StoreError> {
        // IMMEDIATE takes the write lock first: two first users migrate one after the other.
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)?;
        tx.execute_batch(schema::VERSION_TABLE)?;
        let found: i64 = tx.query_row(schema::CURRENT_VERSION, [], |r| r.get(0))?;
        // A file of the first release has its tables but no version table: it is version 1.
        let legacy: bool = tx.query_row(
            "SELECT COUNT(*) > 0 FROM sqlite_master WHERE type = 'table' AND name = 'runs'",
            [],
            |r| r.get(0),
        )?;
        let found = if found == 0 && legacy { 1 } else { found };
        let todo = schema::pending(found, migrations).map_err(|found| StoreError::Newer {
            found,
            known: schema::latest(),
        })?;
        for m in todo {
            tx.execute_batch(m.sql)?;
            tx.execute(
                schema::MARK_APPLIED,
                rusqlite::params![m.version, crate::history::db::now_text()],
            )?;
        }
        tx.commit()?;
        Ok(found)
    }
}

impl HistoryStore for SqliteStore {
    fn transact(&mut self, statements: Vec<Statement>) -> BoxFuture<'_, Result<(), StoreError>> {
        future::ready(self.transact_now(&statements).map_err(Into::into)).boxed()
    }

    fn query<'a>(
        &'a mut self,
        sql: &'static str,
        params: Vec<Value>,
    ) -> BoxFuture<'a, Result<Vec<Vec<Value>>, StoreError>> {
        future::ready(self.query_now(sql, &params).map_err(Into::into)).boxed()
    }

    fn migrate(
        &mut self,
        migrations: &'static [Migration],
    ) -> BoxFuture<'_, Result<i64, StoreError>> {
        future::ready(self.migrate_now(migrations)).boxed()
    }
}

/// A [`Value`] bound to an SQLite statement.
struct Bind<'a>(&'a Value);

impl ToSql for Bind<'_> {
    fn to_sql(&self) -> rusqlite::Result<ToSqlOutput<'_>> {
        Ok(match self.0 {
            Value::Null => ToSqlOutput::Borrowed(ValueRef::Null),
            Value::Text(s) => ToSqlOutput::Borrowed(ValueRef::Text(s.as_bytes())),
            Value::Int(i) => ToSqlOutput::Borrowed(ValueRef::Integer(*i)),
            Value::Real(x) => ToSqlOutput::Borrowed(ValueRef::Real(*x)),
            Value::Bool(b) => ToSqlOutput::Borrowed(ValueRef::Integer(*b as i64)),
        })
    }
}

fn value_of(v: ValueRef<'_>) -> Value {
    match v {
        ValueRef::Null => Value::Null,
        ValueRef::Integer(i) => Value::Int(i),
        ValueRef::Real(x) => Value::Real(x),
        ValueRef::Text(t) | ValueRef::Blob(t) => Value::Text(String::from_utf8_lossy(t).into()),
    }
}
