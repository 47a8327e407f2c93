//! The append-only journal: one JSON object per line, flushed and synced after every event
//! (or after every batch of events that count only together).
//!
//! A process killed mid-write, or a power loss, can leave a torn tail: a cut line, a line cut
//! inside a multi-byte character, or NUL bytes where the file grew but the data never reached
//! the disk. Everything after the last complete line is that tail: readers report it and keep
//! every event before it; the next writer moves its bytes to `journal.torn-<time>` beside the
//! journal (nothing is deleted) and truncates the journal to the last complete line, so no
//! complete event is ever lost and appends start cleanly. An unreadable line in the middle,
//! followed by good events, is not a tear: it is an error that names the line.

use super::files::open_no_follow;
use serde::de::{DeserializeOwned, IgnoredAny};
use serde::Serialize;
use std::fs::{File, OpenOptions};
use std::io::Write;
use std::path::{Path, PathBuf};

/// Why the journal could not be written or read.
#[derive(Debug, thiserror::Error)]
pub enum JournalError {
    #[error("journal {}: {source}", path.display())]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("journal {}:{line}: not a valid event: {message} (events after it are intact, so this is not a torn write: repair or remove that line by hand)", path.display())]
    Corrupt {
        path: PathBuf,
        line: usize,
        message: String,
    },
}

/// A torn tail found at the end of a journal.
#[derive(Debug, Clone, PartialEq)]
pub struct TornTail {
    /// 1-based line number where the tail begins.
    pub line: usize,
    /// Byte offset where the tail begins (the journal's good length).
    pub offset: u64,
    /// Length of the tail in bytes.
    pub bytes: u64,
}

/// A torn tail that was moved out of the journal.
#[derive(Debug, Clone, PartialEq)]
pub struct TornAside {
    pub tail: TornTail,
    /// Where its bytes were kept.
    pub kept: PathBuf,
}

impl std::fmt::Display for TornAside {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "the journal ended in a torn write (line {}, {} bytes: a kill or power loss mid-write); \
             every event before it is kept, the torn bytes were moved to {}",
            self.tail.line,
            self.tail.bytes,
            self.kept.display()
        )
    }
}

/// An open journal, appending.
#[derive(Debug)]
pub struct Journal {
    file: File,
    path: PathBuf,
    torn: Option<TornAside>,
}

impl Journal {
    /// Opens (creating if needed) for appending, without following a symbolic link. A torn
    /// tail is moved aside first ([`recover_tail`]) and the last line closed with a newline,
    /// so the next event starts cleanly.
    pub fn open(path: &Path) -> Result<Journal, JournalError> {
        let io = |source| JournalError::Io {
            path: path.into(),
            source,
        };
        let torn = recover_tail(path)?;
        if let Some(t) = &torn {
            tracing::warn!("{t}");
        }
        let mut file = open_no_follow(
            OpenOptions::new().create(true).read(true).append(true),
            path,
        )
        .map_err(io)?;
        if last_byte(&file).map_err(io)?.is_some_and(|b| b != b'\n') {
            file.write_all(b"\n").map_err(io)?;
            file.sync_data().map_err(io)?;
        }
        Ok(Journal {
            file,
            path: path.into(),
            torn,
        })
    }

    /// The torn tail moved aside when the journal was opened, if there was one.
    pub fn torn_aside(&self) -> Option<&TornAside> {
        self.torn.as_ref()
    }

    /// Appends one event as a line and syncs it to disk before returning.
    pub fn append<E: Serialize>(&mut self, event: &E) -> Result<(), JournalError> {
        self.append_all(std::slice::from_ref(event))
    }

    /// Appends events as lines in one write and syncs once: for a batch whose events count
    /// only together (a refit's fits, made to count by its `refit-finished`), where a kill
    /// mid-way leaves at most a torn tail that the next session moves aside.
    pub fn append_all<E: Serialize>(&mut self, events: &[E]) -> Result<(), JournalError> {
        let io = |source| JournalError::Io {
            path: self.path.clone(),
            source,
        };
        let mut lines = Vec::new();
        for event in events {
            serde_json::to_writer(&mut lines, event)
                .map_err(|e| io(std::io::Error::new(std::io::ErrorKind::InvalidData, e)))?;
            lines.push(b'\n');
        }
        self.append_lines(&lines)
    }

    /// Appends complete lines (each a serialised event ending in a newline) in one write and
    /// syncs once.
    pub fn append_lines(&mut self, lines: &[u8]) -> Result<(), JournalError> {
        let io = |source| JournalError::Io {
            path: self.path.clone(),
            source,
        };
        self.file.write_all(lines).map_err(io)?;
        self.file.sync_data().map_err(io)
    }
}

/// The last byte of a file (`None` when it is empty).
fn last_byte(file: &File) -> std::io::Result<Option<u8>> {
    use std::os::unix::fs::FileExt;
    let len = file.metadata()?.len();
    if len == 0 {
        return Ok(None);
    }
    let mut byte = [0u8];
    file.read_exact_at(&mut byte, len - 1)?;
    Ok(Some(byte[0]))
}

/// Start of the name of a file that keeps a torn tail (`journal.torn-<time>`).
pub const TORN_PREFIX: &str = "journal.torn-";

/// The files in `dir` that keep torn tails moved out of its journal, sorted by name.
pub fn kept_tails(dir: &Path) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(dir)
        .map(|entries| {
            entries
                .filter_map(Result::ok)
                .filter(|e| e.file_name().to_string_lossy().starts_with(TORN_PREFIX))
                .map(|e| e.path())
                .collect()
        })
        .unwrap_or_default();
    v.sort();
    v
}

/// Moves a torn tail out of the journal at `path`: its bytes go to `journal.torn-<time>` in
/// the same folder (synced), then the journal is cut to its last complete line. Nothing to do
/// (`None`) for a missing journal or one without a torn tail.
pub fn recover_tail(path: &Path) -> Result<Option<TornAside>, JournalError> {
    let io = |source| JournalError::Io {
        path: path.into(),
        source,
    };
    let bytes = match std::fs::read(path) {
        Ok(b) => b,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(None),
        Err(e) => return Err(io(e)),
    };
    let Some(tail) = torn_tail(&bytes) else {
        return Ok(None);
    };
    let dir = path.parent().unwrap_or(Path::new("."));
    let stamp = chrono::Local::now().format("%Y%m%d-%H%M%S%.3f");
    let kept = (1..)
        .map(|k| match k {
            1 => dir.join(format!("{TORN_PREFIX}{stamp}")),
            k => dir.join(format!("{TORN_PREFIX}{stamp}-{k}")),
        })
        .find(|p| std::fs::symlink_metadata(p).is_err())
        .unwrap_or_else(|| dir.join("journal.torn"));
    super::files::write_atomic(&kept, &bytes[tail.offset as usize..]).map_err(io)?;
    super::files::sync_dir(dir);
    let file = open_no_follow(OpenOptions::new().write(true), path).map_err(io)?;
    file.set_len(tail.offset).map_err(io)?;
    file.sync_all().map_err(io)?;
    Ok(Some(TornAside { tail, kept }))
}

/// Events read back from a journal.
#[derive(Debug)]
pub struct ReadBack<E> {
    pub events: Vec<E>,
    /// 1-based numbers of torn lines that were skipped: the torn tail's first line, and cut
    /// lines that a writer of an earlier version closed with a newline and wrote on after.
    pub skipped_lines: Vec<usize>,
    /// The torn tail after the last complete line, if any (kept until a writer moves it).
    pub torn: Option<TornTail>,
}

/// The lines of `bytes` with their 1-based numbers and byte ranges (newline excluded).
fn lines(bytes: &[u8]) -> impl Iterator<Item = (usize, std::ops::Range<usize>)> + '_ {
    let mut start = 0;
    let mut number = 0;
    std::iter::from_fn(move || {
        if start >= bytes.len() {
            return None;
        }
        let end = bytes[start..]
            .iter()
            .position(|b| *b == b'\n')
            .map_or(bytes.len(), |i| start + i);
        number += 1;
        let range = start..end;
        start = end + 1;
        Some((number, range))
    })
}

/// Whether a line is one complete JSON value (whatever its shape).
fn is_complete(line: &[u8]) -> bool {
    serde_json::from_slice::<IgnoredAny>(line).is_ok()
}

fn is_blank(bytes: &[u8]) -> bool {
    bytes.iter().all(u8::is_ascii_whitespace)
}

/// The torn tail of a journal's bytes: everything after the last complete line, when it holds
/// anything but whitespace. Found from the end: only the lines after the last complete one
/// are looked at (the lines before it are checked when they are read).
pub fn torn_tail(bytes: &[u8]) -> Option<TornTail> {
    let mut good_end = 0;
    let mut end = bytes.len();
    loop {
        let start = bytes[..end]
            .iter()
            .rposition(|b| *b == b'\n')
            .map_or(0, |i| i + 1);
        if is_complete(&bytes[start..end]) {
            good_end = (end + 1).min(bytes.len());
            break;
        }
        if start == 0 {
            break;
        }
        end = start - 1;
    }
    let rest = &bytes[good_end..];
    if is_blank(rest) {
        return None;
    }
    // Lines up to the last complete one, then blank lines between it and the tear.
    let good_lines = bytes[..good_end].iter().filter(|b| **b == b'\n').count();
    let blank_lines = lines(rest)
        .take_while(|(_, r)| is_blank(&rest[r.clone()]))
        .count();
    Some(TornTail {
        line: good_lines + blank_lines + 1,
        offset: good_end as u64,
        bytes: rest.len() as u64,
    })
}

/// Reads every event before the torn tail (if any). A line before it that does not parse is
/// skipped only if it is a cut line an earlier writer closed; anything else is corruption and
/// an error naming the line.
pub fn read<E: DeserializeOwned>(path: &Path) -> Result<ReadBack<E>, JournalError> {
    let bytes = std::fs::read(path).map_err(|source| JournalError::Io {
        path: path.into(),
        source,
    })?;
    parse(path, &bytes)
}

/// Reads the events of a journal's bytes (`path` names it in errors); see [`read`].
pub fn parse<E: DeserializeOwned>(path: &Path, bytes: &[u8]) -> Result<ReadBack<E>, JournalError> {
    let torn = torn_tail(bytes);
    let good = &bytes[..torn.as_ref().map_or(bytes.len(), |t| t.offset as usize)];
    parse_lines(path, good, 0, torn)
}

/// Reads the events from the last line that `starts` accepts to the end (every event when
/// no line does), as [`read`] reads them: the lines before it are not read, so this costs
/// what the end of the journal holds, not the whole of it. `starts` sees each whole line
/// before the torn tail, from the last one back.
pub fn read_since<E: DeserializeOwned>(
    path: &Path,
    starts: impl Fn(&[u8]) -> bool,
) -> Result<ReadBack<E>, JournalError> {
    let bytes = std::fs::read(path).map_err(|source| JournalError::Io {
        path: path.into(),
        source,
    })?;
    let torn = torn_tail(&bytes);
    let good = &bytes[..torn.as_ref().map_or(bytes.len(), |t| t.offset as usize)];
    let mut from = 0;
    let mut end = good.len();
    while end > 0 {
        let start = good[..end]
            .iter()
            .rposition(|b| *b == b'\n')
            .map_or(0, |i| i + 1);
        if starts(&good[start..end]) {
            from = start;
            break;
        }
        end = start.saturating_sub(1);
    }
    let lines_before = good[..from].iter().filter(|b| **b == b'\n').count();
    parse_lines(path, &good[from..], lines_before, torn)
}

/// Reads the events of whole lines (`bytes` ends before any torn tail); `lines_before` is the
/// number of journal lines before `bytes`, for the line numbers of errors.
fn parse_lines<E: DeserializeOwned>(
    path: &Path,
    good: &[u8],
    lines_before: usize,
    torn: Option<TornTail>,
) -> Result<ReadBack<E>, JournalError> {
    let mut events = Vec::new();
    let mut skipped_lines = Vec::new();
    for (number, range) in lines(good) {
        let number = number + lines_before;
        let line = &good[range];
        if is_blank(line) {
            continue;
        }
        match serde_json::from_slice::<E>(line) {
            Ok(e) => events.push(e),
            Err(_) if is_cut(line) => skipped_lines.push(number),
            Err(e) => {
                return Err(JournalError::Corrupt {
                    path: path.into(),
                    line: number,
                    message: e.to_string(),
                })
            }
        }
    }
    skipped_lines.extend(torn.as_ref().map(|t| t.line));
    Ok(ReadBack {
        events,
        skipped_lines,
        torn,
    })
}

/// Whether a line is a cut-off JSON object rather than a complete but wrong one.
fn is_cut(line: &[u8]) -> bool {
    matches!(serde_json::from_slice::<serde_json::Value>(line), Err(e) if e.is_eof())
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
    fn a_batch_lands_as_lines_in_order_after_single_events() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("journal.jsonl");
        let mut j = Journal::open(&p).unwrap();
        j.append(&Ev { n: 1 }).unwrap();
        j.append_all(&[Ev { n: 2 }, Ev { n: 3 }, Ev { n: 4 }])
            .unwrap();
        j.append_all::<Ev>(&[]).unwrap();
        j.append(&Ev { n: 5 }).unwrap();
        let r: ReadBack<Ev> = read(&p).unwrap();
        assert_eq!(
            r.events.iter().map(|e| e.n).collect::<Vec<_>>(),
            [1, 2, 3, 4, 5]
        );
        assert!(r.skipped_lines.is_empty());
    }

    /// The definition, line by line from the start: the tail follows the last complete line.
    fn torn_tail_forwards(bytes: &[u8]) -> Option<TornTail> {
        let (mut good_end, mut good_lines) = (0, 0);
        for (number, range) in lines(bytes) {
            if is_complete(&bytes[range.clone()]) {
                good_end = (range.end + 1).min(bytes.len());
                good_lines = number;
            }
        }
        let rest = &bytes[good_end..];
        if is_blank(rest) {
            return None;
        }
        let blank_lines = lines(rest)
            .take_while(|(_, r)| is_blank(&rest[r.clone()]))
            .count();
        Some(TornTail {
            line: good_lines + blank_lines + 1,
            offset: good_end as u64,
            bytes: rest.len() as u64,
        })
    }

    #[test]
    fn torn_tail_found_from_the_end_is_the_one_found_from_the_start() {
        let pieces: [&[u8]; 8] = [
            b"{\"n\":1}\n",
            b"{\"n\":2}",
            b"\n",
            b"  \n",
            b"{\"n\":",
            b"\0\0\0",
            b"\xe2\x82",
            b"[1,2]\n",
        ];
        // Every sequence of up to five pieces: complete, cut, blank and NUL lines in any order.
        let mut checked = 0;
        let mut stack: Vec<Vec<usize>> = vec![vec![]];
        while let Some(seq) = stack.pop() {
            let bytes: Vec<u8> = seq.iter().flat_map(|&k| pieces[k].to_vec()).collect();
            assert_eq!(torn_tail(&bytes), torn_tail_forwards(&bytes), "{bytes:?}");
            checked += 1;
            if seq.len() < 5 {
                for k in 0..pieces.len() {
                    stack.push([seq.clone(), vec![k]].concat());
                }
            }
        }
        assert_eq!(checked, (0..=5).map(|n| 8usize.pow(n)).sum::<usize>());
    }

    #[test]
    fn torn_tail_is_skipped_then_moved_aside() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("journal.jsonl");
        let mut j = Journal::open(&p).unwrap();
        j.append(&Ev { n: 1 }).unwrap();
        drop(j);
        let tail = b"{\"x\":{\"deep\":1}";
        std::fs::OpenOptions::new()
            .append(true)
            .open(&p)
            .unwrap()
            .write_all(tail)
            .unwrap();
        let r: ReadBack<Ev> = read(&p).unwrap();
        assert_eq!(r.events, vec![Ev { n: 1 }]);
        assert_eq!(r.skipped_lines, vec![2]);
        let mut j = Journal::open(&p).unwrap();
        let aside = j.torn_aside().cloned().unwrap();
        assert_eq!(aside.tail.line, 2);
        j.append(&Ev { n: 2 }).unwrap();
        let r: ReadBack<Ev> = read(&p).unwrap();
        assert_eq!(r.events, vec![Ev { n: 1 }, Ev { n: 2 }]);
        // The torn bytes left the journal whole, into a file beside it.
        assert!(r.skipped_lines.is_empty() && r.torn.is_none());
        assert_eq!(kept_tails(dir.path()), vec![aside.kept.clone()]);
        assert_eq!(std::fs::read(&aside.kept).unwrap(), tail);
    }

    #[test]
    fn nul_and_cut_utf8_tails_are_torn_not_corrupt() {
        let good = "{\"n\":1}\n{\"n\":2}\n".as_bytes().to_vec();
        // A power loss: the file grew, the data never came (NULs); a cut inside "é" (C3 A9).
        let nul = [good.clone(), vec![0u8; 300]].concat();
        let cut = [good.clone(), b"{\"n\":3,\"s\":\"caf\xC3".to_vec()].concat();
        let nul_then_newlines = [good.clone(), vec![0u8; 10], b"\n\0\0\n".to_vec()].concat();
        for bytes in [nul, cut, nul_then_newlines] {
            let r: ReadBack<Ev> = parse(Path::new("j"), &bytes).unwrap();
            assert_eq!(r.events, vec![Ev { n: 1 }, Ev { n: 2 }]);
            let t = r.torn.unwrap();
            assert_eq!((t.line, t.offset), (3, good.len() as u64));
            let dir = tempfile::tempdir().unwrap();
            let p = dir.path().join("journal.jsonl");
            std::fs::write(&p, &bytes).unwrap();
            let mut j = Journal::open(&p).unwrap();
            j.append(&Ev { n: 3 }).unwrap();
            let r: ReadBack<Ev> = read(&p).unwrap();
            assert_eq!(r.events.len(), 3);
            assert_eq!(
                std::fs::read(&kept_tails(dir.path())[0]).unwrap(),
                bytes[good.len()..]
            );
        }
    }

    #[test]
    fn corruption_in_the_middle_names_the_line() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("j.jsonl");
        std::fs::write(&p, "{\"n\":1}\n{\"m\":2}\n{\"n\":3}\n").unwrap();
        let e = read::<Ev>(&p).unwrap_err();
        assert!(
            e.to_string().contains("j.jsonl:2: not a valid event"),
            "{e}"
        );
        // NULs followed by good events are no tear either.
        std::fs::write(&p, b"{\"n\":1}\n\0\0\0\n{\"n\":3}\n").unwrap();
        let e = read::<Ev>(&p).unwrap_err();
        assert!(e.to_string().contains("j.jsonl:2: "), "{e}");
        // …and opening it for appending cuts nothing.
        let before = std::fs::read(&p).unwrap();
        assert!(Journal::open(&p).is_ok());
        assert_eq!(std::fs::read(&p).unwrap(), before);
    }

    #[test]
    fn a_cut_line_closed_by_an_earlier_writer_is_skipped() {
        let r: ReadBack<Ev> = parse(Path::new("j"), b"{\"n\":1}\n{\"n\":\n{\"n\":3}\n").unwrap();
        assert_eq!(r.events, vec![Ev { n: 1 }, Ev { n: 3 }]);
        assert_eq!(r.skipped_lines, vec![2]);
        assert!(r.torn.is_none());
    }
}
