//! Key paths into a TOML document, such as `film.layers[0].material`.

use std::fmt;

/// One step of a key path: a table key or an array index.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Seg {
    Key(String),
    Index(usize),
}

/// A key path such as `film.layers[0].material`.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct KeyPath(pub Vec<Seg>);

impl KeyPath {
    /// Parses `a.b[2].c` (keys holding dots are not expected in our files).
    pub fn parse(s: &str) -> KeyPath {
        let mut segs = Vec::new();
        for part in s.split('.').filter(|p| !p.is_empty()) {
            let mut rest = part;
            if let Some(i) = rest.find('[') {
                if i > 0 {
                    segs.push(Seg::Key(rest[..i].to_string()));
                }
                rest = &rest[i..];
                while let Some(end) = rest.find(']') {
                    if let Ok(n) = rest[1..end].parse() {
                        segs.push(Seg::Index(n));
                    }
                    rest = &rest[end + 1..];
                }
            } else {
                segs.push(Seg::Key(rest.to_string()));
            }
        }
        KeyPath(segs)
    }

    /// This path with one more key.
    pub fn key(&self, k: &str) -> KeyPath {
        let mut p = self.clone();
        p.0.push(Seg::Key(k.to_string()));
        p
    }

    /// Whether `self` starts with all of `prefix`.
    pub fn starts_with(&self, prefix: &KeyPath) -> bool {
        self.0.starts_with(&prefix.0)
    }
}

impl fmt::Display for KeyPath {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for (i, s) in self.0.iter().enumerate() {
            match s {
                Seg::Key(k) if i == 0 => write!(f, "{k}")?,
                Seg::Key(k) => write!(f, ".{k}")?,
                Seg::Index(n) => write!(f, "[{n}]")?,
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn key_paths_round_trip() {
        for s in ["film.layers[0].material", "pattern.sites_mm[3][1]", "name"] {
            assert_eq!(KeyPath::parse(s).to_string(), s);
        }
    }
}
