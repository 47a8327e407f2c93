//! The runs database (SQLite, bundled): one row per run, per-layer statistics, site values.
//!
//! The run folders stay the source of truth; this is an index for trends, rebuilt from them by
//! `isopach trend --rebuild`. Each run is written in one transaction (old rows replaced), so a
//! kill mid-update leaves the previous state of that run, never half of it.

use rusqlite::{params, Connection};
use serde::Serialize;
use std::path::{Path, PathBuf};

/// Why the history could not be read or written.
#[derive(Debug, thiserror::Error)]
#[error("run history {}: {source}", path.display())]
pub struct HistoryError {
    pub path: PathBuf,
    #[source]
    pub source: rusqlite::Error,
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

/// Who and what a run was: the fields the history indexes runs by.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct RunIdentity {
    pub run_id: String,
    /// The run folder, as the user should see it.
    pub folder: String,
    /// The recipe's `name`.
    pub recipe: String,
    pub wafer: String,
    pub lot: String,
    /// When the run started (RFC 3339).
    pub started: String,
}

/// Everything the history keeps of a run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RunRecord {
    #[serde(flatten)]
    pub id: RunIdentity,
    pub layers: Vec<LayerRecord>,
    pub sites: Vec<SiteRecord>,
}

/// A point of a trend: one run's statistics for one layer.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TrendPoint {
    pub run_id: String,
    pub wafer: String,
    pub lot: String,
    pub started: String,
    pub mean_nm: f64,
    pub nu_1sigma_pct: f64,
    pub sites_valid: usize,
}

/// An open history database.
pub struct History {
    conn: Connection,
    path: PathBuf,
}

const SCHEMA: &str = "
CREATE TABLE IF NOT EXISTS runs (
  run_id TEXT PRIMARY KEY, folder TEXT NOT NULL, recipe TEXT NOT NULL, wafer TEXT NOT NULL,
  lot TEXT NOT NULL, started TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS layer_stats (
  run_id TEXT NOT NULL REFERENCES runs(run_id) ON DELETE CASCADE, layer INTEGER NOT NULL,
  material TEXT NOT NULL, sites_total INTEGER NOT NULL, sites_valid INTEGER NOT NULL,
  mean_nm REAL, std_nm REAL, min_nm REAL, max_nm REAL, nu_1sigma_pct REAL, nu_range_pct REAL,
  PRIMARY KEY (run_id, layer));
CREATE TABLE IF NOT EXISTS site_values (
  run_id TEXT NOT NULL REFERENCES runs(run_id) ON DELETE CASCADE, site INTEGER NOT NULL,
  layer INTEGER NOT NULL, x_mm REAL NOT NULL, y_mm REAL NOT NULL, thickness_nm REAL,
  valid INTEGER NOT NULL, PRIMARY KEY (run_id, site, layer));
CREATE INDEX IF NOT EXISTS runs_by_recipe ON runs(recipe, started);
";

impl History {
    /// Opens (creating if needed) the database at `path`.
    pub fn open(path: &Path) -> Result<History, HistoryError> {
        let err = |source| HistoryError {
            path: path.into(),
            source,
        };
        let conn = Connection::open(path).map_err(err)?;
        conn.execute_batch("PRAGMA foreign_keys = ON; PRAGMA journal_mode = WAL;")
            .map_err(err)?;
        conn.execute_batch(SCHEMA).map_err(err)?;
        Ok(History {
            conn,
            path: path.into(),
        })
    }

    fn err(&self, source: rusqlite::Error) -> HistoryError {
        HistoryError {
            path: self.path.clone(),
            source,
        }
    }

    /// Replaces everything kept of `run` in one transaction.
    pub fn record(&mut self, run: &RunRecord) -> Result<(), HistoryError> {
        let path = self.path.clone();
        let err = |source| HistoryError {
            path: path.clone(),
            source,
        };
        let tx = self.conn.transaction().map_err(err)?;
        write_run(&tx, run).map_err(err)?;
        tx.commit().map_err(err)
    }

    /// Empties the database and records `runs` in one transaction.
    pub fn rebuild(&mut self, runs: &[RunRecord]) -> Result<(), HistoryError> {
        let path = self.path.clone();
        let err = |source| HistoryError {
            path: path.clone(),
            source,
        };
        let tx = self.conn.transaction().map_err(err)?;
        tx.execute_batch("DELETE FROM site_values; DELETE FROM layer_stats; DELETE FROM runs;")
            .map_err(err)?;
        for run in runs {
            write_run(&tx, run).map_err(err)?;
        }
        tx.commit().map_err(err)
    }

    /// Trend of one layer (0 = first fitted) over time, optionally for one recipe and/or lot.
    pub fn trend(
        &self,
        recipe: Option<&str>,
        lot: Option<&str>,
        layer: usize,
    ) -> Result<Vec<TrendPoint>, HistoryError> {
        let mut stmt = self
            .conn
            .prepare(
                "SELECT r.run_id, r.wafer, r.lot, r.started, s.mean_nm, s.nu_1sigma_pct, s.sites_valid
                 FROM runs r JOIN layer_stats s ON s.run_id = r.run_id
                 WHERE s.layer = ?1 AND (?2 IS NULL OR r.recipe = ?2) AND (?3 IS NULL OR r.lot = ?3)
                 ORDER BY r.started, r.run_id",
            )
            .map_err(|e| self.err(e))?;
        let rows = stmt
            .query_map(params![layer as i64, recipe, lot], |r| {
                Ok(TrendPoint {
                    run_id: r.get(0)?,
                    wafer: r.get(1)?,
                    lot: r.get(2)?,
                    started: r.get(3)?,
                    mean_nm: r.get::<_, Option<f64>>(4)?.unwrap_or(f64::NAN),
                    nu_1sigma_pct: r.get::<_, Option<f64>>(5)?.unwrap_or(f64::NAN),
                    sites_valid: r.get::<_, i64>(6)? as usize,
                })
            })
            .map_err(|e| self.err(e))?;
        rows.collect::<Result<_, _>>().map_err(|e| self.err(e))
    }

    /// Every run record, ordered by start time (for comparing a rebuild with the live index).
    pub fn runs(&self) -> Result<Vec<RunRecord>, HistoryError> {
        let q = |e| self.err(e);
        let mut stmt = self
            .conn
            .prepare("SELECT run_id, folder, recipe, wafer, lot, started FROM runs ORDER BY started, run_id")
            .map_err(q)?;
        let heads: Vec<RunRecord> = stmt
            .query_map([], |r| {
                Ok(RunRecord {
                    id: RunIdentity {
                        run_id: r.get(0)?,
                        folder: r.get(1)?,
                        recipe: r.get(2)?,
                        wafer: r.get(3)?,
                        lot: r.get(4)?,
                        started: r.get(5)?,
                    },
                    layers: Vec::new(),
                    sites: Vec::new(),
                })
            })
            .map_err(q)?
            .collect::<Result<_, _>>()
            .map_err(q)?;
        let mut out = Vec::with_capacity(heads.len());
        for mut run in heads {
            let mut s = self
                .conn
                .prepare(
                    "SELECT layer, material, sites_total, sites_valid, mean_nm, std_nm, min_nm, max_nm,
                     nu_1sigma_pct, nu_range_pct FROM layer_stats WHERE run_id = ?1 ORDER BY layer",
                )
                .map_err(q)?;
            run.layers = s
                .query_map([&run.id.run_id], |r| {
                    Ok(LayerRecord {
                        layer: r.get::<_, i64>(0)? as usize,
                        material: r.get(1)?,
                        sites_total: r.get::<_, i64>(2)? as usize,
                        sites_valid: r.get::<_, i64>(3)? as usize,
                        mean_nm: nan(r.get(4)?),
                        std_nm: nan(r.get(5)?),
                        min_nm: nan(r.get(6)?),
                        max_nm: nan(r.get(7)?),
                        nu_1sigma_pct: nan(r.get(8)?),
                        nu_range_pct: nan(r.get(9)?),
                    })
                })
                .map_err(q)?
                .collect::<Result<_, _>>()
                .map_err(q)?;
            let mut s = self
                .conn
                .prepare("SELECT site, layer, x_mm, y_mm, thickness_nm, valid FROM site_values WHERE run_id = ?1 ORDER BY site, layer")
                .map_err(q)?;
            run.sites = s
                .query_map([&run.id.run_id], |r| {
                    Ok(SiteRecord {
                        site: r.get::<_, i64>(0)? as usize,
                        layer: r.get::<_, i64>(1)? as usize,
                        x_mm: r.get(2)?,
                        y_mm: r.get(3)?,
                        thickness_nm: nan(r.get(4)?),
                        valid: r.get::<_, i64>(5)? != 0,
                    })
                })
                .map_err(q)?
                .collect::<Result<_, _>>()
                .map_err(q)?;
            out.push(run);
        }
        Ok(out)
    }
}

/// SQLite stores NaN as NULL; read it back as NaN.
fn nan(v: Option<f64>) -> f64 {
    v.unwrap_or(f64::NAN)
}

/// NaN as NULL.
fn opt(v: f64) -> Option<f64> {
    v.is_finite().then_some(v)
}

fn write_run(tx: &rusqlite::Transaction, run: &RunRecord) -> rusqlite::Result<()> {
    tx.execute("DELETE FROM runs WHERE run_id = ?1", [&run.id.run_id])?;
    tx.execute(
        "INSERT INTO runs (run_id, folder, recipe, wafer, lot, started) VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
        params![run.id.run_id, run.id.folder, run.id.recipe, run.id.wafer, run.id.lot, run.id.started],
    )?;
    let mut ls = tx.prepare(
        "INSERT INTO layer_stats (run_id, layer, material, sites_total, sites_valid, mean_nm, std_nm,
         min_nm, max_nm, nu_1sigma_pct, nu_range_pct) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11)",
    )?;
    for l in &run.layers {
        ls.execute(params![
            run.id.run_id,
            l.layer as i64,
            l.material,
            l.sites_total as i64,
            l.sites_valid as i64,
            opt(l.mean_nm),
            opt(l.std_nm),
            opt(l.min_nm),
            opt(l.max_nm),
            opt(l.nu_1sigma_pct),
            opt(l.nu_range_pct)
        ])?;
    }
    let mut sv = tx.prepare(
        "INSERT INTO site_values (run_id, site, layer, x_mm, y_mm, thickness_nm, valid) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7)",
    )?;
    for s in &run.sites {
        sv.execute(params![
            run.id.run_id,
            s.site as i64,
            s.layer as i64,
            s.x_mm,
            s.y_mm,
            opt(s.thickness_nm),
            s.valid as i64
        ])?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn record(id: &str, started: &str, mean: f64) -> RunRecord {
        RunRecord {
            id: RunIdentity {
                run_id: id.into(),
                folder: format!("runs/{id}"),
                recipe: "oxide".into(),
                wafer: id.into(),
                lot: "L1".into(),
                started: started.into(),
            },
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

    #[test]
    fn record_replaces_and_rebuild_gives_the_same_rows() {
        let dir = tempfile::tempdir().unwrap();
        let mut h = History::open(&dir.path().join("h.sqlite")).unwrap();
        let runs = [
            record("a", "2026-01-01T00:00:00Z", 100.0),
            record("b", "2026-01-02T00:00:00Z", 102.0),
        ];
        for r in &runs {
            h.record(r).unwrap();
        }
        h.record(&record("a", "2026-01-01T00:00:00Z", 101.0))
            .unwrap();
        let t = h.trend(Some("oxide"), None, 0).unwrap();
        assert_eq!(
            t.iter().map(|p| p.mean_nm).collect::<Vec<_>>(),
            vec![101.0, 102.0]
        );
        let live = h.runs().unwrap();
        h.rebuild(&live).unwrap();
        let again = h.runs().unwrap();
        assert_eq!(format!("{live:?}"), format!("{again:?}"));
        assert!(again[0].sites[1].thickness_nm.is_nan());
        assert!(h.trend(Some("other"), None, 0).unwrap().is_empty());
    }
}
