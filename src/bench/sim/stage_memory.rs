//! Where the virtual stage was left. A powered controller keeps its position between host
//! connections; the virtual one lives only as long as one command, so `isopach stage` keeps
//! its position in a small file per bench and starts the next command's controller there.
//!
//! The files live in `$ISOPACH_SIM_STATE_DIR` if set, else `$XDG_RUNTIME_DIR/isopach`, else
//! `isopach-<user>` in the temporary folder: a runtime folder is emptied when the machine
//! restarts, as a board forgets its position when powered off. That is the bench session.

use super::controller::VirtualConfig;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// The kept position of one bench's virtual stage.
#[derive(Debug, Clone)]
pub struct StageMemory {
    file: PathBuf,
    /// Which bench: the machine file's canonical path, or `built-in`.
    bench: String,
}

#[derive(Debug, Serialize, Deserialize)]
struct Kept {
    /// Which bench: the machine file's path, or `built-in`.
    bench: String,
    /// Stage frame, mm.
    position_mm: [f64; 2],
}

impl StageMemory {
    /// The memory of the bench of machine file `machine` (canonical path), or of the built-in
    /// simulated bench when `None`.
    pub fn of(machine: Option<&Path>) -> StageMemory {
        let bench = bench_name(machine);
        // A hash of the bench's name keeps one file per bench without path characters.
        let key = super::name_hash(&bench);
        StageMemory {
            file: state_dir().join(format!("stage-{key:016x}.json")),
            bench,
        }
    }

    /// Where the memory is kept.
    pub fn file(&self) -> &Path {
        &self.file
    }

    /// Starts `cfg`'s controller where this bench's stage was left, if anything was kept and
    /// it is this bench's and lies within `cfg`'s travel (a changed machine file starts at
    /// home again).
    pub fn recall(&self, cfg: &mut VirtualConfig) -> Option<[f64; 2]> {
        let text = std::fs::read_to_string(&self.file).ok()?;
        let kept: Kept = serde_json::from_str(&text).ok()?;
        if kept.bench != self.bench {
            return None;
        }
        let [x, y] = kept.position_mm;
        let within = |v: f64, r: [f64; 2]| v.is_finite() && v >= r[0] && v <= r[1];
        if !(within(x, cfg.travel_x_mm) && within(y, cfg.travel_y_mm)) {
            return None;
        }
        cfg.start_mm = Some([x, y]);
        Some([x, y])
    }

    /// Keeps `position_mm` for the next command; `None` (position lost) forgets it, so the
    /// next controller powers up at home.
    pub fn keep(&self, position_mm: Option<[f64; 2]>) -> std::io::Result<()> {
        let Some(position_mm) = position_mm else {
            return match std::fs::remove_file(&self.file) {
                Err(e) if e.kind() != std::io::ErrorKind::NotFound => Err(e),
                _ => Ok(()),
            };
        };
        let kept = Kept {
            bench: self.bench.clone(),
            position_mm,
        };
        let dir = self.file.parent().unwrap_or(Path::new("."));
        std::fs::create_dir_all(dir)?;
        // Written beside and renamed, so a reader never sees half a file.
        let tmp = self
            .file
            .with_extension(format!("tmp-{}", std::process::id()));
        std::fs::write(
            &tmp,
            serde_json::to_vec(&kept).map_err(std::io::Error::other)?,
        )?;
        std::fs::rename(&tmp, &self.file)
    }
}

fn bench_name(machine: Option<&Path>) -> String {
    match machine {
        Some(p) => std::fs::canonicalize(p)
            .unwrap_or_else(|_| p.to_path_buf())
            .display()
            .to_string(),
        None => "built-in".to_string(),
    }
}

fn state_dir() -> PathBuf {
    if let Some(d) = std::env::var_os("ISOPACH_SIM_STATE_DIR") {
        return PathBuf::from(d);
    }
    if let Some(d) = std::env::var_os("XDG_RUNTIME_DIR") {
        return PathBuf::from(d).join("isopach");
    }
    let user = std::env::var("USER").unwrap_or_else(|_| "user".to_string());
    std::env::temp_dir().join(format!("isopach-{user}"))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bench::machine::builtin_simulated;

    fn memory_in(dir: &Path, name: &str) -> StageMemory {
        StageMemory {
            file: dir.join(name),
            bench: "built-in".into(),
        }
    }

    #[test]
    fn a_kept_position_starts_the_next_controller_there() {
        let dir = tempfile::tempdir().unwrap();
        let mem = memory_in(dir.path(), "a.json");
        let mut cfg = VirtualConfig::from_machine(&builtin_simulated());
        assert_eq!(mem.recall(&mut cfg), None, "nothing kept yet");
        assert_eq!(cfg.start_mm, None);
        mem.keep(Some([120.5, 80.25])).unwrap();
        assert_eq!(mem.recall(&mut cfg), Some([120.5, 80.25]));
        assert_eq!(cfg.start_mm, Some([120.5, 80.25]));
    }

    #[test]
    fn a_position_outside_the_travel_or_a_lost_one_is_not_recalled() {
        let dir = tempfile::tempdir().unwrap();
        let mem = memory_in(dir.path(), "b.json");
        let mut cfg = VirtualConfig::from_machine(&builtin_simulated());
        mem.keep(Some([cfg.travel_x_mm[1] + 1.0, 10.0])).unwrap();
        assert_eq!(mem.recall(&mut cfg), None);
        mem.keep(Some([10.0, 10.0])).unwrap();
        mem.keep(None).unwrap();
        assert!(!mem.file().exists());
        assert_eq!(mem.recall(&mut cfg), None);
        let other = StageMemory {
            bench: "/lab/other.toml".into(),
            ..mem.clone()
        };
        other.keep(Some([10.0, 10.0])).unwrap();
        assert_eq!(
            mem.recall(&mut cfg),
            None,
            "another bench's position is not ours"
        );
        std::fs::write(mem.file(), "{ not json").unwrap();
        assert_eq!(mem.recall(&mut cfg), None, "a damaged file is ignored");
    }

    #[test]
    fn each_bench_has_its_own_memory() {
        let a = StageMemory::of(None);
        let b = StageMemory::of(Some(Path::new("/tmp/bench-b.toml")));
        assert_ne!(a.file(), b.file());
        assert_eq!(a.file(), StageMemory::of(None).file());
    }
}
