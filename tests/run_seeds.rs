//! Seeds of the simulated bench: every run of one wafer measures the same virtual film with
//! fresh noise (as on a real bench), `--seed` makes a run reproducible, and `run.toml` keeps
//! both seeds so a resumed run continues the same draws.

mod run_common;

use isopach::run::folder::RunFolder;
use run_common::*;
use std::path::{Path, PathBuf};

/// Runs the test recipe for `wafer` into a fresh runs folder under `dir`; the run folder.
fn run_into(dir: &Path, recipe: &Path, machine: &Path, wafer: &str, extra: &[&str]) -> PathBuf {
    let runs = tempfile::tempdir_in(dir).unwrap().keep();
    let mut args = run_args(recipe, machine, wafer, &runs);
    args.extend(extra.iter().map(|s| s.to_string()));
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    let o = isopach(&args);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    only_run(&runs)
}

/// Runs with one seed agree to this: the same noise draws, but the lamp drifts in virtual time,
/// which follows the wall clock, so acquisitions a few milliseconds apart see it differ by
/// about 10⁻⁶ and the fits by up to 0.001 nm.
const SAME_NM: f64 = 0.005;

fn seeds(run: &Path) -> (u64, Option<u64>) {
    let meta = RunFolder::new(run).read_run_toml().unwrap();
    (meta.run.seed, meta.run.run_seed)
}

#[test]
fn runs_of_one_wafer_read_the_same_film_through_fresh_noise() {
    let (dir, recipe, machine) = bench_dir("");
    let a = run_into(dir.path(), &recipe, &machine, "W1", &[]);
    let b = run_into(dir.path(), &recipe, &machine, "W1", &[]);
    let (wafer_a, run_a) = seeds(&a);
    let (wafer_b, run_b) = seeds(&b);
    assert_eq!(wafer_a, wafer_b, "the wafer's seed comes from its id");
    assert!(run_a.is_some() && run_a != run_b, "{run_a:?} {run_b:?}");
    let (fa, fb) = (fitted_and_true(&a), fitted_and_true(&b));
    let mut moved = 0;
    for ((site, ta, truth_a), (_, tb, truth_b)) in fa.iter().zip(&fb) {
        assert_eq!(truth_a, truth_b, "site {site}: the same virtual film");
        // Optics target with noise, as in run_reliability: max(1 nm, 0.2 %).
        assert!(
            (ta - truth_a).abs() <= 1.2,
            "site {site}: {ta} vs {truth_a}"
        );
        assert!(
            (tb - truth_b).abs() <= 1.2,
            "site {site}: {tb} vs {truth_b}"
        );
        if (ta - tb).abs() > SAME_NM {
            moved += 1;
        }
    }
    // The fit's σ here is about 0.04 nm, so two draws differ by more than SAME_NM at a site
    // with probability ≈ 0.93.
    assert!(moved >= 5, "fresh noise moves most sites: {moved} of 9");
    // Another wafer is another film (wafer-to-wafer offset 0.3 % of 600 nm, 1σ).
    let c = run_into(dir.path(), &recipe, &machine, "W2", &[]);
    assert_ne!(seeds(&c).0, wafer_a);
    let truth_c = fitted_and_true(&c);
    assert!(truth_c.iter().zip(&fa).all(|(c, a)| c.2 != a.2));
}

#[test]
fn a_given_seed_repeats_a_run_exactly() {
    let (dir, recipe, machine) = bench_dir("");
    let a = run_into(dir.path(), &recipe, &machine, "W1", &["--seed", "9"]);
    let b = run_into(dir.path(), &recipe, &machine, "W1", &["--seed", "9"]);
    assert_eq!(seeds(&a), (9, Some(9)));
    for ((site, ta, _), (_, tb, _)) in fitted_and_true(&a).iter().zip(&fitted_and_true(&b)) {
        assert!((ta - tb).abs() <= SAME_NM, "site {site}: {ta} vs {tb}");
    }
}
