//! docs/dependencies.md stays true: every dependency in Cargo.toml is listed there, and every
//! one is used by the code (a crate nobody uses is removed, not kept "for later").

use std::path::Path;

fn rust_sources(dir: &Path, out: &mut String) {
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            rust_sources(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push_str(&std::fs::read_to_string(&path).unwrap());
        }
    }
}

#[test]
fn every_dependency_is_documented_and_used() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let manifest: toml::Table =
        toml::from_str(&std::fs::read_to_string(root.join("Cargo.toml")).unwrap()).unwrap();
    let doc = std::fs::read_to_string(root.join("docs/dependencies.md")).unwrap();
    let mut code = String::new();
    rust_sources(&root.join("src"), &mut code);
    let deps = manifest["dependencies"].as_table().unwrap();
    assert!(deps.len() > 10, "read the dependency table");
    let mut problems = Vec::new();
    for name in deps.keys() {
        if !doc.contains(name.as_str()) {
            problems.push(format!("{name} is not in docs/dependencies.md"));
        }
        let ident = name.replace('-', "_");
        if !code.contains(&format!("{ident}::")) && !code.contains(&format!("use {ident}")) {
            problems.push(format!("{name} is not used under src/"));
        }
    }
    assert!(problems.is_empty(), "{problems:#?}");
}
