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
    /// Seed of the simulated bench (noise, virtual wafer), so a resumed run sees the same wafer.
    #[serde(default)]
    pub seed: u64,
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
    pub fn read_run_toml(&self) -> anyhow::Result<RunToml> {
        read_run_toml(&self.run_toml())
    }
}

/// Reads and parses a `run.toml` file, naming the file in errors.
pub fn read_run_toml(path: &Path) -> anyhow::Result<RunToml> {
    use anyhow::Context;
    let text =
        std::fs::read_to_string(path).with_context(|| format!("cannot read {}", path.display()))?;
    toml::from_str(&text).with_context(|| format!("{} is not a valid run.toml", path.display()))
}
