//! The run folder layout (DESIGN.md §3) and its frozen `run.toml`.
//!
//! ```text
//! runs/<run-id>/run.toml       frozen recipe + machine + run metadata
//!               plan.json      the frozen plan: sites in measuring order, stage coordinates
//!               journal.jsonl  append-only events, the truth
//!               spectra/       raw spectra, one CSV per acquisition
//!               sites.csv, summary.json, map.svg, map.png   derived, rebuilt from the journal
//! ```

use crate::recipe::Recipe;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// Metadata of a run, written once at the start.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunMeta {
    pub id: String,
    pub wafer: String,
    #[serde(default)]
    pub lot: String,
    #[serde(default)]
    pub operator: String,
    /// Start time, RFC 3339.
    pub started: String,
    pub tool_version: String,
    /// Where the recipe was read from (for messages; the frozen copy below is what counts).
    #[serde(default)]
    pub recipe_path: String,
    /// Seed of the simulated bench's virtual wafer, so a resumed run sees the same wafer (by
    /// default from the wafer id: every run of one wafer measures the same film).
    #[serde(default)]
    pub seed: u64,
    /// Seed of this run's own draws on the simulated bench (noise, carriage scatter, where the
    /// wafer was placed); fresh per run unless given. Runs made before it existed drew them
    /// from `seed`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub run_seed: Option<u64>,
}

impl RunMeta {
    /// The seeds a session of this run opens the simulated bench with.
    pub fn sim_seeds(&self) -> crate::bench::SimSeeds {
        crate::bench::SimSeeds {
            wafer: self.seed,
            run: self.run_seed.unwrap_or(self.seed),
        }
    }
}

/// The whole `run.toml`: metadata, the recipe as it was, the machine file as it was.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunToml {
    pub run: RunMeta,
    pub recipe: Recipe,
    /// The machine file table, or absent for the built-in simulated bench.
    #[serde(default)]
    pub machine: Option<toml::Table>,
}

/// Paths inside a run folder.
#[derive(Debug, Clone)]
pub struct RunFolder {
    pub root: PathBuf,
}

impl RunFolder {
    /// A run folder at `root` (not checked).
    pub fn new(root: impl Into<PathBuf>) -> RunFolder {
        RunFolder { root: root.into() }
    }
    pub fn run_toml(&self) -> PathBuf {
        self.root.join("run.toml")
    }
    pub fn plan_json(&self) -> PathBuf {
        self.root.join("plan.json")
    }
    pub fn journal(&self) -> PathBuf {
        self.root.join("journal.jsonl")
    }
    pub fn spectra_dir(&self) -> PathBuf {
        self.root.join("spectra")
    }
    pub fn sites_csv(&self) -> PathBuf {
        self.root.join("sites.csv")
    }
    pub fn summary_json(&self) -> PathBuf {
        self.root.join("summary.json")
    }
    pub fn map_svg(&self) -> PathBuf {
        self.root.join("map.svg")
    }
    pub fn map_png(&self) -> PathBuf {
        self.root.join("map.png")
    }

    /// Reads `run.toml`.
    pub fn read_run_toml(&self) -> Result<RunToml, RunFolderError> {
        if !self.root.is_dir() {
            return Err(RunFolderError::Missing {
                path: self.root.clone(),
            });
        }
        self.refuse_links()?;
        read_run_toml(&self.run_toml())
    }

    /// Refuses a run folder in which a file or folder is a symbolic link (at the top, in
    /// `spectra/` or in `materials/`): appends and writes through a planted link would reach
    /// files outside the runs folder.
    pub fn refuse_links(&self) -> Result<(), RunFolderError> {
        for dir in [
            self.root.clone(),
            self.spectra_dir(),
            self.root.join(super::new_run::MATERIALS_DIR),
        ] {
            let Ok(entries) = std::fs::read_dir(&dir) else {
                continue;
            };
            for e in entries.filter_map(Result::ok) {
                if e.file_type().is_ok_and(|t| t.is_symlink()) {
                    return Err(RunFolderError::Link { path: e.path() });
                }
            }
        }
        Ok(())
    }

    /// Gets the run ready for a session (`resume`, `remeasure`, `refit`): refuses links,
    /// moves a torn journal tail aside, discards a refit a kill left unfinished and removes
    /// temp files a killed writer left. Returns a note for the operator on each thing done.
    pub fn prepare_session(&self) -> anyhow::Result<Vec<String>> {
        self.refuse_links()?;
        let mut notes = Vec::new();
        if let Some(torn) = super::journal::recover_tail(&self.journal())? {
            notes.push(torn.to_string());
        }
        notes.extend(super::refit::discard_unfinished(self)?);
        let mut removed = Vec::new();
        for dir in [self.root.clone(), self.spectra_dir()] {
            removed.extend(super::files::remove_leftover_temps(&dir));
        }
        if !removed.is_empty() {
            let names: Vec<String> = removed
                .iter()
                .filter_map(|p| p.strip_prefix(&self.root).ok())
                .map(|p| p.display().to_string())
                .collect();
            notes.push(format!(
                "removed {} unfinished temp file(s) a killed session left: {}",
                removed.len(),
                names.join(", ")
            ));
        }
        Ok(notes)
    }
}

/// Why a run folder cannot be read.
#[derive(Debug, thiserror::Error)]
pub enum RunFolderError {
    /// The folder does not exist.
    #[error("{}: no such run folder (give a folder that holds a run.toml, e.g. runs/20261202-090507-W07)", path.display())]
    Missing { path: PathBuf },
    /// The folder exists but holds no `run.toml`.
    #[error("{}: not a run folder (it has no run.toml)", path.display())]
    NotARun { path: PathBuf },
    /// `run.toml` does not parse.
    #[error("{} is not a valid run.toml: {source}", path.display())]
    Invalid {
        path: PathBuf,
        source: toml::de::Error,
    },
    /// A file or folder in the run folder is a symbolic link.
    #[error("{} is a symbolic link: isopach does not read or write run files through links (they could reach files outside the runs folder); replace it with the file itself or remove it", path.display())]
    Link { path: PathBuf },
    /// `run.toml` exists but cannot be read.
    #[error("cannot read {}: {source}", path.display())]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
}

/// Reads and parses a `run.toml` file, naming the file in errors.
pub fn read_run_toml(path: &Path) -> Result<RunToml, RunFolderError> {
    let text = std::fs::read_to_string(path).map_err(|source| {
        if source.kind() == std::io::ErrorKind::NotFound {
            RunFolderError::NotARun {
                path: path.parent().unwrap_or(path).into(),
            }
        } else {
            RunFolderError::Io {
                path: path.into(),
                source,
            }
        }
    })?;
    toml::from_str(&text).map_err(|source| RunFolderError::Invalid {
        path: path.into(),
        source,
    })
}
