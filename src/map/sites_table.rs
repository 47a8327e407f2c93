//! `sites.csv` (DESIGN.md §3, a contract): one row per site, read and written.
//!
//! Columns: `site,x_mm,y_mm,thickness_nm,sigma_nm,gof,flag`. The first fitted layer always
//! sits in `thickness_nm,sigma_nm`; a stack with several fitted layers adds
//! `thickness2_nm,sigma2_nm`, `thickness3_nm,sigma3_nm`, … after `flag`, layer k being the
//! k-th fitted layer of the recipe counted from the top. A missing value is an empty cell.
//! `flag` empty or `ok` marks a valid site; anything else (e.g. `low-signal`) excludes the
//! site from the statistics and the map. Columns are found by name, so a reader copes with
//! any order and ignores columns it does not know; `#` lines are comments.

use super::MapError;
use std::fmt::Write as _;
use std::path::Path;

/// The contract columns, in order.
pub const HEADER: [&str; 7] = [
    "site",
    "x_mm",
    "y_mm",
    "thickness_nm",
    "sigma_nm",
    "gof",
    "flag",
];

/// One site of a run: position, fitted thickness per layer, quality, flag.
#[derive(Debug, Clone, PartialEq)]
pub struct SiteRow {
    /// Site number from the recipe's pattern (1-based).
    pub site: usize,
    /// Wafer frame, mm from the centre, x right, y up.
    pub x_mm: f64,
    pub y_mm: f64,
    /// Thickness per fitted layer (top first), nm; NaN where there is no value.
    pub thickness_nm: Vec<f64>,
    /// 1σ uncertainty of each thickness, nm; NaN where unknown.
    pub sigma_nm: Vec<f64>,
    /// Goodness of fit, 0..1; NaN where unknown.
    pub gof: f64,
    /// Empty or `ok` for a valid site, otherwise why it is excluded.
    pub flag: String,
}

impl SiteRow {
    /// Whether the site's flag marks it valid (empty or `ok`).
    pub fn is_valid(&self) -> bool {
        let f = self.flag.trim();
        f.is_empty() || f.eq_ignore_ascii_case("ok")
    }

    /// The site's thickness of `layer` (0 = first fitted layer) if the site is valid and has
    /// a finite value there.
    pub fn valid_value(&self, layer: usize) -> Option<f64> {
        let v = *self.thickness_nm.get(layer)?;
        (self.is_valid() && v.is_finite()).then_some(v)
    }

    /// Distance from the wafer centre, mm.
    pub fn radius_mm(&self) -> f64 {
        self.x_mm.hypot(self.y_mm)
    }
}

/// Number of layer columns a table of these rows needs (at least one).
pub fn layer_count(rows: &[SiteRow]) -> usize {
    rows.iter()
        .map(|r| r.thickness_nm.len().max(r.sigma_nm.len()))
        .max()
        .unwrap_or(1)
        .max(1)
}

/// Formats a number with fixed decimals, NaN as an empty cell.
fn cell(v: f64, decimals: usize) -> String {
    if v.is_finite() {
        format!("{v:.decimals$}")
    } else {
        String::new()
    }
}

/// A flag as a CSV field: quoted when it holds a comma, quote or line break.
fn flag_field(flag: &str) -> String {
    if flag.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", flag.replace('"', "\"\""))
    } else {
        flag.to_string()
    }
}

/// Writes the rows as `sites.csv` text. Positions to 1 µm, thickness to 1 pm, sigma to
/// 0.1 pm, gof to 6 decimals: finer than any reflectometer resolves.
pub fn write(rows: &[SiteRow]) -> String {
    write_with_columns(rows, &[])
}

/// [`write`] with further numeric columns after the layers' (name, one value per row; NaN
/// an empty cell, 7 significant digits), such as fitted dispersion coefficients. Readers
/// find columns by name and pass over these.
pub fn write_with_columns(rows: &[SiteRow], columns: &[(String, Vec<f64>)]) -> String {
    let layers = layer_count(rows);
    let mut s = HEADER.join(",");
    for k in 2..=layers {
        let _ = write!(s, ",thickness{k}_nm,sigma{k}_nm");
    }
    for (name, _) in columns {
        let _ = write!(s, ",{name}");
    }
    s.push('\n');
    for (i, r) in rows.iter().enumerate() {
        let t = |k: usize| r.thickness_nm.get(k).copied().unwrap_or(f64::NAN);
        let sd = |k: usize| r.sigma_nm.get(k).copied().unwrap_or(f64::NAN);
        let _ = write!(
            s,
            "{},{},{},{},{},{},{}",
            r.site,
            cell(r.x_mm, 3),
            cell(r.y_mm, 3),
            cell(t(0), 3),
            cell(sd(0), 4),
            cell(r.gof, 6),
            flag_field(r.flag.trim())
        );
        for k in 1..layers {
            let _ = write!(s, ",{},{}", cell(t(k), 3), cell(sd(k), 4));
        }
        for (_, values) in columns {
            let v = values.get(i).copied().unwrap_or(f64::NAN);
            let _ = write!(
                s,
                ",{}",
                if v.is_finite() {
                    format!("{v:.7e}")
                } else {
                    String::new()
                }
            );
        }
        s.push('\n');
    }
    s
}

/// Where each known column sits in the file.
struct Columns {
    site: usize,
    x: usize,
    y: usize,
    gof: Option<usize>,
    flag: Option<usize>,
    /// (thickness, sigma) column per layer, layer 1 first.
    layers: Vec<(usize, Option<usize>)>,
}

impl Columns {
    fn find(header: &csv::StringRecord, path: &Path) -> Result<Columns, MapError> {
        let pos = |name: &str| header.iter().position(|h| h.trim() == name);
        let need = |name: &str| {
            pos(name).ok_or_else(|| MapError::SitesTable {
                path: path.into(),
                line: 1,
                message: format!(
                    "the header has no `{name}` column; expected {}",
                    HEADER.join(",")
                ),
            })
        };
        let mut layers = vec![(need("thickness_nm")?, pos("sigma_nm"))];
        for k in 2.. {
            match pos(&format!("thickness{k}_nm")) {
                Some(t) => layers.push((t, pos(&format!("sigma{k}_nm")))),
                None => break,
            }
        }
        Ok(Columns {
            site: need("site")?,
            x: need("x_mm")?,
            y: need("y_mm")?,
            gof: pos("gof"),
            flag: pos("flag"),
            layers,
        })
    }
}

/// Parses `sites.csv` text; `path` is named in error messages.
pub fn read(text: &str, path: &Path) -> Result<Vec<SiteRow>, MapError> {
    let mut reader = csv::ReaderBuilder::new()
        .comment(Some(b'#'))
        .trim(csv::Trim::All)
        .flexible(true)
        .from_reader(text.as_bytes());
    let bad = |line: u64, message: String| MapError::SitesTable {
        path: path.into(),
        line,
        message,
    };
    let header = reader
        .headers()
        .map_err(|e| bad(1, format!("cannot read the header: {e}")))?
        .clone();
    let cols = Columns::find(&header, path)?;
    let mut rows = Vec::new();
    for record in reader.records() {
        let record = record.map_err(|e| {
            let line = e.position().map(|p| p.line()).unwrap_or(0);
            bad(line, e.to_string())
        })?;
        let line = record.position().map(|p| p.line()).unwrap_or(0);
        let field = |i: usize| record.get(i).unwrap_or("");
        let number = |i: usize, required: bool| -> Result<f64, MapError> {
            let s = field(i);
            if s.is_empty() && !required {
                return Ok(f64::NAN);
            }
            s.parse::<f64>().map_err(|_| {
                bad(
                    line,
                    format!(
                        "column `{}`: {s:?} is not a number{}",
                        &header[i],
                        if required { " (required)" } else { "" }
                    ),
                )
            })
        };
        let site = field(cols.site).parse::<usize>().map_err(|_| {
            bad(
                line,
                format!(
                    "column `site`: {:?} is not a site number (1, 2, …)",
                    field(cols.site)
                ),
            )
        })?;
        let mut thickness_nm = Vec::with_capacity(cols.layers.len());
        let mut sigma_nm = Vec::with_capacity(cols.layers.len());
        for &(t, sd) in &cols.layers {
            thickness_nm.push(number(t, false)?);
            sigma_nm.push(match sd {
                Some(i) => number(i, false)?,
                None => f64::NAN,
            });
        }
        rows.push(SiteRow {
            site,
            x_mm: number(cols.x, true)?,
            y_mm: number(cols.y, true)?,
            thickness_nm,
            sigma_nm,
            gof: match cols.gof {
                Some(i) => number(i, false)?,
                None => f64::NAN,
            },
            flag: cols.flag.map(field).unwrap_or("").to_string(),
        });
    }
    Ok(rows)
}

/// Reads a `sites.csv` file.
pub fn read_file(path: &Path) -> Result<Vec<SiteRow>, MapError> {
    let text = std::fs::read_to_string(path).map_err(|e| MapError::io("read", path, e))?;
    read(&text, path)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(site: usize, t: &[f64], flag: &str) -> SiteRow {
        SiteRow {
            site,
            x_mm: site as f64 * 1.5,
            y_mm: -(site as f64),
            thickness_nm: t.to_vec(),
            sigma_nm: t.iter().map(|v| v / 1000.0).collect(),
            gof: 0.99,
            flag: flag.into(),
        }
    }

    #[test]
    fn single_layer_header_is_the_contract() {
        let text = write(&[row(1, &[1000.0], "")]);
        assert_eq!(
            text.lines().next().unwrap(),
            "site,x_mm,y_mm,thickness_nm,sigma_nm,gof,flag"
        );
        assert_eq!(
            text.lines().nth(1).unwrap(),
            "1,1.500,-1.000,1000.000,1.0000,0.990000,"
        );
    }

    #[test]
    fn round_trip_keeps_layers_flags_and_missing_values() {
        let mut rows = vec![
            row(1, &[150.25, 501.5], "ok"),
            row(2, &[f64::NAN, 499.0], "low-signal"),
            row(3, &[149.75, 500.0], "poor fit, retried"),
        ];
        rows[1].gof = f64::NAN;
        let text = write(&rows);
        assert!(text.starts_with(
            "site,x_mm,y_mm,thickness_nm,sigma_nm,gof,flag,thickness2_nm,sigma2_nm\n"
        ));
        let back = read(&text, Path::new("sites.csv")).unwrap();
        assert_eq!(back.len(), 3);
        assert_eq!(back[0].thickness_nm, vec![150.25, 501.5]);
        assert!(back[1].thickness_nm[0].is_nan() && back[1].gof.is_nan());
        assert_eq!(back[2].flag, "poor fit, retried");
        assert!(back[0].is_valid() && !back[1].is_valid() && !back[2].is_valid());
        assert_eq!(back[1].valid_value(1), None);
        assert_eq!(back[0].valid_value(1), Some(501.5));
    }

    #[test]
    fn columns_are_found_by_name_and_comments_skipped() {
        let text = "# made by hand\nflag,site,y_mm,x_mm,thickness_nm\n,4,2,1,12.5\n";
        let rows = read(text, Path::new("x.csv")).unwrap();
        assert_eq!(rows[0].site, 4);
        assert_eq!((rows[0].x_mm, rows[0].y_mm), (1.0, 2.0));
        assert!(rows[0].sigma_nm[0].is_nan());
    }

    #[test]
    fn errors_name_file_line_and_column() {
        let text = "site,x_mm,y_mm,thickness_nm,sigma_nm,gof,flag\n1,0,0,1000,0.1,0.99,\n2,abc,0,1000,0.1,0.99,\n";
        let e = read(text, Path::new("runs/r1/sites.csv"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("runs/r1/sites.csv:3"), "{e}");
        assert!(e.contains("x_mm") && e.contains("\"abc\""), "{e}");
        let e = read("site,x_mm,thickness_nm\n", Path::new("s.csv"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("`y_mm`"), "{e}");
    }
}
