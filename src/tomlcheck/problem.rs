//! Validation problems: where (a key path) and what, in plain words; a collector for the
//! common checks, and the "did you mean" suggestion for misspelt names.

use super::keypath::KeyPath;

/// A validation problem: where (key path) and what, in plain words.
#[derive(Debug, Clone, PartialEq)]
pub struct Problem {
    pub path: KeyPath,
    pub message: String,
}

impl Problem {
    /// A problem at a key path written like `film.layers[0].material`.
    pub fn at(path: &str, message: impl Into<String>) -> Problem {
        Problem {
            path: KeyPath::parse(path),
            message: message.into(),
        }
    }
}

/// Collects problems with less ceremony.
#[derive(Default)]
pub struct Problems(pub Vec<Problem>);

impl Problems {
    /// Adds a problem unless `value` is finite and inside `[lo, hi]`.
    pub fn range(&mut self, path: &str, value: f64, lo: f64, hi: f64, unit: &str) {
        if !(value >= lo && value <= hi) {
            self.at(
                path,
                format!("{} {unit} is outside [{lo}, {hi}] {unit}", num(value)),
            );
        }
    }

    /// Adds a problem at a key path written like `film.layers[0].material`.
    pub fn at(&mut self, path: &str, message: impl Into<String>) {
        self.0.push(Problem::at(path, message));
    }
}

/// A number as people write it: plain for ordinary sizes, `1e308` for huge or tiny ones
/// (Rust's `{}` would print all 309 digits).
pub fn num(v: f64) -> String {
    let a = v.abs();
    if a != 0.0 && a.is_finite() && !(1e-4..1e9).contains(&a) {
        format!("{v:e}")
    } else {
        format!("{v}")
    }
}

/// The known name closest to `name` by edit distance, if it is close enough to be a typo.
pub fn nearest<'a, S: AsRef<str>>(name: &str, known: &'a [S]) -> Option<&'a str> {
    let name = name.to_lowercase();
    known
        .iter()
        .map(|k| (edit_distance(&name, &k.as_ref().to_lowercase()), k.as_ref()))
        .filter(|(d, k)| *d <= (k.len().max(name.len()) / 2).max(1))
        .min_by_key(|(d, _)| *d)
        .map(|(_, k)| k)
}

/// Levenshtein distance over chars.
fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut cur = vec![i + 1; b.len() + 1];
        for (j, cb) in b.iter().enumerate() {
            cur[j + 1] = (prev[j] + usize::from(ca != *cb))
                .min(prev[j + 1] + 1)
                .min(cur[j] + 1);
        }
        prev = cur;
    }
    prev[b.len()]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_read_as_written() {
        assert_eq!(num(150.0), "150");
        assert_eq!(num(-1e308), "-1e308");
        assert_eq!(num(2.5e-7), "2.5e-7");
    }

    #[test]
    fn suggests_close_names_only() {
        let known = ["air", "si", "sio2", "si3n4", "resist"];
        assert_eq!(nearest("si02", &known), Some("sio2"));
        assert_eq!(nearest("SiN4", &known), Some("si3n4"));
        assert_eq!(nearest("unobtainium", &known), None);
        assert_eq!(
            nearest("diamter", &["diameter_mm", "edge_exclusion_mm"]),
            Some("diameter_mm")
        );
    }
}
