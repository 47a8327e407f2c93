//! Reads a TOML table into a schema type without stopping at the first mistake.
//!
//! serde stops at the first unknown key or wrong type. To report them all, the reader
//! deserializes with the failing key's path tracked (`serde_path_to_error`), records the
//! problem in plain words, takes that entry out of the table (or, for a required key or a
//! list element, puts a stand-in of the right type in its place) and tries again, until the
//! value deserializes or a required key is missing. Keys whose value could not be read are
//! returned so that later checks do not judge their stand-ins.

use super::keypath::{KeyPath, Seg};
use super::problem::Problem;
use super::words::{serde_name, stand_in, Complaint};
use serde::de::DeserializeOwned;
use toml::Value;

/// Most mistakes one document is read past (each one costs a deserialization).
const MAX_ROUNDS: usize = 200;

/// What came of reading a document.
#[derive(Debug)]
pub struct Reading<T> {
    /// The value, unless a required key is missing (or too much was wrong).
    pub value: Option<T>,
    /// What could not be read, each at its key path.
    pub problems: Vec<Problem>,
    /// Keys whose value is a stand-in, a default or a shortened list: skip their checks.
    pub unreadable: Vec<KeyPath>,
}

impl<T> Reading<T> {
    /// Whether a check's problem at `path` would only judge a value that could not be read:
    /// the same key, one below it, or the list holding it.
    pub fn covers(&self, path: &KeyPath) -> bool {
        self.unreadable.iter().any(|u| {
            path.starts_with(u)
                || (u.starts_with(path)
                    && u.0[path.0.len()..]
                        .iter()
                        .all(|s| matches!(s, Seg::Index(_))))
        })
    }
}

/// Reads `table` into `T`, reporting every unknown key, wrong type and non-finite number.
pub fn read<T: DeserializeOwned>(table: toml::Table) -> Reading<T> {
    let mut doc = Value::Table(table);
    let mut reading = Reading {
        value: None,
        problems: Vec::new(),
        unreadable: Vec::new(),
    };
    non_finite(&doc, &mut KeyPath::default(), &mut reading);
    // Keys taken out for a wrong type, with the stand-in to use if they turn out required.
    let mut taken: Vec<(KeyPath, Option<Value>)> = Vec::new();
    // Lists cut short, with their original length and the problem that reports them.
    let mut cut: Vec<(KeyPath, usize, usize)> = Vec::new();
    for _ in 0..MAX_ROUNDS {
        let err = match serde_path_to_error::deserialize::<_, T>(doc.clone()) {
            Ok(v) => {
                reading.value = Some(v);
                break;
            }
            Err(e) => e,
        };
        let mut path = key_path(err.path());
        let complaint = Complaint::parse(err.inner().message());
        match &complaint {
            Complaint::UnknownKey { key, .. } => {
                if path.0.last() != Some(&Seg::Key(key.clone())) {
                    path = path.key(key);
                }
                reading.problems.push(Problem {
                    path: path.clone(),
                    message: complaint.plain(),
                });
                if remove(&mut doc, &path).is_none() {
                    break;
                }
            }
            Complaint::Missing { key } => {
                let full = path.key(key);
                match taken.iter_mut().find(|(p, _)| *p == full) {
                    Some((_, stand)) if stand.is_some() => {
                        let v = stand.take().expect("checked above");
                        if !insert(&mut doc, &full, v) {
                            break;
                        }
                    }
                    // Already reported as unreadable: nothing more to say, nothing to go on with.
                    Some(_) => break,
                    None => {
                        reading.problems.push(Problem {
                            path: full,
                            message: complaint.plain(),
                        });
                        break;
                    }
                }
            }
            Complaint::Length { want, found } => {
                let Some(Value::Array(a)) = get_mut(&mut doc, &path) else {
                    reading.problems.push(Problem {
                        path,
                        message: complaint.plain(),
                    });
                    break;
                };
                match cut.iter_mut().find(|(p, _, _)| *p == path) {
                    Some((_, orig, at)) if want.is_none() && !a.is_empty() => {
                        a.pop();
                        let (n, orig) = (a.len(), *orig);
                        reading.problems[*at].message =
                            format!("expected a list of exactly {n} values, found {orig}");
                    }
                    None if want.is_none() && !a.is_empty() => {
                        a.pop();
                        let n = a.len();
                        cut.push((path.clone(), *found, reading.problems.len()));
                        reading.unreadable.push(path.clone());
                        reading.problems.push(Problem {
                            path,
                            message: format!(
                                "expected a list of exactly {n} values, found {found}"
                            ),
                        });
                    }
                    _ => {
                        if !cut.iter().any(|(p, _, _)| *p == path) {
                            reading.problems.push(Problem {
                                path: path.clone(),
                                message: complaint.plain(),
                            });
                        }
                        if !take_out(&mut doc, &path, &complaint, &mut taken, &mut reading) {
                            break;
                        }
                    }
                }
            }
            Complaint::Value { .. } | Complaint::UnknownWord { .. } | Complaint::Other(_) => {
                path = refine(&doc, path, &complaint);
                if reading.unreadable.contains(&path) {
                    // A stand-in did not fit: say no more, go no further.
                    break;
                }
                reading.problems.push(Problem {
                    path: path.clone(),
                    message: complaint.plain(),
                });
                if !take_out(&mut doc, &path, &complaint, &mut taken, &mut reading) {
                    break;
                }
            }
        }
    }
    reading
}

/// Takes a wrongly typed entry out of the document: a list element is replaced by a
/// stand-in (so the indices of the others stay true), a key is removed (its default, or
/// a stand-in if it is required, takes its place). False when nothing could be done.
fn take_out(
    doc: &mut Value,
    path: &KeyPath,
    complaint: &Complaint,
    taken: &mut Vec<(KeyPath, Option<Value>)>,
    reading: &mut Reading<impl Sized>,
) -> bool {
    if path.0.is_empty() {
        return false;
    }
    reading.unreadable.push(path.clone());
    let stand = match complaint {
        Complaint::Value { expected, .. } => stand_in(expected),
        _ => None,
    };
    if let Some(Seg::Index(_)) = path.0.last() {
        match (stand, get_mut(doc, path)) {
            (Some(v), Some(slot)) => {
                *slot = v;
                true
            }
            _ => false,
        }
    } else {
        taken.push((path.clone(), stand));
        remove(doc, path).is_some()
    }
}

/// For an error serde could only place at a table (inside an internally tagged enum, whose
/// content it buffers), the key below it that holds the offending value.
fn refine(doc: &Value, path: KeyPath, complaint: &Complaint) -> KeyPath {
    let Some(Value::Table(_)) = get(doc, &path) else {
        return path;
    };
    let found = match complaint {
        Complaint::Value { found: Some(f), .. } => f.clone(),
        Complaint::UnknownWord { word, .. } => format!("string {word:?}"),
        _ => return path,
    };
    let mut at = path.clone();
    if find_leaf(get(doc, &path).expect("checked above"), &found, &mut at) {
        at
    } else {
        path
    }
}

/// Depth-first search for a value serde would describe as `found`; `at` ends on it.
fn find_leaf(v: &Value, found: &str, at: &mut KeyPath) -> bool {
    let children: Vec<(Seg, &Value)> = match v {
        Value::Table(t) => t.iter().map(|(k, v)| (Seg::Key(k.clone()), v)).collect(),
        Value::Array(a) => a
            .iter()
            .enumerate()
            .map(|(i, v)| (Seg::Index(i), v))
            .collect(),
        _ => return false,
    };
    for (seg, child) in children {
        at.0.push(seg);
        if serde_name(child) == found || find_leaf(child, found, at) {
            return true;
        }
        at.0.pop();
    }
    false
}

/// Every float that is `nan` or `±inf`: no key of ours takes one.
fn non_finite(v: &Value, at: &mut KeyPath, reading: &mut Reading<impl Sized>) {
    match v {
        Value::Float(f) if !f.is_finite() => {
            reading.problems.push(Problem {
                path: at.clone(),
                message: format!("{f} is not a finite number: write an ordinary value"),
            });
            reading.unreadable.push(at.clone());
        }
        Value::Table(t) => {
            for (k, v) in t {
                at.0.push(Seg::Key(k.clone()));
                non_finite(v, at, reading);
                at.0.pop();
            }
        }
        Value::Array(a) => {
            for (i, v) in a.iter().enumerate() {
                at.0.push(Seg::Index(i));
                non_finite(v, at, reading);
                at.0.pop();
            }
        }
        _ => {}
    }
}

/// Our key path of serde_path_to_error's path.
fn key_path(p: &serde_path_to_error::Path) -> KeyPath {
    use serde_path_to_error::Segment;
    KeyPath(
        p.iter()
            .filter_map(|s| match s {
                Segment::Map { key } => Some(Seg::Key(key.clone())),
                Segment::Seq { index } => Some(Seg::Index(*index)),
                _ => None,
            })
            .collect(),
    )
}

fn get<'a>(doc: &'a Value, path: &KeyPath) -> Option<&'a Value> {
    path.0.iter().try_fold(doc, |v, s| match (s, v) {
        (Seg::Key(k), Value::Table(t)) => t.get(k),
        (Seg::Index(i), Value::Array(a)) => a.get(*i),
        _ => None,
    })
}

fn get_mut<'a>(doc: &'a mut Value, path: &KeyPath) -> Option<&'a mut Value> {
    path.0.iter().try_fold(doc, |v, s| match (s, v) {
        (Seg::Key(k), Value::Table(t)) => t.get_mut(k),
        (Seg::Index(i), Value::Array(a)) => a.get_mut(*i),
        _ => None,
    })
}

/// Removes the entry at `path` (a key from its table, an element from its list).
fn remove(doc: &mut Value, path: &KeyPath) -> Option<Value> {
    let (last, parent) = path.0.split_last()?;
    match (last, get_mut(doc, &KeyPath(parent.to_vec()))?) {
        (Seg::Key(k), Value::Table(t)) => t.remove(k),
        (Seg::Index(i), Value::Array(a)) if *i < a.len() => Some(a.remove(*i)),
        _ => None,
    }
}

/// Puts `v` at the key `path` (its table must exist).
fn insert(doc: &mut Value, path: &KeyPath, v: Value) -> bool {
    let Some((Seg::Key(k), parent)) = path.0.split_last() else {
        return false;
    };
    match get_mut(doc, &KeyPath(parent.to_vec())) {
        Some(Value::Table(t)) => {
            t.insert(k.clone(), v);
            true
        }
        _ => false,
    }
}
