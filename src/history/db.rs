//! The runs database: one row per run (bench, recipe, lot, wafer, times, run folder), one per
//! session, per-layer statistics and site values — in an SQLite file or on a PostgreSQL
//! server ([`HistoryLocation`]), with the same records and answers from either.
//!
//! The run folders stay the source of truth; this is an index for trends, rebuilt from them by
//! `isopach trend --rebuild`. Each run is written in one transaction (its old rows replaced, so
//! a re-sent session is not doubled), and a kill mid-write leaves the previous state of that
//! run, never half of it.

use super::location::HistoryLocation;
use super::postgres::PgStore;
use super::schema;
use super::sqlite::SqliteStore;
use super::store::{HistoryStore, Statement, StoreError, Value};
use serde::Serialize;
use std::collections::HashMap;

/// Why the history could not be read or written; names the history with its password hidden.
#[derive(Debug, thiserror::Error)]
#[error("run history {at}: {source}")]
pub struct HistoryError {
    /// Where the history is (a path, or a server URL without its password).
    pub at: String,
    #[source]
    pub source: StoreError,
}

/// Statistics of one fitted layer of a run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LayerRecord {
    pub layer: usize,
    pub material: String,
    pub sites_total: usize,
    pub sites_valid: usize,
    pub mean_nm: f64,
    pub std_nm: f64,
    pub min_nm: f64,
    pub max_nm: f64,
    pub nu_1sigma_pct: f64,
    pub nu_range_pct: f64,
    /// The layer's spec window, nm (NaN: none).
    pub spec_lo_nm: f64,
    pub spec_hi_nm: f64,
}

/// One site value of one layer.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SiteRecord {
    pub site: usize,
    pub layer: usize,
    pub x_mm: f64,
    pub y_mm: f64,
    pub thickness_nm: f64,
    pub valid: bool,
}

/// One measuring (or refit) session of a run, from its journal.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct SessionRecord {
    /// 1 for the session that made the run, then counting up.
    pub session: usize,
    /// `run`, `resume`, `remeasure` or `refit`.
    pub command: String,
    pub started: String,
    /// Time of the session's last journalled event.
    pub ended: String,
    /// `finished`, `stopped`, or empty when the session left no end (killed).
    pub outcome: String,
}

/// Who and what a run was: the fields the history indexes runs by.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct RunIdentity {
    /// The bench (machine file `name`) that measured the run.
    pub bench: String,
    pub run_id: String,
    /// The run folder, as the user should see it.
    pub folder: String,
    /// The recipe's `name`.
    pub recipe: String,
    pub wafer: String,
    pub lot: String,
    /// When the run started (RFC 3339).
    pub started: String,
    /// When every planned site had a result (RFC 3339), or empty.
    pub finished: String,
}

/// Everything the history keeps of a run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RunRecord {
    #[serde(flatten)]
    pub id: RunIdentity,
    pub sessions: Vec<SessionRecord>,
    pub layers: Vec<LayerRecord>,
    pub sites: Vec<SiteRecord>,
}

/// A point of a trend: one run's statistics for one layer.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TrendPoint {
    pub bench: String,
    pub run_id: String,
    pub wafer: String,
    pub lot: String,
    pub started: String,
    /// The layer's mean, or with [`TrendQuery::site`] that site's value.
    pub mean_nm: f64,
    /// NaN for a site's trend.
    pub nu_1sigma_pct: f64,
    pub sites_valid: usize,
    pub recipe: String,
    /// The layer's spec window, nm (NaN: none or not known).
    pub spec_lo_nm: f64,
    pub spec_hi_nm: f64,
}

/// Which runs a trend follows.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct TrendQuery {
    /// 0 = the first fitted layer.
    pub layer: usize,
    pub recipe: Option<String>,
    pub lot: Option<String>,
    pub bench: Option<String>,
    /// One site's value instead of the layer's mean.
    pub site: Option<usize>,
}

/// An open history (either backend), its schema brought up to date.
pub struct History {
    store: Box<dyn HistoryStore>,
    at: String,
}

impl History {
    /// Opens the history at `location` (creating an SQLite file if needed), applying any
    /// pending migrations; refuses a history with a newer schema than this build knows.
    pub async fn open(location: &HistoryLocation) -> Result<History, HistoryError> {
        let at = location.to_string();
        let err = |source| HistoryError {
            at: at.clone(),
            source,
        };
        let mut store: Box<dyn HistoryStore> = match location {
            HistoryLocation::Sqlite(path) => {
                Box::new(SqliteStore::open(path).map_err(|e| err(e.into()))?)
            }
            HistoryLocation::Postgres(url) => Box::new(PgStore::connect(url).await.map_err(err)?),
        };
        store.migrate(schema::MIGRATIONS).await.map_err(err)?;
        Ok(History { store, at })
    }

    fn err(&self, source: StoreError) -> HistoryError {
        HistoryError {
            at: self.at.clone(),
            source,
        }
    }

    /// Replaces everything kept of `run` in one transaction.
    pub async fn record(&mut self, run: &RunRecord) -> Result<(), HistoryError> {
        let statements = write_run(run);
        self.store
            .transact(statements)
            .await
            .map_err(|e| self.err(e))
    }

    /// Replaces every run of the benches that measured `runs` (and rows of an unknown bench,
    /// left by the first schema) with `runs`, in one transaction: other benches' runs in a
    /// shared history are kept.
    pub async fn rebuild(&mut self, runs: &[RunRecord]) -> Result<(), HistoryError> {
        let mut benches: Vec<&str> = runs.iter().map(|r| r.id.bench.as_str()).collect();
        benches.push("");
        benches.sort_unstable();
        benches.dedup();
        let mut statements: Vec<Statement> = benches
            .into_iter()
            .map(|b| Statement {
                sql: schema::DELETE_BENCH,
                params: vec![Value::Text(b.into())],
            })
            .collect();
        statements.extend(runs.iter().flat_map(write_run));
        self.store
            .transact(statements)
            .await
            .map_err(|e| self.err(e))
    }

    /// The trend `q` asks for, oldest run first.
    pub async fn trend(&mut self, q: &TrendQuery) -> Result<Vec<TrendPoint>, HistoryError> {
        let mut params = vec![
            Value::Int(q.layer as i64),
            Value::opt_text(q.recipe.as_deref()),
            Value::opt_text(q.lot.as_deref()),
            Value::opt_text(q.bench.as_deref()),
        ];
        let sql = match q.site {
            Some(site) => {
                params.push(Value::Int(site as i64));
                schema::SITE_TREND
            }
            None => schema::TREND,
        };
        let rows = self
            .store
            .query(sql, params)
            .await
            .map_err(|e| self.err(e))?;
        let mut points: Vec<TrendPoint> = rows
            .iter()
            .map(|r| {
                let c = Cells(r);
                let (mean_nm, nu_1sigma_pct, sites_valid) = match q.site {
                    // A site counts as valid when its value does.
                    Some(_) => (
                        if c.flag(6) { c.real(5) } else { f64::NAN },
                        f64::NAN,
                        c.flag(6) as usize,
                    ),
                    None => (c.real(5), c.real(6), c.count(7)),
                };
                TrendPoint {
                    bench: c.text(0),
                    run_id: c.text(1),
                    wafer: c.text(2),
                    lot: c.text(3),
                    started: c.text(4),
                    mean_nm,
                    nu_1sigma_pct,
                    sites_valid,
                    recipe: c.text(8),
                    spec_lo_nm: c.real(9),
                    spec_hi_nm: c.real(10),
                }
            })
            .collect();
        // Sorted here, not by the server: a server's text collation may differ from SQLite's.
        points.sort_by(|a, b| {
            (&a.started, &a.bench, &a.run_id).cmp(&(&b.started, &b.bench, &b.run_id))
        });
        Ok(points)
    }

    /// Every run record, ordered by start time, bench and run id (for comparing a rebuild with
    /// the live index, or one backend with the other).
    pub async fn runs(&mut self) -> Result<Vec<RunRecord>, HistoryError> {
        let mut all = Vec::new();
        for sql in [
            schema::ALL_RUNS,
            schema::ALL_SESSIONS,
            schema::ALL_LAYERS,
            schema::ALL_SITES,
        ] {
            let rows = self
                .store
                .query(sql, Vec::new())
                .await
                .map_err(|e| self.err(e))?;
            all.push(rows);
        }
        let [heads, sessions, layers, sites] = <[_; 4]>::try_from(all).expect("four queries");
        let mut runs: Vec<RunRecord> = heads
            .iter()
            .map(|r| {
                let c = Cells(r);
                RunRecord {
                    id: RunIdentity {
                        bench: c.text(0),
                        run_id: c.text(1),
                        folder: c.text(2),
                        recipe: c.text(3),
                        wafer: c.text(4),
                        lot: c.text(5),
                        started: c.text(6),
                        finished: c.text(7),
                    },
                    sessions: Vec::new(),
                    layers: Vec::new(),
                    sites: Vec::new(),
                }
            })
            .collect();
        let index: HashMap<(String, String), usize> = runs
            .iter()
            .enumerate()
            .map(|(i, r)| ((r.id.bench.clone(), r.id.run_id.clone()), i))
            .collect();
        attach(&mut runs, &index, &sessions, |run, c| {
            run.sessions.push(SessionRecord {
                session: c.count(2),
                command: c.text(3),
                started: c.text(4),
                ended: c.text(5),
                outcome: c.text(6),
            })
        });
        attach(&mut runs, &index, &layers, |run, c| {
            run.layers.push(LayerRecord {
                layer: c.count(2),
                material: c.text(3),
                sites_total: c.count(4),
                sites_valid: c.count(5),
                mean_nm: c.real(6),
                std_nm: c.real(7),
                min_nm: c.real(8),
                max_nm: c.real(9),
                nu_1sigma_pct: c.real(10),
                nu_range_pct: c.real(11),
                spec_lo_nm: c.real(12),
                spec_hi_nm: c.real(13),
            })
        });
        attach(&mut runs, &index, &sites, |run, c| {
            run.sites.push(SiteRecord {
                site: c.count(2),
                layer: c.count(3),
                x_mm: c.real(4),
                y_mm: c.real(5),
                thickness_nm: c.real(6),
                valid: c.flag(7),
            })
        });
        runs.sort_by(|a, b| {
            (&a.id.started, &a.id.bench, &a.id.run_id).cmp(&(
                &b.id.started,
                &b.id.bench,
                &b.id.run_id,
            ))
        });
        Ok(runs)
    }

    /// The (bench, run folder) of every run with this id.
    pub async fn folders_of(
        &mut self,
        run_id: &str,
    ) -> Result<Vec<(String, String)>, HistoryError> {
        let rows = self
            .store
            .query(schema::FOLDERS_OF, vec![Value::Text(run_id.into())])
            .await
            .map_err(|e| self.err(e))?;
        Ok(rows
            .iter()
            .map(|r| (Cells(r).text(0), Cells(r).text(1)))
            .collect())
    }
}

/// Hands each row (keyed by bench and run id in its first two columns) to its run.
fn attach(
    runs: &mut [RunRecord],
    index: &HashMap<(String, String), usize>,
    rows: &[Vec<Value>],
    mut add: impl FnMut(&mut RunRecord, Cells),
) {
    for r in rows {
        let c = Cells(r);
        if let Some(&i) = index.get(&(c.text(0), c.text(1))) {
            add(&mut runs[i], c);
        }
    }
}

/// The statements that (re)write one run: its row upserted, its other rows replaced.
fn write_run(run: &RunRecord) -> Vec<Statement> {
    let key = || {
        vec![
            Value::Text(run.id.bench.clone()),
            Value::Text(run.id.run_id.clone()),
        ]
    };
    let with_key = |sql, rest: Vec<Value>| {
        let mut params = key();
        params.extend(rest);
        Statement { sql, params }
    };
    let id = &run.id;
    let mut out = vec![with_key(
        schema::UPSERT_RUN,
        [
            &id.folder,
            &id.recipe,
            &id.wafer,
            &id.lot,
            &id.started,
            &id.finished,
        ]
        .map(|s| Value::Text(s.clone()))
        .to_vec(),
    )];
    out.extend(schema::CLEAR_RUN.map(|sql| with_key(sql, Vec::new())));
    out.extend(run.sessions.iter().map(|s| {
        with_key(
            schema::INSERT_SESSION,
            vec![
                Value::Int(s.session as i64),
                Value::Text(s.command.clone()),
                Value::Text(s.started.clone()),
                Value::Text(s.ended.clone()),
                Value::Text(s.outcome.clone()),
            ],
        )
    }));
    out.extend(run.layers.iter().map(|l| {
        with_key(
            schema::INSERT_LAYER,
            vec![
                Value::Int(l.layer as i64),
                Value::Text(l.material.clone()),
                Value::Int(l.sites_total as i64),
                Value::Int(l.sites_valid as i64),
                Value::real(l.mean_nm),
                Value::real(l.std_nm),
                Value::real(l.min_nm),
                Value::real(l.max_nm),
                Value::real(l.nu_1sigma_pct),
                Value::real(l.nu_range_pct),
                Value::real(l.spec_lo_nm),
                Value::real(l.spec_hi_nm),
            ],
        )
    }));
    out.extend(run.sites.iter().map(|s| {
        with_key(
            schema::INSERT_SITE,
            vec![
                Value::Int(s.site as i64),
                Value::Int(s.layer as i64),
                Value::real(s.x_mm),
                Value::real(s.y_mm),
                Value::real(s.thickness_nm),
                Value::Bool(s.valid),
            ],
        )
    }));
    out
}

/// Reading one row of values by column, the same for both backends (SQLite gives booleans as
/// integers and a NaN as NULL).
struct Cells<'a>(&'a [Value]);

impl Cells<'_> {
    fn text(&self, i: usize) -> String {
        match self.0.get(i) {
            Some(Value::Text(s)) => s.clone(),
            _ => String::new(),
        }
    }
    fn real(&self, i: usize) -> f64 {
        match self.0.get(i) {
            Some(Value::Real(x)) => *x,
            Some(Value::Int(n)) => *n as f64,
            _ => f64::NAN,
        }
    }
    fn count(&self, i: usize) -> usize {
        match self.0.get(i) {
            Some(Value::Int(n)) => (*n).max(0) as usize,
            _ => 0,
        }
    }
    fn flag(&self, i: usize) -> bool {
        match self.0.get(i) {
            Some(Value::Bool(b)) => *b,
            Some(Value::Int(n)) => *n != 0,
            _ => false,
        }
    }
}

/// The current time for bookkeeping rows (RFC 3339, UTC).
pub fn now_text() -> String {
    chrono::Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Secs, true)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn record(id: &str, started: &str, mean: f64) -> RunRecord {
        RunRecord {
            id: RunIdentity {
                bench: "bench-a".into(),
                run_id: id.into(),
                folder: format!("runs/{id}"),
                recipe: "oxide".into(),
                wafer: id.into(),
                lot: "L1".into(),
                started: started.into(),
                finished: String::new(),
            },
            sessions: vec![SessionRecord {
                session: 1,
                command: "run".into(),
                started: started.into(),
                ended: started.into(),
                outcome: "finished".into(),
            }],
            layers: vec![LayerRecord {
                layer: 0,
                material: "sio2".into(),
                sites_total: 2,
                sites_valid: 2,
                mean_nm: mean,
                std_nm: 1.0,
                min_nm: mean - 1.0,
                max_nm: mean + 1.0,
                nu_1sigma_pct: 100.0 / mean,
                nu_range_pct: 100.0 / mean,
                spec_lo_nm: 990.0,
                spec_hi_nm: 1010.0,
            }],
            sites: vec![
                SiteRecord {
                    site: 1,
                    layer: 0,
                    x_mm: 0.0,
                    y_mm: 0.0,
                    thickness_nm: mean - 1.0,
                    valid: true,
                },
                SiteRecord {
                    site: 2,
                    layer: 0,
                    x_mm: 10.0,
                    y_mm: 0.0,
                    thickness_nm: f64::NAN,
                    valid: false,
                },
            ],
        }
    }

    fn oxide(layer: usize) -> TrendQuery {
        TrendQuery {
            layer,
            recipe: Some("oxide".into()),
            ..TrendQuery::default()
        }
    }

    #[tokio::test]
    async fn record_replaces_and_rebuild_gives_the_same_rows() {
        let dir = tempfile::tempdir().unwrap();
        let at = HistoryLocation::Sqlite(dir.path().join("h.sqlite"));
        let mut h = History::open(&at).await.unwrap();
        let runs = [
            record("a", "2026-01-01T00:00:00Z", 100.0),
            record("b", "2026-01-02T00:00:00Z", 102.0),
        ];
        for r in &runs {
            h.record(r).await.unwrap();
        }
        h.record(&record("a", "2026-01-01T00:00:00Z", 101.0))
            .await
            .unwrap();
        let t = h.trend(&oxide(0)).await.unwrap();
        assert_eq!(
            t.iter().map(|p| p.mean_nm).collect::<Vec<_>>(),
            vec![101.0, 102.0]
        );
        let live = h.runs().await.unwrap();
        h.rebuild(&live).await.unwrap();
        let again = h.runs().await.unwrap();
        assert_eq!(format!("{live:?}"), format!("{again:?}"));
        assert!(again[0].sites[1].thickness_nm.is_nan());
        assert_eq!(again[0].sessions.len(), 1, "a re-sent run is not doubled");
        let other = TrendQuery {
            recipe: Some("other".into()),
            ..oxide(0)
        };
        assert!(h.trend(&other).await.unwrap().is_empty());
        // One site's trend: site 1 is valid, site 2 never is.
        let site = |n| TrendQuery {
            site: Some(n),
            ..oxide(0)
        };
        let s1 = h.trend(&site(1)).await.unwrap();
        assert_eq!(
            s1.iter().map(|p| p.mean_nm).collect::<Vec<_>>(),
            vec![100.0, 101.0]
        );
        let s2 = h.trend(&site(2)).await.unwrap();
        assert!(s2.iter().all(|p| p.mean_nm.is_nan() && p.sites_valid == 0));
    }

    #[tokio::test]
    async fn a_file_of_the_first_schema_is_migrated_and_keeps_its_runs() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("old.sqlite");
        {
            let c = rusqlite::Connection::open(&path).unwrap();
            c.execute_batch(schema::MIGRATIONS[0].sql).unwrap();
            c.execute_batch(
                "INSERT INTO runs VALUES ('r1', 'runs/r1', 'oxide', 'W1', 'L1', '2026-01-01T00:00:00Z');
                 INSERT INTO layer_stats VALUES ('r1', 0, 'sio2', 9, 9, 100.5, 1, 99, 102, 1, 1.5);
                 INSERT INTO site_values VALUES ('r1', 1, 0, 0.0, 0.0, 100.5, 1);",
            )
            .unwrap();
        }
        let mut h = History::open(&HistoryLocation::Sqlite(path.clone()))
            .await
            .unwrap();
        let runs = h.runs().await.unwrap();
        assert_eq!(runs.len(), 1);
        assert_eq!(runs[0].id.bench, "", "the first schema knew no bench");
        assert_eq!(runs[0].layers[0].mean_nm, 100.5);
        assert!(runs[0].sites[0].valid);
        // A rebuild replaces the rows of an unknown bench.
        h.rebuild(&[record("a", "2026-01-02T00:00:00Z", 100.0)])
            .await
            .unwrap();
        let ids: Vec<String> = h
            .runs()
            .await
            .unwrap()
            .into_iter()
            .map(|r| r.id.run_id)
            .collect();
        assert_eq!(ids, ["a"]);
    }

    #[tokio::test]
    async fn a_newer_schema_is_refused_with_the_versions() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("new.sqlite");
        let at = HistoryLocation::Sqlite(path.clone());
        drop(History::open(&at).await.unwrap());
        rusqlite::Connection::open(&path)
            .unwrap()
            .execute("INSERT INTO history_schema VALUES (99, 'later')", [])
            .unwrap();
        let e = History::open(&at).await.err().expect("refused");
        let text = crate::error_text::chain_text(&anyhow::Error::new(e));
        assert!(text.contains("schema version 99"), "{text}");
        assert!(text.contains(&format!("({})", schema::latest())), "{text}");
        assert!(text.contains("upgrade isopach"), "{text}");
    }

    #[test]
    fn a_rewrite_clears_before_it_inserts() {
        let st = write_run(&record("a", "t", 1.0));
        assert_eq!(st[0].sql, schema::UPSERT_RUN);
        assert_eq!(
            st[1..4].iter().map(|s| s.sql).collect::<Vec<_>>(),
            schema::CLEAR_RUN
        );
        assert_eq!(st.len(), 4 + 1 + 1 + 2);
    }
}
