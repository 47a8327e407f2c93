//! Run ids and the names that go into them: safe for file names, readable, sortable by time.

/// Why a wafer id or lot cannot be used.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum NameError {
    #[error("{what} is empty")]
    Empty { what: &'static str },
    #[error("{what} {value:?} contains {why}; use letters, digits, '-', '_' or '.'")]
    Unsafe {
        what: &'static str,
        value: String,
        why: &'static str,
    },
}

/// Checks a wafer id, lot or operator name: no path separators, no `..`, no control characters.
pub fn check_name(what: &'static str, value: &str) -> Result<(), NameError> {
    let bad = |why| {
        Err(NameError::Unsafe {
            what,
            value: value.to_string(),
            why,
        })
    };
    if value.trim().is_empty() {
        return Err(NameError::Empty { what });
    }
    if value.contains('/') || value.contains('\\') {
        return bad("a path separator");
    }
    if value.contains("..") {
        return bad("'..'");
    }
    if value.chars().any(char::is_control) {
        return bad("a control character");
    }
    Ok(())
}

/// A run id from the start time and the wafer id: `YYYYMMDD-HHMMSS-<wafer>`, with any character
/// other than letters, digits, `-`, `_` and `.` replaced by `_`.
pub fn run_id(time: chrono::DateTime<chrono::Local>, wafer: &str) -> String {
    let safe: String = wafer
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || "-_.".contains(c) {
                c
            } else {
                '_'
            }
        })
        .collect();
    format!("{}-{safe}", time.format("%Y%m%d-%H%M%S"))
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::TimeZone;

    #[test]
    fn rejects_paths_dots_and_control_characters() {
        assert!(check_name("wafer id", "W-07_a.1").is_ok());
        for bad in ["../x", "a/b", "a\\b", "x..y", "a\nb", "\u{7}", " "] {
            assert!(check_name("wafer id", bad).is_err(), "{bad:?}");
        }
    }

    #[test]
    fn run_ids_are_file_safe() {
        let t = chrono::Local
            .with_ymd_and_hms(2026, 12, 2, 9, 5, 7)
            .unwrap();
        assert_eq!(run_id(t, "W 07#é"), "20261202-090507-W_07__");
    }
}
