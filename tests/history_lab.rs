//! A lab's shared history (issue 15): four simulated benches run concurrently into one history
//! — a throwaway PostgreSQL cluster, and an SQLite file — and every session lands exactly
//! once; a writer killed mid-transaction leaves nothing partial; a history that cannot be
//! reached never fails a run, and the run lands with the next write; a history rebuilt from the
//! same run folders is identical on both backends; no password reaches a message or a file.

mod pg_common;
mod run_common;

use isopach::history::db::{History, RunRecord};
use isopach::history::location::HistoryLocation;
use pg_common::{cluster_or_skip, files_containing, PASSWORD};
use run_common::{bench_dir, isopach};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Output, Stdio};

const BENCHES: usize = 4;

/// Every run record of the history at `setting`.
fn runs_in(setting: &str) -> Vec<RunRecord> {
    let at = HistoryLocation::from_setting(Some(setting), Path::new("unused")).unwrap();
    tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .unwrap()
        .block_on(async { History::open(&at).await?.runs().await })
        .unwrap()
}

/// A lab of four benches: one temp dir with the recipe, and per bench a machine file named
/// `bench-K` and its own runs folder.
struct Lab {
    dir: tempfile::TempDir,
    recipe: PathBuf,
    machines: Vec<PathBuf>,
}

impl Lab {
    fn new() -> Lab {
        let (dir, recipe, machine) = bench_dir("");
        let text = std::fs::read_to_string(&machine).unwrap();
        let machines = (1..=BENCHES)
            .map(|k| {
                let named = text.replacen(
                    "name = \"built-in simulated bench\"",
                    &format!("name = \"bench-{k}\""),
                    1,
                );
                assert_ne!(named, text, "the machine file names its bench");
                let path = dir.path().join(format!("bench-{k}.toml"));
                std::fs::write(&path, named).unwrap();
                path
            })
            .collect();
        Lab {
            dir,
            recipe,
            machines,
        }
    }

    /// Slows bench `k` (1-based) to `time_scale` × real time, so that a run outlasts
    /// whatever the test does while it measures.
    fn slow_down(&self, k: usize, time_scale: u32) {
        let path = &self.machines[k - 1];
        let text = std::fs::read_to_string(path).unwrap();
        let slowed = text.replacen("time_scale = 50", &format!("time_scale = {time_scale}"), 1);
        assert_ne!(slowed, text, "the machine file sets its time scale");
        std::fs::write(path, slowed).unwrap();
    }

    fn runs_dir(&self, bench: usize) -> PathBuf {
        self.dir.path().join(format!("runs-{bench}"))
    }

    /// `isopach run` on bench `k` (1-based) for `wafer`, writing to `history`.
    fn spawn_run(&self, k: usize, wafer: &str, history: &str) -> Child {
        Command::new(env!("CARGO_BIN_EXE_isopach"))
            .args(run_common::run_args(
                &self.recipe,
                &self.machines[k - 1],
                wafer,
                &self.runs_dir(k),
            ))
            .args(["--history", history])
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap()
    }

    /// Four benches measuring at once; returns their outputs.
    fn run_all(&self, history: &str, round: &str) -> Vec<Output> {
        let children: Vec<Child> = (1..=BENCHES)
            .map(|k| self.spawn_run(k, &format!("{round}-B{k}"), history))
            .collect();
        children
            .into_iter()
            .map(|c| c.wait_with_output().unwrap())
            .collect()
    }

    /// `trend --rebuild` of every bench's runs folder into `history`.
    fn rebuild_into(&self, history: &str) {
        for k in 1..=BENCHES {
            let o = isopach(&[
                "trend",
                "--runs",
                self.runs_dir(k).to_str().unwrap(),
                "--history",
                history,
                "--rebuild",
                "--json",
            ]);
            assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        }
    }
}

fn assert_ok(o: &Output, what: &str) {
    assert!(
        o.status.success(),
        "{what}: {}\n{}",
        o.status,
        String::from_utf8_lossy(&o.stderr)
    );
}

/// The run folders of a runs folder (hidden entries are not runs).
fn run_folders(runs: &Path) -> Vec<PathBuf> {
    isopach::run::history_entry::run_folders(runs).unwrap()
}

/// Four concurrent benches, twice, then a refit (a second session on one run): every run and
/// every session is in `history` exactly once, and a rebuild from the run folders gives the
/// same records. Returns the lab for further checks.
fn four_benches_land_once(history: &str, rebuilt: &str) -> Lab {
    let lab = Lab::new();
    for round in ["R1", "R2"] {
        for (k, o) in lab.run_all(history, round).iter().enumerate() {
            assert_ok(o, &format!("bench {} round {round}", k + 1));
            let err = String::from_utf8_lossy(&o.stderr);
            assert!(!err.contains("history not updated"), "{err}");
        }
    }
    let refitted = &run_folders(&lab.runs_dir(2))[0];
    let o = isopach(&["refit", refitted.to_str().unwrap(), "--history", history]);
    assert_ok(&o, "refit");
    let runs = runs_in(history);
    assert_eq!(runs.len(), 2 * BENCHES, "every run lands exactly once");
    for k in 1..=BENCHES {
        let bench = format!("bench-{k}");
        let mine: Vec<&RunRecord> = runs.iter().filter(|r| r.id.bench == bench).collect();
        assert_eq!(mine.len(), 2, "{bench}");
        for r in mine {
            let refit = Path::new(&r.id.folder) == refitted.as_path();
            let commands: Vec<&str> = r.sessions.iter().map(|s| s.command.as_str()).collect();
            let want: &[&str] = if refit { &["run", "refit"] } else { &["run"] };
            assert_eq!(commands, want, "{}", r.id.run_id);
            assert_eq!(r.sessions[0].outcome, "finished");
            assert!(!r.id.finished.is_empty());
            assert_eq!(r.sites.len(), 9, "nine sites, one layer");
            assert_eq!(r.layers.len(), 1);
            assert_eq!(r.layers[0].sites_total, 9);
            assert!(r.id.folder.starts_with(lab.runs_dir(k).to_str().unwrap()));
        }
    }
    // Runs given by id are found through the history, whichever bench measured them.
    let (a, b) = (&runs[0].id, &runs[runs.len() - 1].id);
    assert_ne!(a.bench, b.bench);
    let o = isopach(&[
        "compare",
        &a.run_id,
        &b.run_id,
        "--history",
        history,
        "--json",
    ]);
    assert_ok(&o, "compare by run id");
    let cmp: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(cmp["wafers"][0]["folder"], a.folder.as_str());
    assert_eq!(cmp["wafers"][1]["folder"], b.folder.as_str());
    // The same run folders rebuilt into a fresh history give the very same records.
    lab.rebuild_into(rebuilt);
    assert_eq!(format!("{runs:?}"), format!("{:?}", runs_in(rebuilt)));
    // A rebuild sent again is not doubled.
    lab.rebuild_into(rebuilt);
    assert_eq!(format!("{runs:?}"), format!("{:?}", runs_in(rebuilt)));
    // Per-bench and lab-wide trends; the chart names every bench.
    let runs1 = lab.runs_dir(1).to_str().unwrap().to_string();
    let trend = |extra: &[&str]| -> serde_json::Value {
        let mut args = vec!["trend", "--history", history, "--runs", &runs1, "--json"];
        args.extend_from_slice(extra);
        let o = isopach(&args);
        assert_ok(&o, "trend");
        serde_json::from_slice(&o.stdout).unwrap()
    };
    {
        assert_eq!(trend(&[])["runs"].as_array().unwrap().len(), 2 * BENCHES);
        let b3 = trend(&["--bench", "bench-3"]);
        let rows = b3["runs"].as_array().unwrap();
        assert_eq!(rows.len(), 2);
        assert!(rows.iter().all(|r| r["bench"] == "bench-3"));
        let site = trend(&["--site", "1"]);
        assert_eq!(site["runs"].as_array().unwrap().len(), 2 * BENCHES);
        let chart = lab.dir.path().join("lab.svg");
        let o = isopach(&[
            "trend",
            "--history",
            history,
            "--runs",
            &runs1,
            "--out",
            chart.to_str().unwrap(),
        ]);
        assert_ok(&o, "trend --out");
        let svg = std::fs::read_to_string(&chart).unwrap();
        for k in 1..=BENCHES {
            assert!(
                svg.contains(&format!(">bench-{k}<")),
                "bench-{k} in the legend"
            );
        }
    }
    lab
}

#[test]
fn four_benches_write_one_postgres_history_and_rebuild_matches_sqlite() {
    let Some(pg) = cluster_or_skip("four_benches_write_one_postgres_history", false) else {
        return;
    };
    pg.create_db("lab").unwrap();
    pg.create_db("rebuilt").unwrap();
    let lab = four_benches_land_once(&pg.url("lab"), &pg.url("rebuilt"));
    // The same run folders rebuilt into SQLite: identical records on both backends.
    let file = lab.dir.path().join("same.sqlite");
    lab.rebuild_into(file.to_str().unwrap());
    assert_eq!(
        format!("{:?}", runs_in(&pg.url("rebuilt"))),
        format!("{:?}", runs_in(file.to_str().unwrap()))
    );
    // The password was in every URL: it is in no run folder.
    for k in 1..=BENCHES {
        let leaks = files_containing(&lab.runs_dir(k), PASSWORD);
        assert!(leaks.is_empty(), "password written to {leaks:?}");
    }
}

#[test]
fn four_benches_write_one_sqlite_history() {
    let dir = tempfile::tempdir().unwrap();
    let shared = dir.path().join("lab.sqlite");
    let rebuilt = dir.path().join("rebuilt.sqlite");
    four_benches_land_once(shared.to_str().unwrap(), rebuilt.to_str().unwrap());
}

/// Copies of one real run folder under new run ids: `n` runs to rebuild.
fn many_runs(n: usize) -> (Lab, PathBuf) {
    let lab = Lab::new();
    let file = lab.dir.path().join("seed.sqlite");
    let o = lab.spawn_run(1, "K000", file.to_str().unwrap());
    assert_ok(&o.wait_with_output().unwrap(), "seed run");
    let runs = lab.runs_dir(1);
    let first = run_folders(&runs).remove(0);
    let id = first.file_name().unwrap().to_str().unwrap().to_string();
    for i in 1..n {
        let new_id = id.replace("K000", &format!("K{i:03}"));
        let to = runs.join(&new_id);
        let status = Command::new("cp")
            .args(["-r", first.to_str().unwrap(), to.to_str().unwrap()])
            .status()
            .unwrap();
        assert!(status.success());
        let toml = std::fs::read_to_string(to.join("run.toml")).unwrap();
        std::fs::write(to.join("run.toml"), toml.replace(&id, &new_id)).unwrap();
    }
    (lab, runs)
}

/// A rebuild killed at any moment leaves the history as it was: every run whole.
fn killed_writer_leaves_nothing_partial(history: &str, runs: &Path) {
    let r = runs.to_str().unwrap();
    let o = isopach(&["trend", "--runs", r, "--history", history, "--rebuild"]);
    assert_ok(&o, "first rebuild");
    let before = runs_in(history);
    assert_eq!(before.len(), 60);
    for delay_ms in [5u64, 20, 40, 80, 160] {
        let mut child = Command::new(env!("CARGO_BIN_EXE_isopach"))
            .args(["trend", "--runs", r, "--history", history, "--rebuild"])
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(std::time::Duration::from_millis(delay_ms));
        let _ = child.kill();
        let _ = child.wait();
        let after = runs_in(history);
        assert_eq!(
            format!("{after:?}"),
            format!("{before:?}"),
            "after a kill at {delay_ms} ms"
        );
    }
}

#[test]
fn a_writer_killed_mid_transaction_leaves_nothing_partial_on_either_backend() {
    let (lab, runs) = many_runs(60);
    let file = lab.dir.path().join("kill.sqlite");
    killed_writer_leaves_nothing_partial(file.to_str().unwrap(), &runs);
    let Some(pg) = cluster_or_skip("a_writer_killed_mid_transaction (PostgreSQL)", false) else {
        return;
    };
    pg.create_db("kill").unwrap();
    killed_writer_leaves_nothing_partial(&pg.url("kill"), &runs);
}

#[test]
fn a_server_stopped_mid_run_lets_the_run_finish_and_it_lands_with_the_next_write() {
    let Some(pg) = cluster_or_skip("a_server_stopped_mid_run", false) else {
        return;
    };
    pg.create_db("lab").unwrap();
    let url = pg.url("lab");
    let lab = Lab::new();
    // At the tests' usual 50× a run lasts about half a second, which a loaded machine's
    // `pg_ctl stop` can outlast; at 10× it measures for a few seconds.
    lab.slow_down(1, 10);
    let mut child = lab.spawn_run(1, "DOWN", &url);
    pg.stop_server();
    assert!(
        child.try_wait().unwrap().is_none(),
        "the run was still measuring when the server stopped"
    );
    let o = child.wait_with_output().unwrap();
    assert_ok(&o, "a run whose history is down");
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("run history not updated"), "{err}");
    assert!(err.contains("isopach trend --rebuild"), "{err}");
    assert!(!err.contains(PASSWORD), "the password is hidden: {err}");
    assert!(err.contains("postgres://isopach:***@"), "{err}");
    let runs = lab.runs_dir(1);
    assert_eq!(isopach::run::history_entry::pending(&runs).len(), 1);
    let leaks = files_containing(&runs, PASSWORD);
    assert!(leaks.is_empty(), "password written to {leaks:?}");
    // The server is back: the next run of that bench sends both.
    pg.start_server().unwrap();
    let o = lab.spawn_run(1, "UP", &url).wait_with_output().unwrap();
    assert_ok(&o, "the next run");
    let wafers: Vec<String> = runs_in(&url).into_iter().map(|r| r.id.wafer).collect();
    assert_eq!(wafers.len(), 2, "{wafers:?}");
    assert!(wafers.contains(&"DOWN".to_string()) && wafers.contains(&"UP".to_string()));
    assert!(isopach::run::history_entry::pending(&runs).is_empty());
}

#[test]
fn an_unwritable_sqlite_history_never_fails_the_run_and_the_run_lands_on_rebuild() {
    let lab = Lab::new();
    // A folder where the file should be: SQLite cannot open it.
    let file = lab.dir.path().join("h.sqlite");
    std::fs::create_dir(&file).unwrap();
    let o = lab
        .spawn_run(1, "LOST", file.to_str().unwrap())
        .wait_with_output()
        .unwrap();
    assert_ok(&o, "a run whose history cannot be opened");
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("run history not updated"), "{err}");
    let runs = lab.runs_dir(1);
    assert_eq!(isopach::run::history_entry::pending(&runs).len(), 1);
    std::fs::remove_dir(&file).unwrap();
    let o = isopach(&[
        "trend",
        "--runs",
        runs.to_str().unwrap(),
        "--history",
        file.to_str().unwrap(),
        "--rebuild",
    ]);
    assert_ok(&o, "rebuild");
    assert_eq!(runs_in(file.to_str().unwrap()).len(), 1);
    assert!(isopach::run::history_entry::pending(&runs).is_empty());
}

#[test]
fn a_bad_history_setting_is_invalid_input_before_any_folder_is_made() {
    let lab = Lab::new();
    let o = lab
        .spawn_run(1, "X", "mysql://u:hunter2@h/db")
        .wait_with_output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("mysql://u:***@h/db"), "{err}");
    assert!(!err.contains("hunter2"), "{err}");
    assert!(!lab.runs_dir(1).exists());
}
