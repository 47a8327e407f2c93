//! Lamp drift on the simulated bench: references taken again between sites and each site
//! normalised by the reference interpolated in time keep the map within the optics target,
//! while one reference at the start does not.

use isopach::run::events::Event;
use std::path::Path;

mod run_common;
use run_common::*;

/// Lamp drift of the test bench, % per hour of virtual time: at least 3 % over the test map
/// (a 9-site run lasts 20–40 virtual seconds at these settings, longer under load; the test
/// measures the drift it got).
const DRIFT_PCT_PER_HOUR: f64 = 900.0;

/// Runs the test recipe with `extra` machine lines; returns the run folder.
fn drift_run(dir: &Path, extra: &str, wafer: &str) -> std::path::PathBuf {
    let recipe = dir.join("rel.toml");
    // A thin film: its thickness comes from the reflectance level, which a drifting lamp
    // biases (a thick film's fringe positions barely move: 0.09 nm at 600 nm for 2 %).
    let thin = RECIPE.replace(
        "nominal_nm = 600, min_nm = 100, max_nm = 2000",
        "nominal_nm = 60, min_nm = 5, max_nm = 300",
    );
    std::fs::write(&recipe, thin).unwrap();
    let machine = dir.join(format!("{wafer}.toml"));
    let text =
        isopach::bench::machine::BUILTIN_SIMULATED.replace("time_scale = 25", "time_scale = 50");
    std::fs::write(
        &machine,
        format!(
            "{text}\n[simulation.spectrometer]\nlamp_drift_pct_per_hour = {DRIFT_PCT_PER_HOUR}\n{extra}"
        ),
    )
    .unwrap();
    let runs = dir.join(wafer);
    let mut args = run_args(&recipe, &machine, wafer, &runs);
    args.extend(["--seed".to_string(), "11".to_string()]);
    let o = isopach(&args.iter().map(String::as_str).collect::<Vec<_>>());
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    only_run(&runs)
}

/// Largest |fitted − true| thickness over the map, nm.
fn worst_error_nm(run: &Path) -> f64 {
    let rows = fitted_and_true(run);
    assert_eq!(rows.len(), 9);
    rows.iter()
        .map(|(_, got, want)| (got - want).abs())
        .fold(0.0, f64::max)
}

/// Mean lamp signal (reference − dark) of a stored reference file.
fn lamp_level(run: &Path, rel: &str) -> f64 {
    match isopach::spectrum::read_csv(&run.join(rel)).unwrap() {
        isopach::spectrum::SpectrumFile::Counts(r) => {
            r.sample
                .counts
                .iter()
                .zip(&r.dark.counts)
                .map(|(s, d)| s - d)
                .sum::<f64>()
                / r.sample.counts.len() as f64
        }
        _ => panic!("{rel} holds no counts"),
    }
}

fn references(run: &Path) -> Vec<String> {
    events(run)
        .into_iter()
        .filter_map(|e| match e {
            Event::ReferenceTaken { reference, .. } => Some(reference),
            _ => None,
        })
        .collect()
}

#[test]
fn drift_corrected_map_stays_within_the_optics_target_and_the_uncorrected_does_not() {
    let dir = tempfile::tempdir().unwrap();
    let plain = drift_run(dir.path(), "", "PLAIN");
    let corrected = drift_run(dir.path(), "[reference]\nevery_sites = 2\n", "DRIFT");
    // The lamp really drifted by at least 3 % between the first and last reference.
    let refs = references(&corrected);
    assert_eq!(refs.len(), 1 + 4 + 1, "{refs:?}");
    let drift = lamp_level(&corrected, refs.last().unwrap()) / lamp_level(&corrected, &refs[0]);
    // Optics target with noise (docs/optics.md): max(1 nm, 0.2 %) of the 60 nm film.
    let target = 1.0;
    let (e_plain, e_corrected) = (worst_error_nm(&plain), worst_error_nm(&corrected));
    println!(
        "lamp drift over the run {:+.2} %: worst error {e_plain:.3} nm uncorrected, {e_corrected:.3} nm corrected",
        (drift - 1.0) * 100.0
    );
    assert!((drift - 1.0).abs() >= 0.03, "drift {drift}");
    assert!(e_corrected <= target, "corrected: {e_corrected} nm");
    assert!(e_plain > target, "uncorrected: {e_plain} nm");

    // refit derives the same interpolation from the journal: the map does not change.
    let before = std::fs::read_to_string(corrected.join("sites.csv")).unwrap();
    let o = isopach(&["refit", corrected.to_str().unwrap()]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let after = std::fs::read_to_string(corrected.join("sites.csv")).unwrap();
    assert_eq!(before, after);
}
