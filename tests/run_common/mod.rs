//! Shared set-up of the run tests: a 9-site recipe, a simulated machine file in a temp dir,
//! the binary, and readers of a run folder's journal and site table.
#![allow(dead_code)] // each test binary uses its own subset

use isopach::run::events::Event;
use isopach::run::folder::RunFolder;
use isopach::run::journal;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

pub const RECIPE: &str = r#"name = "rel-9"
[wafer]
diameter_mm = 150
edge_exclusion_mm = 5
orientation = "flat"
[pattern]
kind = "standard"
sites = 9
[film]
ambient = "air"
substrate = "si"
layers = [ { material = "sio2", nominal_nm = 600, min_nm = 100, max_nm = 2000 } ]
wavelength_nm = [420, 980]
[acquire]
integration_ms = 10
averages = 2
settle_ms = 50
"#;

pub fn isopach(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(args)
        .output()
        .expect("run isopach")
}

/// Arguments of `isopach run` for the test recipe on the test machine.
pub fn run_args(recipe: &Path, machine: &Path, wafer: &str, runs: &Path) -> Vec<String> {
    [
        "run",
        recipe.to_str().unwrap(),
        "--machine",
        machine.to_str().unwrap(),
        "--wafer",
        wafer,
        "--runs",
        runs.to_str().unwrap(),
    ]
    .map(String::from)
    .to_vec()
}

/// Runs `isopach run` for the test recipe and machine.
pub fn run_map(recipe: &Path, machine: &Path, wafer: &str, runs: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(run_args(recipe, machine, wafer, runs))
        .output()
        .expect("run isopach")
}

/// A temp dir with the recipe and a simulated machine file (extra TOML appended).
pub fn bench_dir(extra_machine: &str) -> (tempfile::TempDir, PathBuf, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let recipe = dir.path().join("rel.toml");
    std::fs::write(&recipe, RECIPE).unwrap();
    let machine = dir.path().join("sim.toml");
    let text =
        isopach::bench::machine::BUILTIN_SIMULATED.replace("time_scale = 25", "time_scale = 50");
    std::fs::write(&machine, format!("{text}\n{extra_machine}")).unwrap();
    (dir, recipe, machine)
}

pub fn only_run(runs: &Path) -> PathBuf {
    let mut v: Vec<PathBuf> = std::fs::read_dir(runs)
        .unwrap()
        .map(|e| e.unwrap().path())
        // Hidden entries are run folders still being created, not runs.
        .filter(|p| p.is_dir() && !p.file_name().unwrap().to_string_lossy().starts_with('.'))
        .collect();
    assert_eq!(v.len(), 1, "{v:?}");
    v.pop().unwrap()
}

pub fn events(run: &Path) -> Vec<Event> {
    journal::read(&RunFolder::new(run).journal())
        .expect("journal parses")
        .events
}

/// Checks sites.csv: every planned site exactly once.
pub fn sites_once(run: &Path, planned: usize) -> Vec<(usize, String)> {
    let text = std::fs::read_to_string(run.join("sites.csv")).unwrap();
    let mut rows: Vec<(usize, String)> = text
        .lines()
        .skip(1)
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            (f[0].parse().unwrap(), f[6].to_string())
        })
        .collect();
    rows.sort();
    let numbers: Vec<usize> = rows.iter().map(|r| r.0).collect();
    assert_eq!(
        numbers,
        (1..=planned).collect::<Vec<_>>(),
        "sites.csv of {}",
        run.display()
    );
    rows
}

/// Removes the injected faults from a run's frozen machine file (a fault strikes once; with
/// it gone, the run can be resumed).
pub fn strip_faults(run: &Path) {
    let text = std::fs::read_to_string(run.join("run.toml")).unwrap();
    let mut meta: isopach::run::folder::RunToml = toml::from_str(&text).unwrap();
    if let Some(sim) = meta
        .machine
        .as_mut()
        .and_then(|m| m.get_mut("simulation"))
        .and_then(|s| s.as_table_mut())
    {
        sim.remove("faults");
    }
    std::fs::write(run.join("run.toml"), toml::to_string(&meta).unwrap()).unwrap();
}

/// Every row of a run's `sites.csv` as (site, fitted nm, true nm): the truth is the virtual
/// wafer of the same bench (machine file and seed from run.toml) rebuilt here.
pub fn fitted_and_true(run: &Path) -> Vec<(usize, f64, f64)> {
    let folder = RunFolder::new(run);
    let meta = folder.read_run_toml().unwrap();
    let loaded = isopach::run::new_run::loaded_recipe(&folder, &meta);
    let machine = isopach::run::measure::machine_of(&meta).unwrap();
    let rt = tokio::runtime::Runtime::new().unwrap();
    let bench = rt
        .block_on(isopach::bench::Bench::open(
            machine.as_ref(),
            &loaded,
            meta.run.seed,
        ))
        .unwrap();
    let truth = bench.virtual_wafer().expect("simulated spectrometer");
    let rows = isopach::map::sites_table::read_file(&run.join("sites.csv")).unwrap();
    rows.iter()
        .map(|r| {
            (
                r.site,
                r.thickness_nm[0],
                truth.thickness_nm(r.x_mm, r.y_mm).unwrap(),
            )
        })
        .collect()
}
