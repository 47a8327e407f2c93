//! The append-only journal: one JSON object per line, flushed and synced after every event.
//!
//! A process killed mid-write can leave a torn last line; readers skip it (and only it) and
//! report it, and the next writer starts on a fresh line, so no complete event is ever lost.

use serde::de::DeserializeOwned;
use serde::Serialize;
use std::fs::{File, OpenOptions};
use std::io::{BufRead, BufReader, Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

/// Why the journal could not be written or read.
#[derive(Debug, thiserror::Error)]
pub enum JournalError {
    #[error("journal {}: {source}", path.display())]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("journal {}:{line}: not a valid event: {message}", path.display())]
    Corrupt {
        path: PathBuf,
        line: usize,
        message: String,
    },
}

/// An open journal, appending.
#[derive(Debug)]
pub struct Journal {
    file: File,
    path: PathBuf,
}

impl Journal {
    /// Opens (creating if needed) for appending; a torn last line is closed with a newline so
    /// the next event starts cleanly.
    pub fn open(path: &Path) -> Result<Journal, JournalError> {
        let io = |source| JournalError::Io {
            path: path.into(),
            source,
        };
        let mut file = OpenOptions::new()
            .create(true)
            .read(true)
            .append(true)
            .open(path)
            .map_err(io)?;
        let len = file.metadata().map_err(io)?.len();
        if len > 0 {
            let mut last = [0u8; 1];
            file.seek(SeekFrom::Start(len - 1)).map_err(io)?;
            file.read_exact(&mut last).map_err(io)?;
            if last[0] != b'\n' {
                file.write_all(b"\n").map_err(io)?;
                file.sync_data().map_err(io)?;
            }
        }
        Ok(Journal {
            file,
            path: path.into(),
        })
    }

    /// Appends one event as a line and syncs it to disk before returning.
    pub fn append<E: Serialize>(&mut self, event: &E) -> Result<(), JournalError> {
        let io = |source| JournalError::Io {
            path: self.path.clone(),
            source,
        };
        let mut line = serde_json::to_vec(event)
            .map_err(|e| io(std::io::Error::new(std::io::ErrorKind::InvalidData, e)))?;
        line.push(b'\n');
        self.file.write_all(&line).map_err(io)?;
        self.file.sync_data().map_err(io)
    }
}

/// Events read back from a journal.
#[derive(Debug)]
pub struct ReadBack<E> {
    pub events: Vec<E>,
    /// 1-based numbers of torn lines that were skipped (a kill mid-write leaves at most one,
    /// at the end of a session).
    pub skipped_lines: Vec<usize>,
}

/// Reads every event. A line that does not parse is skipped only if it is a torn write (the
/// file's last line, or a line without its newline that a later writer closed); anything else
/// is corruption and an error naming the line.
pub fn read<E: DeserializeOwned>(path: &Path) -> Result<ReadBack<E>, JournalError> {
    let io = |source| JournalError::Io {
        path: path.into(),
        source,
    };
    let file = File::open(path).map_err(io)?;
    let lines: Vec<String> = BufReader::new(file)
        .lines()
        .collect::<Result<_, _>>()
        .map_err(io)?;
    let mut events = Vec::new();
    let mut skipped_lines = Vec::new();
    for (i, line) in lines.iter().enumerate() {
        if line.trim().is_empty() {
            continue;
        }
        match serde_json::from_str::<E>(line) {
            Ok(e) => events.push(e),
            // A torn write is a prefix of a JSON object: the parser runs out of input.
            Err(_) if is_torn(line) => skipped_lines.push(i + 1),
            Err(e) => {
                return Err(JournalError::Corrupt {
                    path: path.into(),
                    line: i + 1,
                    message: e.to_string(),
                })
            }
        }
    }
    Ok(ReadBack {
        events,
        skipped_lines,
    })
}

/// Whether a line is a cut-off JSON object rather than a complete but wrong one.
fn is_torn(line: &str) -> bool {
    matches!(serde_json::from_str::<serde_json::Value>(line), Err(e) if e.is_eof())
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde::Deserialize;

    #[derive(Debug, Serialize, Deserialize, PartialEq)]
    struct Ev {
        n: u32,
    }

    #[test]
    fn torn_tail_is_skipped_and_closed() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("j.jsonl");
        let mut j = Journal::open(&p).unwrap();
        j.append(&Ev { n: 1 }).unwrap();
        drop(j);
        std::fs::OpenOptions::new()
            .append(true)
            .open(&p)
            .unwrap()
            .write_all(b"{\"x\":{\"deep\":1}")
            .unwrap();
        let r: ReadBack<Ev> = read(&p).unwrap();
        assert_eq!(r.events, vec![Ev { n: 1 }]);
        assert_eq!(r.skipped_lines, vec![2]);
        let mut j = Journal::open(&p).unwrap();
        j.append(&Ev { n: 2 }).unwrap();
        let r: ReadBack<Ev> = read(&p).unwrap();
        assert_eq!(r.events, vec![Ev { n: 1 }, Ev { n: 2 }]);
        assert_eq!(r.skipped_lines, vec![2]);
    }

    #[test]
    fn corruption_names_the_line() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("j.jsonl");
        std::fs::write(&p, "{\"n\":1}\n{\"m\":2}\n{\"n\":3}\n").unwrap();
        let e = read::<Ev>(&p).unwrap_err();
        assert!(
            e.to_string().contains("j.jsonl:2: not a valid event"),
            "{e}"
        );
    }
}
