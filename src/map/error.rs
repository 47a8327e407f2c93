//! Errors of the map module: what went wrong, where, and how to fix it.

use std::path::PathBuf;

/// Why a site table, summary or map could not be read, made or written.
#[derive(Debug, thiserror::Error)]
pub enum MapError {
    /// A `sites.csv` line could not be understood.
    #[error("{}:{line}: {message}", path.display())]
    SitesTable {
        path: PathBuf,
        /// 1-based line in the file (1 = header).
        line: u64,
        message: String,
    },
    /// A file could not be read or written.
    #[error("cannot {action} {}: {source}", path.display())]
    Io {
        action: &'static str,
        path: PathBuf,
        source: std::io::Error,
    },
    /// `summary.json` could not be parsed or produced.
    #[error("{}: {source}", path.display())]
    Json {
        path: PathBuf,
        source: serde_json::Error,
    },
    /// The PNG image could not be drawn or encoded.
    #[error("cannot draw the PNG map: {0}")]
    Png(String),
    /// The PDF page could not be made.
    #[error("cannot make the PDF page: {0}")]
    Pdf(String),
}

impl MapError {
    /// An I/O error with the path and what was being done.
    pub fn io(action: &'static str, path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        MapError::Io {
            action,
            path: path.into(),
            source,
        }
    }
}
