//! The history's tables, their versioned migrations and the statements that read and write
//! them — one SQL text for both backends (SQLite and PostgreSQL read the same dialect here:
//! `$n` parameters, `CAST(… AS TEXT)`, `ON CONFLICT … DO UPDATE`, composite foreign keys).
//!
//! Version 1 is the single-bench index of earlier releases (an SQLite file without a version
//! table counts as version 1: its tables are created with `IF NOT EXISTS`). Version 2 keys runs
//! by bench and run id, and adds the bench, the finish time and one row per session.

/// One schema step: applied once, in order, inside the migrating transaction.
#[derive(Debug)]
pub struct Migration {
    pub version: i64,
    pub sql: &'static str,
}

/// The bookkeeping table: one row per applied migration.
pub const VERSION_TABLE: &str =
    "CREATE TABLE IF NOT EXISTS history_schema (version BIGINT PRIMARY KEY, applied TEXT NOT NULL)";

/// The newest version applied.
pub const CURRENT_VERSION: &str = "SELECT COALESCE(MAX(version), 0) FROM history_schema";

/// Records a migration as applied.
pub const MARK_APPLIED: &str = "INSERT INTO history_schema (version, applied) VALUES ($1, $2)";

/// Every migration, oldest first.
pub const MIGRATIONS: &[Migration] = &[
    Migration {
        version: 1,
        sql: "
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
",
    },
    Migration {
        version: 2,
        // Rows of version 1 keep an empty bench (unknown); `trend --rebuild` replaces them.
        // Constraints are named: PostgreSQL keeps the old tables' constraint names until the
        // old tables are dropped.
        sql: "
DROP INDEX IF EXISTS runs_by_recipe;
ALTER TABLE site_values RENAME TO site_values_v1;
ALTER TABLE layer_stats RENAME TO layer_stats_v1;
ALTER TABLE runs RENAME TO runs_v1;
CREATE TABLE runs (
  bench TEXT NOT NULL, run_id TEXT NOT NULL, folder TEXT NOT NULL, recipe TEXT NOT NULL,
  wafer TEXT NOT NULL, lot TEXT NOT NULL, started TEXT NOT NULL, finished TEXT NOT NULL,
  CONSTRAINT runs_v2_pk PRIMARY KEY (bench, run_id));
CREATE TABLE sessions (
  bench TEXT NOT NULL, run_id TEXT NOT NULL, session BIGINT NOT NULL, command TEXT NOT NULL,
  started TEXT NOT NULL, ended TEXT NOT NULL, outcome TEXT NOT NULL,
  CONSTRAINT sessions_v2_pk PRIMARY KEY (bench, run_id, session),
  CONSTRAINT sessions_v2_run FOREIGN KEY (bench, run_id) REFERENCES runs(bench, run_id) ON DELETE CASCADE);
CREATE TABLE layer_stats (
  bench TEXT NOT NULL, run_id TEXT NOT NULL, layer BIGINT NOT NULL, material TEXT NOT NULL,
  sites_total BIGINT NOT NULL, sites_valid BIGINT NOT NULL, mean_nm DOUBLE PRECISION,
  std_nm DOUBLE PRECISION, min_nm DOUBLE PRECISION, max_nm DOUBLE PRECISION,
  nu_1sigma_pct DOUBLE PRECISION, nu_range_pct DOUBLE PRECISION,
  CONSTRAINT layer_stats_v2_pk PRIMARY KEY (bench, run_id, layer),
  CONSTRAINT layer_stats_v2_run FOREIGN KEY (bench, run_id) REFERENCES runs(bench, run_id) ON DELETE CASCADE);
CREATE TABLE site_values (
  bench TEXT NOT NULL, run_id TEXT NOT NULL, site BIGINT NOT NULL, layer BIGINT NOT NULL,
  x_mm DOUBLE PRECISION NOT NULL, y_mm DOUBLE PRECISION NOT NULL, thickness_nm DOUBLE PRECISION,
  valid BOOLEAN NOT NULL,
  CONSTRAINT site_values_v2_pk PRIMARY KEY (bench, run_id, site, layer),
  CONSTRAINT site_values_v2_run FOREIGN KEY (bench, run_id) REFERENCES runs(bench, run_id) ON DELETE CASCADE);
CREATE INDEX runs_by_recipe ON runs(recipe, started);
CREATE INDEX runs_by_id ON runs(run_id);
INSERT INTO runs (bench, run_id, folder, recipe, wafer, lot, started, finished)
  SELECT '', run_id, folder, recipe, wafer, lot, started, '' FROM runs_v1;
INSERT INTO layer_stats (bench, run_id, layer, material, sites_total, sites_valid, mean_nm,
  std_nm, min_nm, max_nm, nu_1sigma_pct, nu_range_pct)
  SELECT '', run_id, layer, material, sites_total, sites_valid, mean_nm, std_nm, min_nm,
  max_nm, nu_1sigma_pct, nu_range_pct FROM layer_stats_v1;
INSERT INTO site_values (bench, run_id, site, layer, x_mm, y_mm, thickness_nm, valid)
  SELECT '', run_id, site, layer, x_mm, y_mm, thickness_nm, valid <> 0 FROM site_values_v1;
DROP TABLE site_values_v1;
DROP TABLE layer_stats_v1;
DROP TABLE runs_v1;
",
    },
    Migration {
        version: 3,
        // The spec window of a layer (NULL: none, or a run indexed before version 3 until
        // `trend --rebuild`), so a trend can draw it.
        sql: "
ALTER TABLE layer_stats ADD COLUMN spec_lo_nm DOUBLE PRECISION;
ALTER TABLE layer_stats ADD COLUMN spec_hi_nm DOUBLE PRECISION;
",
    },
];

/// The schema version this build writes.
pub fn latest() -> i64 {
    MIGRATIONS.last().map_or(0, |m| m.version)
}

/// The migrations to apply to a database at version `found`, or `Err(found)` when it is newer
/// than this build knows.
pub fn pending(found: i64, migrations: &'static [Migration]) -> Result<&'static [Migration], i64> {
    let latest = migrations.last().map_or(0, |m| m.version);
    if found > latest {
        return Err(found);
    }
    let first = migrations.partition_point(|m| m.version <= found);
    Ok(&migrations[first..])
}

/// Makes the run's row (or updates it when the run is re-sent).
pub const UPSERT_RUN: &str = "INSERT INTO runs (bench, run_id, folder, recipe, wafer, lot, started, finished)
  VALUES ($1, $2, $3, $4, $5, $6, $7, $8)
  ON CONFLICT (bench, run_id) DO UPDATE SET folder = excluded.folder, recipe = excluded.recipe,
  wafer = excluded.wafer, lot = excluded.lot, started = excluded.started, finished = excluded.finished";

/// Clear what a run had before it is written again (`$1` bench, `$2` run id).
pub const CLEAR_RUN: [&str; 3] = [
    "DELETE FROM sessions WHERE bench = $1 AND run_id = $2",
    "DELETE FROM layer_stats WHERE bench = $1 AND run_id = $2",
    "DELETE FROM site_values WHERE bench = $1 AND run_id = $2",
];

/// Removes every run of one bench (its rows in the other tables go with it).
pub const DELETE_BENCH: &str = "DELETE FROM runs WHERE bench = $1";

pub const INSERT_SESSION: &str =
    "INSERT INTO sessions (bench, run_id, session, command, started, ended, outcome)
  VALUES ($1, $2, $3, $4, $5, $6, $7)";

pub const INSERT_LAYER: &str =
    "INSERT INTO layer_stats (bench, run_id, layer, material, sites_total, sites_valid,
  mean_nm, std_nm, min_nm, max_nm, nu_1sigma_pct, nu_range_pct, spec_lo_nm, spec_hi_nm)
  VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14)";

pub const INSERT_SITE: &str =
    "INSERT INTO site_values (bench, run_id, site, layer, x_mm, y_mm, thickness_nm, valid)
  VALUES ($1, $2, $3, $4, $5, $6, $7, $8)";

/// The trend of one layer: `$1` layer, `$2` recipe, `$3` lot, `$4` bench (NULL: any).
pub const TREND: &str =
    "SELECT r.bench, r.run_id, r.wafer, r.lot, r.started, s.mean_nm, s.nu_1sigma_pct, s.sites_valid,
  r.recipe, s.spec_lo_nm, s.spec_hi_nm
  FROM runs r JOIN layer_stats s ON s.bench = r.bench AND s.run_id = r.run_id
  WHERE s.layer = $1 AND (CAST($2 AS TEXT) IS NULL OR r.recipe = $2)
    AND (CAST($3 AS TEXT) IS NULL OR r.lot = $3) AND (CAST($4 AS TEXT) IS NULL OR r.bench = $4)
  ORDER BY r.started, r.bench, r.run_id";

/// The trend of one site's value: `$1` layer, `$2` recipe, `$3` lot, `$4` bench, `$5` site.
pub const SITE_TREND: &str =
    "SELECT r.bench, r.run_id, r.wafer, r.lot, r.started, v.thickness_nm, v.valid, 0,
  r.recipe, s.spec_lo_nm, s.spec_hi_nm
  FROM runs r JOIN site_values v ON v.bench = r.bench AND v.run_id = r.run_id
  LEFT JOIN layer_stats s ON s.bench = r.bench AND s.run_id = r.run_id AND s.layer = v.layer
  WHERE v.layer = $1 AND (CAST($2 AS TEXT) IS NULL OR r.recipe = $2)
    AND (CAST($3 AS TEXT) IS NULL OR r.lot = $3) AND (CAST($4 AS TEXT) IS NULL OR r.bench = $4)
    AND v.site = $5
  ORDER BY r.started, r.bench, r.run_id";

pub const ALL_RUNS: &str =
    "SELECT bench, run_id, folder, recipe, wafer, lot, started, finished FROM runs
  ORDER BY bench, run_id";
pub const ALL_SESSIONS: &str =
    "SELECT bench, run_id, session, command, started, ended, outcome FROM sessions
  ORDER BY bench, run_id, session";
pub const ALL_LAYERS: &str =
    "SELECT bench, run_id, layer, material, sites_total, sites_valid, mean_nm, std_nm,
  min_nm, max_nm, nu_1sigma_pct, nu_range_pct, spec_lo_nm, spec_hi_nm FROM layer_stats
  ORDER BY bench, run_id, layer";
pub const ALL_SITES: &str =
    "SELECT bench, run_id, site, layer, x_mm, y_mm, thickness_nm, valid FROM site_values
  ORDER BY bench, run_id, site, layer";

/// The benches and folders of the runs with one id.
pub const FOLDERS_OF: &str = "SELECT bench, folder FROM runs WHERE run_id = $1 ORDER BY bench";

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pending_migrations_follow_the_version_found() {
        assert_eq!(pending(0, MIGRATIONS).unwrap().len(), MIGRATIONS.len());
        assert_eq!(pending(1, MIGRATIONS).unwrap()[0].version, 2);
        assert!(pending(latest(), MIGRATIONS).unwrap().is_empty());
        assert_eq!(pending(latest() + 1, MIGRATIONS).unwrap_err(), latest() + 1);
        // Versions are strictly increasing, so the partition point is the next one to apply.
        assert!(MIGRATIONS.windows(2).all(|w| w[0].version < w[1].version));
    }
}
