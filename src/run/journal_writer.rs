//! A measuring session's journal on a writer thread, so the stage moves on while the disk
//! syncs.
//!
//! The sequencer writes a site's spectrum file (renamed into place, not yet synced), hands
//! the writer the file to sync, then publishes the site's journal events, and moves the stage
//! on. The thread works through its queue in order: it syncs each spectrum file (and its
//! folder), then appends the events that follow it, syncing the journal once for every run of
//! events queued together (group commit). So a journal line never reaches the disk before the
//! spectrum it names, and a kill or power loss loses at most the events still queued: their
//! sites were never journalled, and a resumed run measures them again.
//!
//! A write that fails is kept and returned by the next [`JournalWriter::append`] (so the
//! session stops) and by [`JournalWriter::flush`], which also waits until everything queued
//! is on disk; the session flushes before it reads its journal back.

use super::journal::Journal;
use super::stream::{RunEvent, Subscriber};
use std::path::PathBuf;
use std::sync::mpsc;
use std::sync::{Arc, Mutex};

enum Job {
    /// Sync a file already renamed into place, and its folder's entry.
    Sync(PathBuf),
    /// Append these lines (complete events, each ending in a newline).
    Lines(Vec<u8>),
    /// Answer once everything before is on disk.
    Flush(mpsc::Sender<()>),
}

/// The handle to the writer thread (cheap to clone; the thread ends when the last is dropped).
#[derive(Clone)]
pub struct JournalWriter {
    jobs: mpsc::Sender<Job>,
    failed: Arc<Mutex<Option<String>>>,
}

impl JournalWriter {
    /// Starts the writer thread for `journal`.
    pub fn start(journal: Journal) -> std::io::Result<JournalWriter> {
        let (jobs, queue) = mpsc::channel();
        let failed = Arc::new(Mutex::new(None));
        let kept = failed.clone();
        std::thread::Builder::new()
            .name("journal-writer".into())
            .spawn(move || work(journal, queue, kept))?;
        Ok(JournalWriter { jobs, failed })
    }

    /// Queues the sync of `path` (already written and renamed into place); the events
    /// appended after this reach the disk only after it.
    pub fn sync_file(&self, path: PathBuf) -> anyhow::Result<()> {
        self.send(Job::Sync(path))
    }

    /// Queues one event.
    pub fn append<E: serde::Serialize>(&self, event: &E) -> anyhow::Result<()> {
        let mut line = serde_json::to_vec(event)?;
        line.push(b'\n');
        self.send(Job::Lines(line))
    }

    /// Waits until everything queued is on disk; the first write that failed, if one did.
    pub fn flush(&self) -> anyhow::Result<()> {
        let (done, wait) = mpsc::channel();
        self.send(Job::Flush(done))?;
        // The thread answers after the jobs before; a thread gone (it panicked) cannot.
        wait.recv()
            .map_err(|_| anyhow::anyhow!("the journal writer stopped unexpectedly"))?;
        self.check()
    }

    fn send(&self, job: Job) -> anyhow::Result<()> {
        self.check()?;
        self.jobs
            .send(job)
            .map_err(|_| anyhow::anyhow!("the journal writer stopped unexpectedly"))
    }

    fn check(&self) -> anyhow::Result<()> {
        match &*self.failed.lock().unwrap_or_else(|e| e.into_inner()) {
            Some(e) => anyhow::bail!("{e}"),
            None => Ok(()),
        }
    }
}

impl Subscriber for JournalWriter {
    fn on_event(&mut self, event: &RunEvent) -> anyhow::Result<()> {
        match event {
            RunEvent::Journal(e) => self.append(e),
            _ => Ok(()),
        }
    }
}

/// The thread: jobs in order; lines gathered while more are queued, then written and synced
/// together (before a sync or flush, and when the queue runs dry); after the first failure
/// nothing more is written.
fn work(mut journal: Journal, queue: mpsc::Receiver<Job>, failed: Arc<Mutex<Option<String>>>) {
    let mut lines: Vec<u8> = Vec::new();
    let mut first_error: Option<String> = None;
    while let Ok(first) = queue.recv() {
        // Everything queued now, then `None`: the batch ends and its lines go to disk.
        let batch = std::iter::once(Some(first))
            .chain(std::iter::from_fn(|| queue.try_recv().ok().map(Some)))
            .chain(std::iter::once(None));
        for job in batch {
            if let Some(Job::Lines(l)) = job {
                lines.extend_from_slice(&l);
                continue;
            }
            if !lines.is_empty() && first_error.is_none() {
                first_error = journal.append_lines(&lines).err().map(|e| e.to_string());
            }
            lines.clear();
            if let Some(Job::Sync(path)) = &job {
                if first_error.is_none() {
                    first_error = sync_file(path).err();
                }
            }
            // Kept before a flush is answered, so the flush sees it.
            if let Some(e) = &first_error {
                let mut kept = failed.lock().unwrap_or_else(|p| p.into_inner());
                if kept.is_none() {
                    tracing::error!("{e}");
                    *kept = Some(e.clone());
                }
            }
            if let Some(Job::Flush(done)) = job {
                let _ = done.send(());
            }
        }
    }
}

/// Syncs a file's data and its folder's entry list.
fn sync_file(path: &std::path::Path) -> Result<(), String> {
    std::fs::File::open(path)
        .and_then(|f| f.sync_all())
        .map_err(|e| format!("cannot sync {}: {e}", path.display()))?;
    if let Some(dir) = path.parent() {
        super::files::sync_dir(dir);
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::run::events::Event;

    fn note(i: usize) -> Event {
        Event::RunStopped {
            time: format!("t{i}"),
            reason: format!("r{i}"),
        }
    }

    #[test]
    fn events_reach_the_journal_in_order_once_flushed() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("journal.jsonl");
        let w = JournalWriter::start(Journal::open(&path).unwrap()).unwrap();
        let spectrum = dir.path().join("s.csv");
        std::fs::write(&spectrum, "x").unwrap();
        for i in 0..200 {
            if i == 100 {
                w.sync_file(spectrum.clone()).unwrap();
            }
            w.append(&note(i)).unwrap();
        }
        w.flush().unwrap();
        let back = crate::run::journal::read::<Event>(&path).unwrap();
        let want: Vec<Event> = (0..200).map(note).collect();
        assert_eq!(back.events, want);
    }

    #[test]
    fn a_failed_write_stops_the_session_at_the_next_event() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("journal.jsonl");
        let w = JournalWriter::start(Journal::open(&path).unwrap()).unwrap();
        w.sync_file(dir.path().join("missing.csv")).unwrap();
        let e = w.flush().unwrap_err().to_string();
        assert!(
            e.contains("cannot sync") && e.contains("missing.csv"),
            "{e}"
        );
        assert!(w.append(&note(1)).is_err());
    }
}
