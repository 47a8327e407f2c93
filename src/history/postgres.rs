//! The PostgreSQL backend: one shared history for a lab's benches, through `tokio-postgres` on
//! the tokio runtime the command already runs. Every call is bounded in time, so a server that
//! stops answering delays a run's end by at most [`ANSWER_WAIT`], never hangs it.

use super::location::ServerUrl;
use super::schema::{self, Migration};
use super::store::{HistoryStore, Statement, StoreError, Value};
use futures::future::{try_join_all, BoxFuture, FutureExt};
use std::future::Future;
use std::time::Duration;
use tokio_postgres::types::{ToSql, Type};
use tokio_postgres::{Client, Config, NoTls, Row};

/// How long to wait for a connection when the URL sets no `connect_timeout`.
const CONNECT_WAIT: Duration = Duration::from_secs(5);
/// How long to wait for any one call (a transaction, a query, the migrations).
pub const ANSWER_WAIT: Duration = Duration::from_secs(30);
/// The advisory lock that makes concurrent first users migrate one at a time.
const MIGRATION_LOCK: i64 = 0x0069_736f_7061_6368; // "isopach" in ASCII

/// A connection to the history's server.
pub struct PgStore {
    client: Client,
}

impl PgStore {
    /// Connects to the server of `url`.
    pub async fn connect(url: &ServerUrl) -> Result<PgStore, StoreError> {
        let mut config: Config = url.secret().parse()?;
        if config.get_connect_timeout().is_none() {
            config.connect_timeout(CONNECT_WAIT);
        }
        if config.get_application_name().is_none() {
            config.application_name("isopach");
        }
        let (client, connection) = bounded(config.connect(NoTls)).await??;
        // The connection task ends when the client is dropped or the server goes away; its
        // error reaches the caller through the next call on the client.
        tokio::spawn(async move {
            let _ = connection.await;
        });
        Ok(PgStore { client })
    }

    async fn transact_now(&mut self, statements: Vec<Statement>) -> Result<(), StoreError> {
        let tx = self.client.transaction().await?;
        let mut distinct: Vec<&'static str> = statements.iter().map(|s| s.sql).collect();
        distinct.sort_unstable();
        distinct.dedup();
        let prepared = try_join_all(distinct.iter().map(|sql| tx.prepare(sql))).await?;
        let bound: Vec<(tokio_postgres::Statement, Vec<Param>)> = statements
            .iter()
            .map(|s| {
                let stmt = prepared[distinct.binary_search(&s.sql).unwrap_or(0)].clone();
                let params = params_for(&s.params, stmt.params());
                (stmt, params)
            })
            .collect();
        // Pipelined: the client sends every statement before the first answer comes back, in
        // order, and the server runs them in order; the first error fails the transaction.
        let tx_ref = &tx;
        try_join_all(
            bound
                .iter()
                .map(|(stmt, params)| async move { tx_ref.execute(stmt, &refs(params)).await }),
        )
        .await?;
        tx.commit().await?;
        Ok(())
    }

    async fn query_now(
        &mut self,
        sql: &str,
        params: Vec<Value>,
    ) -> Result<Vec<Vec<Value>>, StoreError> {
        let stmt = self.client.prepare(sql).await?;
        let bound = params_for(&params, stmt.params());
        let rows = self.client.query(&stmt, &refs(&bound)).await?;
        rows.iter().map(values_of).collect()
    }

    async fn migrate_now(&mut self, migrations: &'static [Migration]) -> Result<i64, StoreError> {
        let tx = self.client.transaction().await?;
        tx.execute("SELECT pg_advisory_xact_lock($1)", &[&MIGRATION_LOCK])
            .await?;
        tx.batch_execute(schema::VERSION_TABLE).await?;
        let found: i64 = tx.query_one(schema::CURRENT_VERSION, &[]).await?.get(0);
        let todo = schema::pending(found, migrations).map_err(|found| StoreError::Newer {
            found,
            known: schema::latest(),
        })?;
        for m in todo {
            tx.batch_execute(m.sql).await?;
            tx.execute(
                schema::MARK_APPLIED,
                &[&m.version, &crate::history::db::now_text()],
            )
            .await?;
        }
        tx.commit().await?;
        Ok(found)
    }
}

impl HistoryStore for PgStore {
    fn transact(&mut self, statements: Vec<Statement>) -> BoxFuture<'_, Result<(), StoreError>> {
        async move { bounded(self.transact_now(statements)).await? }.boxed()
    }

    fn query<'a>(
        &'a mut self,
        sql: &'static str,
        params: Vec<Value>,
    ) -> BoxFuture<'a, Result<Vec<Vec<Value>>, StoreError>> {
        async move { bounded(self.query_now(sql, params)).await? }.boxed()
    }

    fn migrate(
        &mut self,
        migrations: &'static [Migration],
    ) -> BoxFuture<'_, Result<i64, StoreError>> {
        async move { bounded(self.migrate_now(migrations)).await? }.boxed()
    }
}

/// `f`, or a timeout error after [`ANSWER_WAIT`].
async fn bounded<T>(f: impl Future<Output = T>) -> Result<T, StoreError> {
    tokio::time::timeout(ANSWER_WAIT, f)
        .await
        .map_err(|_| StoreError::Timeout(ANSWER_WAIT.as_secs()))
}

type Param = Box<dyn ToSql + Sync + Send>;

/// The values as the statement's parameter types want them (a NULL needs its type).
fn params_for(values: &[Value], types: &[Type]) -> Vec<Param> {
    values
        .iter()
        .zip(types)
        .map(|(v, ty)| -> Param {
            match v {
                Value::Text(s) => Box::new(s.clone()),
                Value::Int(i) if *ty == Type::INT4 => Box::new(*i as i32),
                Value::Int(i) => Box::new(*i),
                Value::Real(x) => Box::new(*x),
                Value::Bool(b) => Box::new(*b),
                Value::Null if *ty == Type::FLOAT8 => Box::new(None::<f64>),
                Value::Null if *ty == Type::INT8 => Box::new(None::<i64>),
                Value::Null if *ty == Type::BOOL => Box::new(None::<bool>),
                Value::Null => Box::new(None::<String>),
            }
        })
        .collect()
}

fn refs(params: &[Param]) -> Vec<&(dyn ToSql + Sync)> {
    params.iter().map(|p| &**p as &(dyn ToSql + Sync)).collect()
}

/// A row as plain values, by each column's type.
fn values_of(row: &Row) -> Result<Vec<Value>, StoreError> {
    (0..row.len())
        .map(|i| {
            let ty = row.columns()[i].type_();
            Ok(if *ty == Type::INT8 {
                row.try_get::<_, Option<i64>>(i)?
                    .map_or(Value::Null, Value::Int)
            } else if *ty == Type::INT4 {
                row.try_get::<_, Option<i32>>(i)?
                    .map_or(Value::Null, |v| Value::Int(v.into()))
            } else if *ty == Type::FLOAT8 {
                row.try_get::<_, Option<f64>>(i)?
                    .map_or(Value::Null, Value::Real)
            } else if *ty == Type::BOOL {
                row.try_get::<_, Option<bool>>(i)?
                    .map_or(Value::Null, Value::Bool)
            } else {
                row.try_get::<_, Option<String>>(i)?
                    .map_or(Value::Null, Value::Text)
            })
        })
        .collect()
}
