//! Turns key paths and byte offsets into file positions (line and column, 1-based).

use super::keypath::{KeyPath, Seg};
use super::problem::Problem;
use std::fmt;
use std::path::{Path, PathBuf};
use toml::de::{DeTable, DeValue};

/// A problem located in a file: `FILE:LINE:COL: message`.
#[derive(Debug, Clone, PartialEq)]
pub struct Located {
    pub file: PathBuf,
    pub line: usize,
    pub col: usize,
    pub message: String,
}

impl fmt::Display for Located {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{}:{}:{}: {}",
            self.file.display(),
            self.line,
            self.col,
            self.message
        )
    }
}

/// Located problems, one per line.
pub fn join(problems: &[Located]) -> String {
    problems
        .iter()
        .map(|p| p.to_string())
        .collect::<Vec<_>>()
        .join("\n")
}

/// A validation problem placed in `text` (read from `file`), its key path in the message.
pub fn place(text: &str, file: &Path, problem: &Problem) -> Located {
    let lc = locate(text, &problem.path).unwrap_or(LineCol { line: 1, col: 1 });
    Located {
        file: file.into(),
        line: lc.line,
        col: lc.col,
        message: if problem.path.0.is_empty() {
            problem.message.clone()
        } else {
            format!("{}: {}", problem.path, problem.message)
        },
    }
}

/// A 1-based line and column in a text.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct LineCol {
    pub line: usize,
    pub col: usize,
}

/// Line and column of a byte offset (column counted in characters).
pub fn line_col(text: &str, offset: usize) -> LineCol {
    let offset = offset.min(text.len());
    let before = &text[..text.floor_char_boundary(offset)];
    let line = before.matches('\n').count() + 1;
    let line_start = before.rfind('\n').map(|i| i + 1).unwrap_or(0);
    LineCol {
        line,
        col: before[line_start..].chars().count() + 1,
    }
}

/// Position of the value at `path` in a TOML document: the deepest part of the path that
/// exists (a missing key points at its table). `None` if the text does not parse.
pub fn locate(text: &str, path: &KeyPath) -> Option<LineCol> {
    let root = DeTable::parse(text).ok()?;
    let mut span = root.span();
    let mut value: Option<&DeValue> = None;
    let mut table: Option<&DeTable> = Some(root.get_ref());
    for seg in &path.0 {
        let next = match (seg, table, value) {
            (Seg::Key(k), Some(t), _) => t.get(k.as_str()),
            (Seg::Index(i), _, Some(DeValue::Array(a))) => a.get(*i),
            _ => None,
        };
        let Some(next) = next else { break };
        span = next.span();
        value = Some(next.get_ref());
        table = next.get_ref().as_table();
    }
    // A table's own span can start at its header or at its first key; both are useful.
    Some(line_col(text, span.start))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_nested_array_values() {
        let text =
            "name = \"x\"\n[film]\nlayers = [ { material = \"a\" },\n  { material = \"b\" } ]\n";
        let at = locate(text, &KeyPath::parse("film.layers[1].material")).unwrap();
        assert_eq!(at, LineCol { line: 4, col: 16 });
        let missing = locate(text, &KeyPath::parse("film.wavelength_nm")).unwrap();
        assert_eq!(missing.line, 2);
    }
}
