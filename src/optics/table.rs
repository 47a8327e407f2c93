//! Tabulated optical constants n(λ), k(λ): parsing (user CSV, refractiveindex.info tables)
//! and interpolation by natural cubic splines of n and of k separately (k held ≥ 0).

use super::spline::NaturalSpline;
use super::OpticsError;
use std::path::{Path, PathBuf};

/// An n,k table with its interpolating splines.
#[derive(Debug, Clone, PartialEq)]
pub struct NkTable {
    n: NaturalSpline,
    k: NaturalSpline,
}

impl NkTable {
    /// Builds a table from rows `(wavelength_nm, n, k)`; `source` names the file in errors and
    /// `lines` gives each row's line number in it.
    pub fn from_rows(
        rows: &[(f64, f64, f64)],
        lines: &[usize],
        source: &Path,
    ) -> Result<NkTable, OpticsError> {
        let bad = |line: usize, message: String| OpticsError::Table {
            file: source.to_path_buf(),
            line,
            message,
        };
        if rows.len() < 2 {
            return Err(bad(
                lines.last().copied().unwrap_or(1),
                format!("an n,k table needs at least 2 rows, found {}", rows.len()),
            ));
        }
        for (i, (w, n, k)) in rows.iter().enumerate() {
            let line = lines[i];
            if !(w.is_finite() && *w > 0.0) {
                return Err(bad(
                    line,
                    format!("wavelength {w} nm must be a positive number"),
                ));
            }
            if !(n.is_finite() && *n > 0.0) {
                return Err(bad(line, format!("n = {n} must be a positive number")));
            }
            if !(k.is_finite() && *k >= 0.0) {
                return Err(bad(
                    line,
                    format!("k = {k} must be zero or more (N = n + ik, k > 0 absorbs)"),
                ));
            }
            if i > 0 && *w <= rows[i - 1].0 {
                return Err(bad(
                    line,
                    format!(
                        "wavelength {w} nm does not increase (previous row {} nm): sort the table and remove duplicates",
                        rows[i - 1].0
                    ),
                ));
            }
        }
        let w: Vec<f64> = rows.iter().map(|r| r.0).collect();
        Ok(NkTable {
            n: NaturalSpline::new(w.clone(), rows.iter().map(|r| r.1).collect()),
            k: NaturalSpline::new(w, rows.iter().map(|r| r.2).collect()),
        })
    }

    /// Parses a user table: CSV with header `wavelength_nm,n,k` (`#` comment lines allowed).
    pub fn parse_csv(text: &str, source: &Path) -> Result<NkTable, OpticsError> {
        let bad = |line: usize, message: String| OpticsError::Table {
            file: source.to_path_buf(),
            line,
            message,
        };
        let mut header_seen = false;
        let mut rows = Vec::new();
        let mut lines = Vec::new();
        for (line, t, cells) in csv_records(text) {
            if !header_seen {
                let names: Vec<String> = cells.iter().map(|c| c.to_lowercase()).collect();
                if names != ["wavelength_nm", "n", "k"] {
                    return Err(bad(
                        line,
                        format!("header is \"{t}\"; an n,k table starts with the header wavelength_nm,n,k"),
                    ));
                }
                header_seen = true;
                continue;
            }
            if cells.len() != 3 {
                return Err(bad(
                    line,
                    format!("{} fields; each row is wavelength_nm,n,k", cells.len()),
                ));
            }
            let mut v = [0.0; 3];
            for (j, c) in cells.iter().enumerate() {
                v[j] = c.parse().map_err(|_| {
                    bad(line, format!("\"{c}\" in column {} is not a number", j + 1))
                })?;
            }
            rows.push((v[0], v[1], v[2]));
            lines.push(line);
        }
        if !header_seen {
            return Err(bad(
                1,
                "the file is empty: expected the header wavelength_nm,n,k".into(),
            ));
        }
        NkTable::from_rows(&rows, &lines, source)
    }

    /// Reads and parses a user table file.
    pub fn read_csv(path: &Path) -> Result<NkTable, OpticsError> {
        let text = std::fs::read_to_string(path).map_err(|source| OpticsError::Io {
            path: path.to_path_buf(),
            source,
        })?;
        NkTable::parse_csv(&text, path)
    }

    /// First and last tabulated wavelength, nm.
    pub fn range_nm(&self) -> (f64, f64) {
        self.n.domain()
    }

    /// Interpolated (n, k) at `wavelength_nm`; end values are held outside the table.
    pub fn nk(&self, wavelength_nm: f64) -> (f64, f64) {
        (
            self.n.eval(wavelength_nm),
            self.k.eval(wavelength_nm).max(0.0),
        )
    }
}

/// The records of a small CSV text as `(line number, trimmed line, trimmed cells)`, skipping
/// blank and `#` comment lines and a leading byte-order mark (the rules every isopach CSV
/// input follows).
pub fn csv_records(text: &str) -> impl Iterator<Item = (usize, &str, Vec<&str>)> {
    text.lines()
        .enumerate()
        .filter_map(|(i, raw)| csv_record(raw).map(|(t, cells)| (i + 1, t, cells)))
}

/// One line of CSV text under the rules of [`csv_records`]: `None` for a blank or comment
/// line, else the trimmed line and its trimmed cells (for readers that stream line by line).
pub fn csv_record(raw: &str) -> Option<(&str, Vec<&str>)> {
    csv_content(raw).map(|t| (t, t.split(',').map(str::trim).collect()))
}

/// The trimmed line under the rules of [`csv_records`], `None` for a blank or comment line
/// (for readers that split the cells themselves).
pub fn csv_content(raw: &str) -> Option<&str> {
    let t = trim(raw);
    // The byte-order mark (EF BB BF) is looked for only where a line starts with its byte.
    let t = if t.as_bytes().first() == Some(&0xEF) {
        t.trim_start_matches('\u{feff}')
    } else {
        t
    };
    (!t.is_empty() && t.as_bytes()[0] != b'#').then_some(t)
}

/// `str::trim`, with the common case (printable ASCII at both ends: nothing to trim)
/// decided from two bytes.
pub fn trim(s: &str) -> &str {
    let b = s.as_bytes();
    match (b.first(), b.last()) {
        (Some(f), Some(l)) if f.is_ascii_graphic() && l.is_ascii_graphic() => s,
        _ => s.trim(),
    }
}

/// Rows of a refractiveindex.info `tabulated nk` block (wavelength in µm) as nm rows, with
/// the line number of each row.
pub fn parse_rii_tabulated(text: &str) -> (Vec<(f64, f64, f64)>, Vec<usize>) {
    let mut rows = Vec::new();
    let mut lines = Vec::new();
    let mut in_data = false;
    for (i, raw) in text.lines().enumerate() {
        let t = raw.trim();
        if t.starts_with("data:") {
            in_data = true;
            continue;
        }
        if in_data {
            let v: Vec<f64> = t
                .split_whitespace()
                .filter_map(|c| c.parse().ok())
                .collect();
            if v.len() == 3 {
                rows.push((v[0] * 1000.0, v[1], v[2]));
                lines.push(i + 1);
            } else {
                in_data = false;
            }
        }
    }
    (rows, lines)
}

/// A path for messages about tables that are compiled into the binary.
pub fn builtin_path(file: &str) -> PathBuf {
    PathBuf::from(format!("data/optical/{file}"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_a_user_table_and_interpolates() {
        let text = "# my film\nwavelength_nm,n,k\n400,1.50,0.01\n500,1.48,0.0\n600,1.47,0\n";
        let t = NkTable::parse_csv(text, Path::new("f.csv")).unwrap();
        assert_eq!(t.range_nm(), (400.0, 600.0));
        let (n, k) = t.nk(500.0);
        assert!((n - 1.48).abs() < 1e-12 && k.abs() < 1e-12);
        // held at the end value outside the table
        assert_eq!(t.nk(300.0), (1.50, 0.01));
    }

    #[test]
    fn errors_name_the_line() {
        let text = "wavelength_nm,n,k\n400,1.5,0\n400,1.5,0\n";
        let e = NkTable::parse_csv(text, Path::new("f.csv"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("f.csv:3"), "{e}");
        let e = NkTable::parse_csv("wavelength_nm,n,k\n400,x,0\n500,1,0\n", Path::new("f.csv"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("f.csv:2") && e.contains("\"x\""), "{e}");
        let e = NkTable::parse_csv("lambda,n\n", Path::new("f.csv"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("header"), "{e}");
        let e = NkTable::parse_csv(
            "wavelength_nm,n,k\n400,1.5,-0.1\n500,1,0\n",
            Path::new("f.csv"),
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("k = -0.1"), "{e}");
    }
}
