//! A corrected machine file for an existing run (`resume --machine`): which keys changed,
//! and whether the change would move the sites.
//!
//! A port, a timeout, a soft limit or a line to send may change between sessions; the chuck
//! geometry may not: `[chuck]` centre, rotation and flips place the wafer on the stage, so a
//! change there measures other points than the sites already measured.

use crate::bench::MachineFile;

/// What differs between two machine files.
#[derive(Debug, Clone, PartialEq)]
pub struct MachineChange {
    /// Dotted key paths whose value differs, was added or was removed, sorted.
    pub keys: Vec<String>,
}

impl MachineChange {
    /// The keys that differ between `old` and `new`.
    pub fn between(old: &MachineFile, new: &MachineFile) -> MachineChange {
        let flat = |m: &MachineFile| {
            let mut out = std::collections::BTreeMap::new();
            if let Ok(toml::Value::Table(t)) = toml::Value::try_from(m) {
                flatten("", &toml::Value::Table(t), &mut out);
            }
            out
        };
        let (a, b) = (flat(old), flat(new));
        let mut keys: Vec<String> = a
            .keys()
            .chain(b.keys())
            .filter(|k| a.get(*k) != b.get(*k))
            .cloned()
            .collect();
        keys.sort();
        keys.dedup();
        MachineChange { keys }
    }

    /// Whether nothing changed.
    pub fn is_empty(&self) -> bool {
        self.keys.is_empty()
    }

    /// The changed keys of the chuck geometry (`[chuck]`), which would move the sites.
    pub fn moving_sites(&self) -> Vec<&str> {
        self.keys
            .iter()
            .filter(|k| k.starts_with("chuck."))
            .map(String::as_str)
            .collect()
    }
}

/// Every leaf of `v` as `path = value`; arrays are leaves (a changed list is one change).
fn flatten(path: &str, v: &toml::Value, out: &mut std::collections::BTreeMap<String, String>) {
    match v {
        toml::Value::Table(t) => {
            for (k, v) in t {
                let p = if path.is_empty() {
                    k.clone()
                } else {
                    format!("{path}.{k}")
                };
                flatten(&p, v, out);
            }
        }
        leaf => {
            out.insert(path.to_string(), leaf.to_string());
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bench::machine::builtin_simulated;

    #[test]
    fn changed_keys_are_named_and_chuck_keys_move_sites() {
        let old = builtin_simulated();
        let mut new = old.clone();
        assert!(MachineChange::between(&old, &new).is_empty());
        new.stage.port = "/dev/ttyUSB1".into();
        new.stage.line_timeout_s = 9.0;
        let c = MachineChange::between(&old, &new);
        assert_eq!(c.keys, ["stage.line_timeout_s", "stage.port"]);
        assert!(c.moving_sites().is_empty());
        new.chuck.rotation_deg = 90.0;
        new.chuck.flip_x = true;
        let c = MachineChange::between(&old, &new);
        assert_eq!(c.moving_sites(), ["chuck.flip_x", "chuck.rotation_deg"]);
    }
}
