//! A run's entry in the run-to-run history, read from its run folder (`run.toml`, `sites.csv`,
//! the journal's sessions), written at the end of every session and by `trend --rebuild`.
//!
//! The dependency is one way: `run` feeds `history` plain values; `history` never reads a run
//! folder itself. A write that fails never fails the run: the run is marked pending (an empty
//! file named after it in `.history-pending/` of the runs folder, holding nothing of the
//! history's address), and the next successful write from that runs folder, or a rebuild,
//! sends it.

use super::events::Event;
use super::folder::{RunFolder, RunToml};
use super::journal;
use super::outputs::read_outputs;
use crate::history::db::{History, RunRecord};
use crate::history::location::HistoryLocation;
use crate::history::record::{self, RunIdentity, SessionRecord};
use crate::map::sites_table::SiteRow;
use crate::map::stats::Summary;
use std::path::{Path, PathBuf};

/// The folder of pending markers inside a runs folder.
pub const PENDING_DIR: &str = ".history-pending";

/// The bench that measured a run: its frozen machine file's `name`, or the built-in bench's.
pub fn bench_name(meta: &RunToml) -> String {
    meta.machine
        .as_ref()
        .and_then(|m| m.get("name"))
        .and_then(|n| n.as_str())
        .map(str::to_string)
        .unwrap_or_else(|| crate::bench::machine::builtin_simulated().name)
}

/// The sessions in a journal: each `run-started` opens one, which ends at its last event.
pub fn sessions_of(events: &[Event]) -> Vec<SessionRecord> {
    let mut out: Vec<SessionRecord> = Vec::new();
    for e in events {
        if let Event::RunStarted { time, command, .. } = e {
            out.push(SessionRecord {
                session: out.len() + 1,
                command: command.clone(),
                started: time.clone(),
                ended: time.clone(),
                outcome: String::new(),
            });
            continue;
        }
        let Some(s) = out.last_mut() else { continue };
        s.ended = e.time().to_string();
        match e {
            Event::RunFinished { .. } => s.outcome = "finished".into(),
            Event::RunStopped { .. } => s.outcome = "stopped".into(),
            Event::RefitFinished { .. } => s.outcome = "refitted".into(),
            _ => {}
        }
    }
    out
}

/// The history record of the run in `folder` from its frozen `run.toml`, journal, rows and
/// summary.
pub fn entry(
    folder: &Path,
    meta: &RunToml,
    events: &[Event],
    rows: &[SiteRow],
    summary: &Summary,
) -> RunRecord {
    let finished = events
        .iter()
        .rev()
        .find_map(|e| match e {
            Event::RunFinished { time } => Some(time.clone()),
            _ => None,
        })
        .unwrap_or_default();
    let id = RunIdentity {
        bench: bench_name(meta),
        run_id: meta.run.id.clone(),
        folder: folder.display().to_string(),
        recipe: meta.recipe.name.clone(),
        wafer: meta.run.wafer.clone(),
        lot: meta.run.lot.clone(),
        started: meta.run.started.clone(),
        finished,
    };
    record::record_of(id, sessions_of(events), summary, rows)
}

/// The history record of the run in `folder`, read from its files (what a session wrote, what
/// a rebuild reads: both give the same record).
pub fn read_entry(folder: &Path) -> anyhow::Result<RunRecord> {
    let journal = RunFolder::new(folder).journal();
    let events = if journal.exists() {
        journal::read(&journal)?.events
    } else {
        Vec::new()
    };
    read_entry_with(folder, &events)
}

/// [`read_entry`] with the journal's events already read.
fn read_entry_with(folder: &Path, events: &[Event]) -> anyhow::Result<RunRecord> {
    let o = read_outputs(folder)?;
    Ok(entry(folder, &o.meta, events, &o.rows, &o.summary))
}

/// The runs folder that holds `folder`.
pub fn runs_dir_of(folder: &Path) -> &Path {
    match folder.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    }
}

/// Records (or re-records) the run in `folder`, whose journal's `events` the caller has just
/// read (rebuilding its derived files), then any run of the same runs folder whose earlier
/// write failed. On failure the run stays marked pending and the returned text says so; the
/// run itself is never failed by its history.
pub async fn record(
    location: &HistoryLocation,
    folder: &RunFolder,
    events: &[Event],
) -> Option<String> {
    let runs_dir = runs_dir_of(&folder.root);
    let run_id = folder
        .root
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    // Marked first: a writer killed mid-write leaves the mark, and the next write sends it.
    mark_pending(runs_dir, &run_id);
    match send_pending(location, runs_dir, Some((&run_id, events))).await {
        Ok(_) => None,
        Err(e) => {
            let text = format!(
                "run history not updated: {}; the run is safe in its folder and will be sent with the next run's write or by `isopach trend --rebuild`",
                crate::error_text::chain_text(&e)
            );
            tracing::warn!("{text}");
            Some(text)
        }
    }
}

/// Sends every pending run of `runs_dir`; returns how many were sent. `current`: a run whose
/// journal's events are already read (its id and events).
pub async fn send_pending(
    location: &HistoryLocation,
    runs_dir: &Path,
    current: Option<(&str, &[Event])>,
) -> anyhow::Result<usize> {
    let ids = pending(runs_dir);
    if ids.is_empty() {
        return Ok(0);
    }
    let mut history = History::open(location).await?;
    let mut sent = 0;
    for id in ids {
        let folder = runs_dir.join(&id);
        if !folder.join("run.toml").is_file() {
            // The run folder is gone: nothing to send.
            clear_pending(runs_dir, &id);
            continue;
        }
        let entry = match current {
            Some((current_id, events)) if current_id == id => read_entry_with(&folder, events)?,
            _ => read_entry(&folder)?,
        };
        history.record(&entry).await?;
        clear_pending(runs_dir, &id);
        sent += 1;
    }
    Ok(sent)
}

/// Run ids marked pending in `runs_dir`, sorted.
pub fn pending(runs_dir: &Path) -> Vec<String> {
    let mut ids: Vec<String> = std::fs::read_dir(runs_dir.join(PENDING_DIR))
        .into_iter()
        .flatten()
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| !n.starts_with('.'))
        .collect();
    ids.sort();
    ids
}

fn mark_pending(runs_dir: &Path, run_id: &str) {
    let dir = runs_dir.join(PENDING_DIR);
    let made = std::fs::create_dir_all(&dir).and_then(|_| {
        super::files::open_no_follow(
            std::fs::OpenOptions::new().create(true).append(true),
            &dir.join(run_id),
        )
        .map(drop)
    });
    if let Err(e) = made {
        tracing::warn!("cannot mark run {run_id} as pending for the history: {e}");
    }
}

/// Clears one mark; the folder of marks goes once empty, so a runs folder whose history is up
/// to date holds only run folders (and the default history file).
fn clear_pending(runs_dir: &Path, run_id: &str) {
    let dir = runs_dir.join(PENDING_DIR);
    let _ = std::fs::remove_file(dir.join(run_id));
    // Fails while other marks are left: that is the point.
    let _ = std::fs::remove_dir(&dir);
}

/// Every run folder (a folder with a `run.toml`) directly inside `runs_dir`, sorted by name.
pub fn run_folders(runs_dir: &Path) -> std::io::Result<Vec<PathBuf>> {
    let mut out: Vec<PathBuf> = std::fs::read_dir(runs_dir)?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.join("run.toml").is_file())
        .collect();
    out.sort();
    Ok(out)
}

/// Rebuilds the runs of `runs_dir`'s benches in the history at `location` from its run
/// folders (one transaction) and clears its pending marks; folders that cannot be read are
/// returned with the reason, not fatal.
pub async fn rebuild_history(
    runs_dir: &Path,
    location: &HistoryLocation,
) -> anyhow::Result<(usize, Vec<(PathBuf, String)>)> {
    let mut records = Vec::new();
    let mut skipped = Vec::new();
    for folder in run_folders(runs_dir)? {
        match read_entry(&folder) {
            Ok(r) => records.push(r),
            Err(e) => skipped.push((folder, crate::error_text::chain_text(&e))),
        }
    }
    let marked = pending(runs_dir);
    History::open(location).await?.rebuild(&records).await?;
    for id in marked {
        clear_pending(runs_dir, &id);
    }
    Ok((records.len(), skipped))
}
