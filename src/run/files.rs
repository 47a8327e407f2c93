//! File helpers for run folders: atomic writes (temp file, sync, rename), opening without
//! following symbolic links, and clearing the temp files a killed writer left behind.

use std::fs::{File, OpenOptions};
use std::io::Write;
use std::path::{Path, PathBuf};

/// The temp file [`write_atomic`] writes `name` through: `.NAME.tmpPID`.
fn temp_name(name: &str) -> String {
    format!(".{name}.tmp{}", std::process::id())
}

/// Whether a file name has the shape of a [`write_atomic`] temp file (`.NAME.tmpPID`), and
/// the PID that wrote it.
pub fn temp_writer(name: &str) -> Option<u32> {
    let rest = name.strip_prefix('.')?;
    let (stem, pid) = rest.rsplit_once(".tmp")?;
    if stem.is_empty() || pid.is_empty() || !pid.bytes().all(|b| b.is_ascii_digit()) {
        return None;
    }
    pid.parse().ok()
}

/// Writes `bytes` to `path` through a temporary file in the same folder, synced and renamed,
/// so a reader never sees a half-written file. The temp file is created fresh (a link planted
/// under its name is removed, never followed), and the rename replaces a link at `path`
/// rather than writing through it.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    write_through_temp(path, bytes, true)
}

/// [`write_atomic`] without the sync: readers see the whole file at once, and the caller
/// syncs it later (a crash before that may leave an empty or missing file, never a torn one
/// under the name of a complete one that was synced).
pub fn write_atomic_unsynced(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    write_through_temp(path, bytes, false)
}

fn write_through_temp(path: &Path, bytes: &[u8], sync: bool) -> std::io::Result<()> {
    let dir = path
        .parent()
        .filter(|d| !d.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = path.file_name().and_then(|n| n.to_str()).unwrap_or("out");
    let tmp = dir.join(temp_name(name));
    let _ = std::fs::remove_file(&tmp);
    {
        let mut f = OpenOptions::new().write(true).create_new(true).open(&tmp)?;
        f.write_all(bytes)?;
        if sync {
            f.sync_all()?;
        }
    }
    std::fs::rename(&tmp, path).inspect_err(|_| {
        let _ = std::fs::remove_file(&tmp);
    })
}

/// Opens `path` with `options`, refusing (error `ELOOP` on Unix) when it is a symbolic link,
/// so a link planted in a run folder cannot send our writes elsewhere.
pub fn open_no_follow(options: &mut OpenOptions, path: &Path) -> std::io::Result<File> {
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        options.custom_flags(libc::O_NOFOLLOW);
    }
    options.open(path)
}

/// Syncs a folder's entry list (after a rename into it), so the new name survives a power
/// loss. Best effort: some file systems refuse to open folders for syncing.
pub fn sync_dir(dir: &Path) {
    if let Ok(d) = File::open(dir) {
        let _ = d.sync_all();
    }
}

/// Removes the [`write_atomic`] temp files a killed writer left in `dir` (only regular files
/// named `.NAME.tmpPID` whose writer is no longer running); returns what was removed.
pub fn remove_leftover_temps(dir: &Path) -> Vec<PathBuf> {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return Vec::new();
    };
    entries
        .filter_map(Result::ok)
        .filter(|e| e.file_type().is_ok_and(|t| t.is_file()))
        .filter(|e| {
            e.file_name()
                .to_str()
                .and_then(temp_writer)
                .is_some_and(|pid| !is_running(pid))
        })
        .map(|e| e.path())
        .filter(|p| std::fs::remove_file(p).is_ok())
        .collect()
}

/// Whether a process with this id runs now (our own counts; where we cannot tell, no).
fn is_running(pid: u32) -> bool {
    pid == std::process::id() || Path::new("/proc").join(pid.to_string()).exists()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn temp_names_are_recognised_and_nothing_else() {
        assert_eq!(temp_writer(".site-0003-a1.csv.tmp4242"), Some(4242));
        assert_eq!(
            temp_writer(&temp_name("sites.csv")),
            Some(std::process::id())
        );
        for name in [
            "site-0003-a1.csv.tmp4242",
            ".tmp4242",
            ".sites.csv.tmp",
            ".sites.csv.tmp12x",
            ".sites.csv",
            "journal.torn-20261202",
        ] {
            assert_eq!(temp_writer(name), None, "{name}");
        }
    }

    #[test]
    fn leftover_temps_of_dead_writers_go_and_nothing_else() {
        let dir = tempfile::tempdir().unwrap();
        // PID 4194304 is above Linux's pid_max ceiling (2^22): no process has it.
        let dead = dir.path().join(".site-0001-a1.csv.tmp4194304");
        let ours = dir.path().join(temp_name("sites.csv"));
        let data = dir.path().join("site-0001-a1.csv");
        let lookalike = dir.path().join(".notes.tmpfile");
        for p in [&dead, &ours, &data, &lookalike] {
            std::fs::write(p, "x").unwrap();
        }
        assert_eq!(remove_leftover_temps(dir.path()), vec![dead.clone()]);
        assert!(!dead.exists() && ours.exists() && data.exists() && lookalike.exists());
    }

    #[cfg(unix)]
    #[test]
    fn links_are_not_followed() {
        let dir = tempfile::tempdir().unwrap();
        let outside = dir.path().join("outside.txt");
        std::fs::write(&outside, "keep").unwrap();
        let link = dir.path().join("log.txt");
        std::os::unix::fs::symlink(&outside, &link).unwrap();
        assert!(open_no_follow(OpenOptions::new().append(true), &link).is_err());
        // An atomic write replaces the link itself.
        write_atomic(&link, b"new").unwrap();
        assert_eq!(std::fs::read_to_string(&outside).unwrap(), "keep");
        assert_eq!(std::fs::read_to_string(&link).unwrap(), "new");
        assert!(!std::fs::symlink_metadata(&link).unwrap().is_symlink());
    }
}
