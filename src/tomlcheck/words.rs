//! serde's deserialization messages (`invalid type: string "150", expected f64`) in plain
//! words (`expected a number, found the text "150"`), and the pieces the reader needs to
//! carry on past them (which key is unknown, which is missing, what type was wanted).

use super::problem::nearest;

/// What a serde message says went wrong.
#[derive(Debug, Clone, PartialEq)]
pub enum Complaint {
    /// A key the schema does not have; `expected` lists the keys it does have.
    UnknownKey { key: String, expected: Vec<String> },
    /// A required key is absent.
    Missing { key: String },
    /// A list with a length the schema does not take: `want` values (if known), `found`.
    Length { want: Option<usize>, found: usize },
    /// A value of the wrong type or outside what the type holds.
    Value {
        /// serde's description of the value found (`string "150"`), if it gave one.
        found: Option<String>,
        /// serde's name of what it wanted (`f64`, `a string`).
        expected: String,
    },
    /// A word that is not one of a fixed set.
    UnknownWord { word: String, expected: Vec<String> },
    /// Anything else, as serde wrote it.
    Other(String),
}

impl Complaint {
    /// Reads a serde message.
    pub fn parse(msg: &str) -> Complaint {
        let msg = msg.trim();
        if let Some(rest) = msg.strip_prefix("unknown field ") {
            let (key, expected) = name_and_list(rest);
            return Complaint::UnknownKey { key, expected };
        }
        if let Some(rest) = msg.strip_prefix("unknown variant ") {
            let (word, expected) = name_and_list(rest);
            return Complaint::UnknownWord { word, expected };
        }
        if let Some(rest) = msg.strip_prefix("missing field ") {
            return Complaint::Missing {
                key: rest.trim_matches('`').to_string(),
            };
        }
        if let Some(rest) = msg.strip_prefix("invalid length ") {
            if let Some((n, exp)) = rest.split_once(", expected ") {
                let want = exp
                    .strip_prefix("an array of length ")
                    .or_else(|| exp.strip_prefix("a tuple of size "))
                    .and_then(|n| n.trim().parse().ok());
                if let Ok(found) = n.trim().parse() {
                    return Complaint::Length { want, found };
                }
            }
        }
        for prefix in ["invalid type: ", "invalid value: "] {
            if let Some(rest) = msg.strip_prefix(prefix) {
                if let Some((found, exp)) = rest.rsplit_once(", expected ") {
                    return Complaint::Value {
                        found: Some(found.to_string()),
                        expected: exp.to_string(),
                    };
                }
            }
        }
        Complaint::Other(msg.to_string())
    }

    /// The complaint in plain words, for a key path shown before it.
    pub fn plain(&self) -> String {
        match self {
            Complaint::UnknownKey { key, expected } => {
                let hint = nearest(key, expected)
                    .map(|k| format!(" (did you mean \"{k}\"?)"))
                    .unwrap_or_default();
                let known = if expected.is_empty() {
                    " (this table takes no keys)".to_string()
                } else {
                    format!("; this table takes {}", expected.join(", "))
                };
                format!("unknown key \"{key}\"{hint}{known}")
            }
            Complaint::Missing { key } => {
                format!("required key \"{key}\" is missing: add it")
            }
            Complaint::Length {
                want: Some(w),
                found,
            } => {
                format!("expected a list of exactly {w} values, found {found}")
            }
            Complaint::Length { want: None, found } => {
                format!("a list of {found} values is longer than this key takes")
            }
            Complaint::Value { found, expected } => {
                let want = plain_expected(expected);
                match found {
                    Some(f) => format!("expected {want}, found {}", plain_found(f)),
                    None => format!("expected {want}"),
                }
            }
            Complaint::UnknownWord { word, expected } => {
                let hint = nearest(word, expected)
                    .map(|k| format!(" (did you mean \"{k}\"?)"))
                    .unwrap_or_default();
                format!(
                    "unknown value \"{word}\"{hint}: write one of {}",
                    expected
                        .iter()
                        .map(|e| format!("\"{e}\""))
                        .collect::<Vec<_>>()
                        .join(", ")
                )
            }
            Complaint::Other(m) => m.clone(),
        }
    }
}

/// Splits "`name`, expected one of `a`, `b`" into the name and the list.
fn name_and_list(rest: &str) -> (String, Vec<String>) {
    let (name, tail) = rest.split_once(", ").unwrap_or((rest, ""));
    let list = tail
        .split('`')
        .skip(1)
        .step_by(2)
        .map(str::to_string)
        .collect();
    (name.trim_matches('`').to_string(), list)
}

/// serde's name of a type in plain words.
pub fn plain_expected(expected: &str) -> String {
    let e = expected.trim();
    match e {
        "f64" | "f32" => "a number".into(),
        "u8" | "u16" | "u32" | "u64" | "u128" | "usize" => "a whole number, zero or more".into(),
        "i8" | "i16" | "i32" | "i64" | "i128" | "isize" => "a whole number".into(),
        "a string" | "a borrowed string" | "string" => "text in quotes".into(),
        "a boolean" => "true or false".into(),
        "a sequence" => "a list [ … ]".into(),
        "a map" => "a table".into(),
        _ if e.starts_with("an array of length ") => {
            format!("a list of {} values", &e["an array of length ".len()..])
        }
        _ if e.starts_with("struct ") || e.contains("enum ") => "a table".into(),
        _ => e.to_string(),
    }
}

/// serde's description of a value in plain words.
pub fn plain_found(found: &str) -> String {
    let f = found.trim();
    let ticked = |p: &str| {
        f.strip_prefix(p)
            .map(|v| v.trim().trim_matches('`').to_string())
    };
    if let Some(s) = f.strip_prefix("string ") {
        format!("the text {s}")
    } else if let Some(v) = ticked("integer ") {
        format!("the whole number {v}")
    } else if let Some(v) = ticked("floating point ") {
        format!("the number {v}")
    } else if let Some(v) = ticked("boolean ") {
        format!("the value {v}")
    } else if f == "sequence" {
        "a list".into()
    } else if f == "map" {
        "a table".into()
    } else {
        f.to_string()
    }
}

/// What serde calls a TOML value in its messages (`serde::de::Unexpected`'s wording).
pub fn serde_name(v: &toml::Value) -> String {
    match v {
        toml::Value::String(s) => format!("string {s:?}"),
        toml::Value::Integer(i) => format!("integer `{i}`"),
        toml::Value::Float(f) => format!("floating point `{f}`"),
        toml::Value::Boolean(b) => format!("boolean `{b}`"),
        toml::Value::Array(_) => "sequence".into(),
        toml::Value::Table(_) => "map".into(),
        toml::Value::Datetime(d) => format!("string {:?}", d.to_string()),
    }
}

/// A value of the type serde `expected`, to stand in for one that could not be read (its
/// key is reported and its checks are skipped), or `None` when no simple value fits.
pub fn stand_in(expected: &str) -> Option<toml::Value> {
    use toml::Value;
    let e = expected.trim();
    Some(match e {
        "f64" | "f32" => Value::Float(f64::NAN),
        "u8" | "u16" | "u32" | "u64" | "usize" | "i8" | "i16" | "i32" | "i64" | "isize" => {
            Value::Integer(0)
        }
        "a string" | "a borrowed string" => Value::String(String::new()),
        "a boolean" => Value::Boolean(false),
        "a sequence" => Value::Array(Vec::new()),
        _ => {
            let n: usize = e.strip_prefix("an array of length ")?.trim().parse().ok()?;
            Value::Array(vec![Value::Float(f64::NAN); n])
        }
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn type_errors_read_as_plain_words() {
        let c = Complaint::parse("invalid type: string \"150\", expected f64");
        assert_eq!(c.plain(), "expected a number, found the text \"150\"");
        let c = Complaint::parse("invalid value: integer `-1`, expected u32");
        assert_eq!(
            c.plain(),
            "expected a whole number, zero or more, found the whole number -1"
        );
    }

    #[test]
    fn unknown_keys_suggest_the_nearest() {
        let c = Complaint::parse(
            "unknown field `diamter`, expected one of `diameter_mm`, `edge_exclusion_mm`",
        );
        assert_eq!(
            c,
            Complaint::UnknownKey {
                key: "diamter".into(),
                expected: vec!["diameter_mm".into(), "edge_exclusion_mm".into()]
            }
        );
        assert!(c
            .plain()
            .starts_with("unknown key \"diamter\" (did you mean \"diameter_mm\"?)"));
        let c = Complaint::parse("unknown field `x`, there are no fields");
        assert!(c.plain().contains("takes no keys"), "{}", c.plain());
    }

    #[test]
    fn lengths_and_words() {
        assert_eq!(
            Complaint::parse("invalid length 1, expected an array of length 2"),
            Complaint::Length {
                want: Some(2),
                found: 1
            }
        );
        let c = Complaint::parse("unknown variant `fourrier`, expected one of `auto`, `fourier`");
        assert!(
            c.plain().contains("did you mean \"fourier\"?"),
            "{}",
            c.plain()
        );
    }
}
