//! Hostile recipes: one value of a shipped recipe replaced by something hostile (huge, tiny,
//! non-finite, negative, of the wrong type, control characters, paths out of the folder,
//! enormous arrays). Reading never panics; a refusal names a line of the file and says what is
//! wrong; an accepted recipe makes a bounded plan (at most the site ceiling) quickly.
//!
//! Fixed seed and a bounded case count so CI is fast and repeatable; a longer run:
//! `PROPTEST_CASES=20000 cargo test --release --test recipe_fuzz`.

use isopach::recipe::{self, validate::MAX_SITES, LoadedRecipe, RecipeError};
use isopach::run::plan::Plan;
use proptest::prelude::*;
use proptest::test_runner::RngSeed;
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

fn shipped() -> Vec<(PathBuf, String)> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("recipes");
    let mut out: Vec<(PathBuf, String)> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|x| x == "toml"))
        .map(|p| {
            let text = std::fs::read_to_string(&p).unwrap();
            (p, text)
        })
        .collect();
    out.sort();
    out
}

/// A hostile TOML value, as text.
fn hostile_value() -> impl Strategy<Value = String> {
    let numbers = prop_oneof![
        Just("0".to_string()),
        Just("-1".to_string()),
        Just("1e308".to_string()),
        Just("-1e308".to_string()),
        Just("5e-324".to_string()),
        Just("nan".to_string()),
        Just("inf".to_string()),
        Just("-inf".to_string()),
        Just("9223372036854775807".to_string()),
        Just("1000000000".to_string()),
        Just("0.001".to_string()),
        any::<f64>().prop_map(|v| format!("{v:e}")),
        any::<i64>().prop_map(|v| v.to_string()),
    ];
    let texts = prop_oneof![
        Just("\"\"".to_string()),
        Just("\"150\"".to_string()),
        Just("\"\\u0007\\u0000\"".to_string()),
        Just("\"/etc/passwd\"".to_string()),
        Just("\"../../../../etc/shadow\"".to_string()),
        Just(format!("\"{}\"", "x".repeat(10_000))),
        "[a-z]{1,12}".prop_map(|s| format!("\"{s}\"")),
    ];
    let arrays = prop_oneof![
        Just("[]".to_string()),
        Just("[1e9]".to_string()),
        Just("[1000000000]".to_string()),
        Just("[420, 980, 1000]".to_string()),
        Just("[980, 420]".to_string()),
        Just("[nan, inf]".to_string()),
        Just("[[1, 2], [3]]".to_string()),
        Just(format!("[{}]", vec!["1"; 5000].join(", "))),
        prop::collection::vec(-1e6f64..1e6, 0..6).prop_map(|v| format!("{v:?}")),
    ];
    prop_oneof![
        numbers,
        texts,
        arrays,
        Just("true".to_string()),
        Just("{ }".to_string()),
        Just("{ material = \"sio2\" }".to_string()),
    ]
}

/// The recipe text with the value of its `k`-th `key = value` line replaced.
fn with_value(text: &str, k: usize, value: &str) -> String {
    let assignments: Vec<usize> = text
        .lines()
        .enumerate()
        .filter(|(_, l)| !l.trim_start().starts_with('#') && l.contains(" = "))
        .map(|(i, _)| i)
        .collect();
    let target = assignments[k % assignments.len()];
    text.lines()
        .enumerate()
        .map(|(i, l)| {
            if i == target {
                let key = &l[..l.find(" = ").unwrap()];
                format!("{key} = {value}")
            } else {
                l.to_string()
            }
        })
        .collect::<Vec<_>>()
        .join("\n")
}

proptest! {
    #![proptest_config(ProptestConfig {
        cases: 512,
        rng_seed: RngSeed::Fixed(18),
        failure_persistence: None,
        ..ProptestConfig::default()
    })]

    #[test]
    fn a_hostile_value_is_refused_with_its_line_or_makes_a_bounded_plan(
        which in 0usize..16,
        k in 0usize..64,
        value in hostile_value(),
    ) {
        let recipes = shipped();
        let (path, text) = &recipes[which % recipes.len()];
        let text = with_value(text, k, &value);
        let lines = text.lines().count();
        let started = Instant::now();
        match recipe::parse(&text, path) {
            Err(RecipeError::Invalid(problems)) => {
                prop_assert!(!problems.is_empty());
                for p in &problems {
                    // A position inside the file (a missing key points at its table, line ≥ 1).
                    prop_assert!(p.line >= 1 && p.line <= lines + 1, "{p} of {lines} lines");
                    prop_assert!(!p.message.trim().is_empty());
                }
            }
            Err(other) => prop_assert!(false, "not a located refusal: {other}"),
            Ok(r) => {
                let loaded = LoadedRecipe { recipe: r, path: path.clone(), text: text.clone() };
                let sites = loaded.sites();
                prop_assert!(!sites.is_empty() && sites.len() as u64 <= MAX_SITES);
                prop_assert!(sites.iter().all(|s| s.x_mm.is_finite() && s.y_mm.is_finite()));
                // The plan on the built-in simulated bench: made, or refused, never a panic.
                let _ = Plan::new(&loaded, None);
            }
        }
        prop_assert!(
            started.elapsed() < Duration::from_secs(10),
            "took {:?} for {value:.60}",
            started.elapsed()
        );
    }
}

#[test]
fn the_mutation_replaces_exactly_one_value() {
    let text = "# c = 1\nname = \"a\"\n[w]\nd = 150\n";
    assert_eq!(
        with_value(text, 1, "nan"),
        "# c = 1\nname = \"a\"\n[w]\nd = nan"
    );
}
