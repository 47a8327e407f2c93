//! One-way layering (issue 11): no module under `src/` uses a module on its own floor or
//! above it. The floors are listed once here and in DEVELOPERS.md ("Module map").
//!
//! The check reads the source text: every `crate::NAME` (library) and `isopach::NAME`
//! (binary) path outside comments names the top-level module it reaches into.

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

/// Floors, lowest first. A module may use modules of lower floors only; modules on one floor
/// do not use each other.
const FLOORS: &[&[&str]] = &[
    &["error_text", "site_list", "tomlcheck"],
    &["optics"],
    &["recipe"],
    &["spectrum", "map"],
    &["fit"],
    &["bench", "history"],
    &["run"],
    // `error` names the error types of every floor below it, for the binary's exit codes.
    &["compare", "error"],
    &["cli"],
];

fn floor(module: &str) -> Option<usize> {
    FLOORS.iter().position(|f| f.contains(&module))
}

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

/// The top-level module a file under `src/` belongs to (`None` for `lib.rs` and `main.rs`).
fn module_of(src: &Path, file: &Path) -> Option<String> {
    let rel = file.strip_prefix(src).unwrap();
    let first = rel.components().next()?.as_os_str().to_str()?.to_string();
    match first.strip_suffix(".rs") {
        Some("lib") | Some("main") => None,
        Some(stem) => Some(stem.to_string()),
        None => Some(first),
    }
}

/// The top-level modules `text` reaches into through `crate::` or `isopach::` paths,
/// comments and unit tests left out.
fn uses(text: &str) -> BTreeSet<String> {
    let mut out = BTreeSet::new();
    // Unit tests (a file's `#[cfg(test)]` module, last by house style) may borrow a type from
    // any floor as sample data; they are not part of the library's dependencies.
    for line in text.lines().take_while(|l| l.trim() != "#[cfg(test)]") {
        let code = line.split("//").next().unwrap_or("");
        for prefix in ["crate::", "isopach::"] {
            for (at, _) in code.match_indices(prefix) {
                let before = code[..at].chars().last();
                if before.is_some_and(|c| c.is_alphanumeric() || c == '_') {
                    continue;
                }
                let name: String = code[at + prefix.len()..]
                    .chars()
                    .take_while(|c| c.is_alphanumeric() || *c == '_')
                    .collect();
                if !name.is_empty() {
                    out.insert(name);
                }
            }
        }
    }
    out
}

/// What is wrong with `module` using the modules of `text`: one line per use from its floor
/// or above.
fn violations(module: &str, text: &str) -> Vec<String> {
    let Some(own) = floor(module) else {
        return vec![format!(
            "`{module}` is on no floor; add it to FLOORS here and to DEVELOPERS.md"
        )];
    };
    uses(text)
        .into_iter()
        .filter(|used| used != module)
        // A name that is no module of ours (a macro's `crate::` path) has no floor.
        .filter(|used| floor(used).is_some_and(|f| f >= own))
        .map(|used| format!("`{module}` uses `{used}`, which is on its floor or above"))
        .collect()
}

#[test]
fn no_module_uses_one_on_its_floor_or_above() {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    rust_files(&src, &mut files);
    files.sort();
    let mut wrong = Vec::new();
    for file in &files {
        let Some(module) = module_of(&src, file) else {
            continue;
        };
        let text = std::fs::read_to_string(file).unwrap();
        for v in violations(&module, &text) {
            wrong.push(format!(
                "{}: {v}",
                file.strip_prefix(&src).unwrap().display()
            ));
        }
    }
    assert!(
        wrong.is_empty(),
        "layering broken:\n  {}",
        wrong.join("\n  ")
    );
}

#[test]
fn the_checker_sees_paths_in_code_and_not_in_comments() {
    let text = "use crate::run::folder::RunFolder;\n\
                let x = crate::history::record::db_path(p); // crate::cli here is a comment\n\
                use isopach::map::Scene;\n\
                /// [`crate::compare`] in a doc comment\n\
                let y = notcrate::fit::x;\n\
                #[cfg(test)]\n\
                use crate::cli::x;";
    let got: Vec<String> = uses(text).into_iter().collect();
    assert_eq!(got, ["history", "map", "run"]);
}

#[test]
fn a_use_from_above_or_the_same_floor_is_caught() {
    // map drawing run files was the run ⇄ map cycle of issue 11.
    let above = violations("map", "use crate::run::files::write_atomic;");
    assert_eq!(above, ["`map` uses `run`, which is on its floor or above"]);
    let same = violations("history", "use crate::bench::Stage;");
    assert_eq!(
        same,
        ["`history` uses `bench`, which is on its floor or above"]
    );
    assert!(violations("run", "use crate::map::Summary; use crate::history::db;").is_empty());
    assert_eq!(
        violations("newthing", "").len(),
        1,
        "an unplaced module is reported"
    );
}
