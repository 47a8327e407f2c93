//! Tables as CSV for spreadsheets (`compare --csv`, `trend --csv`): a header row, then one row
//! per record; a figure that does not exist is an empty cell, never NaN; text with a comma,
//! quote or line break is quoted (RFC 4180).

/// One CSV table being built.
pub struct CsvTable {
    text: String,
}

/// A cell of a CSV row.
pub enum Cell<'a> {
    Text(&'a str),
    Number(f64),
    Count(usize),
}

impl CsvTable {
    /// A table with these column names.
    pub fn new(columns: &[&str]) -> CsvTable {
        let mut t = CsvTable {
            text: String::new(),
        };
        t.row(columns.iter().map(|c| Cell::Text(c)));
        t
    }

    /// Appends one row.
    pub fn row<'a>(&mut self, cells: impl IntoIterator<Item = Cell<'a>>) {
        let cells: Vec<String> = cells.into_iter().map(|c| c.text()).collect();
        self.text.push_str(&cells.join(","));
        self.text.push('\n');
    }

    /// The whole table.
    pub fn text(&self) -> &str {
        &self.text
    }
}

impl Cell<'_> {
    fn text(&self) -> String {
        match self {
            Cell::Number(v) if v.is_finite() => format!("{v}"),
            Cell::Number(_) => String::new(),
            Cell::Count(n) => n.to_string(),
            Cell::Text(s) if s.contains([',', '"', '\n', '\r']) => {
                format!("\"{}\"", s.replace('"', "\"\""))
            }
            Cell::Text(s) => s.to_string(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn missing_figures_are_empty_and_text_is_quoted_as_rfc_4180_says() {
        let mut t = CsvTable::new(&["wafer", "mean_nm", "n"]);
        t.row([
            Cell::Text("W,1 \"a\""),
            Cell::Number(f64::NAN),
            Cell::Count(3),
        ]);
        t.row([Cell::Text("W2"), Cell::Number(1001.25), Cell::Count(0)]);
        assert_eq!(
            t.text(),
            "wafer,mean_nm,n\n\"W,1 \"\"a\"\"\",,3\nW2,1001.25,0\n"
        );
    }
}
