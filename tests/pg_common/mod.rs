//! A throwaway PostgreSQL cluster for tests and the history bench: `initdb` and `pg_ctl` from
//! the distribution's packages (`/usr/lib/postgresql/*/bin`), data and socket in a temp dir,
//! listening on that unix socket only (no TCP), trust authentication, stopped and removed on
//! drop.
//!
//! PostgreSQL refuses to run as root: when the tests run as root (as CI does), the cluster is
//! made and run as the `postgres` user that the Debian package creates, through `runuser`.
//! Where no server can start, [`cluster_or_skip`] prints why and the test returns early — or
//! fails, when `ISOPACH_REQUIRE_POSTGRES=1` (set by `.ci/run`) says the server must be there.
#![allow(dead_code)] // each test binary uses its own subset

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// The password put in every test URL: trust authentication never asks for it, so it must
/// show up nowhere (logs, run folders, messages).
pub const PASSWORD: &str = "never-shown-7f3a";

/// A running throwaway cluster.
pub struct PgCluster {
    dir: tempfile::TempDir,
    bin: PathBuf,
    /// Run the server's programs as `postgres` (we are root).
    as_postgres: bool,
    fsync: bool,
}

impl PgCluster {
    /// Makes and starts a cluster; `fsync` off makes tests faster (the bench keeps it on).
    pub fn start(fsync: bool) -> Result<PgCluster, String> {
        let bin = server_bin().ok_or(
            "no PostgreSQL server programs in /usr/lib/postgresql/*/bin (apt-get install postgresql)",
        )?;
        let as_postgres = unsafe { libc::geteuid() } == 0;
        let dir = tempfile::Builder::new()
            .prefix("isopach-pg-")
            .tempdir()
            .map_err(|e| format!("no temp dir: {e}"))?;
        if as_postgres {
            let (uid, gid) = postgres_ids()?;
            std::os::unix::fs::chown(dir.path(), Some(uid), Some(gid))
                .map_err(|e| format!("cannot give the temp dir to user postgres: {e}"))?;
        }
        let cluster = PgCluster {
            dir,
            bin,
            as_postgres,
            fsync,
        };
        std::fs::create_dir(cluster.socket_dir())
            .map_err(|e| format!("cannot make the socket dir: {e}"))?;
        if as_postgres {
            let (uid, gid) = postgres_ids()?;
            std::os::unix::fs::chown(cluster.socket_dir(), Some(uid), Some(gid))
                .map_err(|e| format!("cannot give the socket dir to user postgres: {e}"))?;
        }
        let data = cluster.data_dir();
        cluster.server_tool(
            "initdb",
            &[
                "-D",
                data.to_str().unwrap(),
                "-A",
                "trust",
                "-U",
                "isopach",
                "-E",
                "UTF8",
                "--no-sync",
                "--no-instructions",
            ],
        )?;
        cluster.start_server()?;
        Ok(cluster)
    }

    pub fn socket_dir(&self) -> PathBuf {
        self.dir.path().join("sock")
    }

    fn data_dir(&self) -> PathBuf {
        self.dir.path().join("data")
    }

    /// Starts the server (again), waiting until it accepts connections.
    pub fn start_server(&self) -> Result<(), String> {
        let opts = format!(
            "-k {} -c listen_addresses='' -p 5432{}",
            self.socket_dir().display(),
            if self.fsync { "" } else { " -F" }
        );
        let log = self.dir.path().join("server.log");
        self.server_tool(
            "pg_ctl",
            &[
                "-D",
                self.data_dir().to_str().unwrap(),
                "-l",
                log.to_str().unwrap(),
                "-o",
                &opts,
                "-w",
                "-t",
                "60",
                "start",
            ],
        )
        .map_err(|e| {
            let tail = std::fs::read_to_string(&log).unwrap_or_default();
            format!("{e}\nserver log:\n{tail}")
        })
    }

    /// Stops the server (fast: open transactions are rolled back).
    pub fn stop_server(&self) {
        let _ = self.server_tool(
            "pg_ctl",
            &[
                "-D",
                self.data_dir().to_str().unwrap(),
                "-m",
                "fast",
                "-w",
                "stop",
            ],
        );
    }

    /// Creates a database owned by the cluster's superuser `isopach`.
    pub fn create_db(&self, name: &str) -> Result<(), String> {
        let out = Command::new(self.bin.join("createdb"))
            .args(["-h", self.socket_dir().to_str().unwrap()])
            .args(["-p", "5432", "-U", "isopach", name])
            .output()
            .map_err(|e| format!("cannot run createdb: {e}"))?;
        check("createdb", &out)
    }

    /// The URL of database `db`, with a password trust authentication ignores.
    pub fn url(&self, db: &str) -> String {
        format!(
            "postgres://isopach:{PASSWORD}@/{db}?host={}&port=5432",
            self.socket_dir().display()
        )
    }

    /// Runs one of the server's programs, as `postgres` when we are root.
    fn server_tool(&self, name: &str, args: &[&str]) -> Result<(), String> {
        let program = self.bin.join(name);
        let mut cmd = if self.as_postgres {
            let mut c = Command::new("runuser");
            c.args(["-u", "postgres", "--"]).arg(&program);
            c
        } else {
            Command::new(&program)
        };
        let out = cmd
            .args(args)
            .current_dir(self.dir.path())
            .output()
            .map_err(|e| format!("cannot run {}: {e}", program.display()))?;
        check(name, &out)
    }
}

impl Drop for PgCluster {
    fn drop(&mut self) {
        let _ = self.server_tool(
            "pg_ctl",
            &[
                "-D",
                self.data_dir().to_str().unwrap(),
                "-m",
                "immediate",
                "-w",
                "stop",
            ],
        );
    }
}

fn check(name: &str, out: &Output) -> Result<(), String> {
    if out.status.success() {
        Ok(())
    } else {
        Err(format!(
            "{name} failed ({}): {}{}",
            out.status,
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        ))
    }
}

/// The newest `/usr/lib/postgresql/N/bin` with `initdb` and `pg_ctl`.
fn server_bin() -> Option<PathBuf> {
    let mut found: Vec<(u32, PathBuf)> = std::fs::read_dir("/usr/lib/postgresql")
        .ok()?
        .filter_map(|e| e.ok())
        .filter_map(|e| {
            let v: u32 = e.file_name().to_str()?.parse().ok()?;
            let bin = e.path().join("bin");
            (bin.join("initdb").is_file() && bin.join("pg_ctl").is_file()).then_some((v, bin))
        })
        .collect();
    found.sort();
    found.pop().map(|(_, b)| b)
}

fn postgres_ids() -> Result<(u32, u32), String> {
    let id = |flag: &str| -> Result<u32, String> {
        let out = Command::new("id")
            .args([flag, "postgres"])
            .output()
            .map_err(|e| format!("cannot run id: {e}"))?;
        String::from_utf8_lossy(&out.stdout)
            .trim()
            .parse()
            .map_err(|_| "running as root and there is no user postgres to run the server as (the Debian package creates it)".to_string())
    };
    Ok((id("-u")?, id("-g")?))
}

/// A started cluster, or `None` after printing why it could not start (outside the test
/// harness's capture, so the skip shows in the test output). With `ISOPACH_REQUIRE_POSTGRES=1`
/// a missing server fails the test instead.
pub fn cluster_or_skip(test: &str, fsync: bool) -> Option<PgCluster> {
    match PgCluster::start(fsync) {
        Ok(c) => Some(c),
        Err(why) => {
            if std::env::var("ISOPACH_REQUIRE_POSTGRES").is_ok_and(|v| v == "1") {
                panic!("{test}: PostgreSQL is required here (ISOPACH_REQUIRE_POSTGRES=1) but cannot start: {why}");
            }
            let _ = writeln!(
                std::io::stderr().lock(),
                "SKIPPED {test}: no PostgreSQL server can start here: {why}"
            );
            None
        }
    }
}

/// Every file under `dir` whose bytes contain `needle`.
pub fn files_containing(dir: &Path, needle: &str) -> Vec<PathBuf> {
    let mut hits = Vec::new();
    let Ok(entries) = std::fs::read_dir(dir) else {
        return hits;
    };
    for e in entries.filter_map(|e| e.ok()) {
        let p = e.path();
        if p.is_dir() {
            hits.extend(files_containing(&p, needle));
        } else if std::fs::read(&p)
            .is_ok_and(|b| b.windows(needle.len()).any(|w| w == needle.as_bytes()))
        {
            hits.push(p);
        }
    }
    hits
}
