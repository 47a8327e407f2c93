//! Checking TOML input files: key paths, problems in plain words, and their positions.
//!
//! Generic over the schema type, shared by recipes and machine files; it uses nothing else
//! of ours. [`parse_validated`] is the whole pass: syntax, then every unknown key, wrong
//! type and non-finite number ([`read`]), then the file's own rules on what could be read,
//! each problem as `FILE:LINE:COL: key.path: message`.

pub mod keypath;
pub mod locate;
pub mod problem;
pub mod read;
pub mod words;

pub use keypath::{KeyPath, Seg};
pub use locate::{join, line_col, locate, place, LineCol, Located};
pub use problem::{nearest, num, Problem, Problems};

use serde::de::DeserializeOwned;
use std::path::Path;

/// Parses TOML `text` into `T` and runs `validate` on what could be read; every problem
/// comes back at once with its position, sorted. A syntax error is one located problem.
pub fn parse_validated<T: DeserializeOwned>(
    text: &str,
    file: &Path,
    validate: impl Fn(&T) -> Vec<Problem>,
) -> Result<T, Vec<Located>> {
    let table: toml::Table = toml::from_str(text).map_err(|e| {
        let lc = line_col(text, e.span().map(|s| s.start).unwrap_or(0));
        vec![Located {
            file: file.into(),
            line: lc.line,
            col: lc.col,
            message: e.message().trim().to_string(),
        }]
    })?;
    let reading = read::read::<T>(table);
    let mut problems = reading.problems.clone();
    if let Some(value) = &reading.value {
        problems.extend(
            validate(value)
                .into_iter()
                .filter(|p| !reading.covers(&p.path)),
        );
    }
    let mut located: Vec<Located> = problems.iter().map(|p| place(text, file, p)).collect();
    located.sort_by_key(|p| (p.line, p.col));
    located.dedup();
    match reading.value {
        Some(value) if located.is_empty() => Ok(value),
        _ => Err(located),
    }
}
