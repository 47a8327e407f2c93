//! Map-run benchmarks (a bench binary, `cargo bench --bench run`):
//! 1. the whole `isopach run` command (process start to map written) on the simulated bench in
//!    real time with default settings, against the plan's lower bound (trapezoidal moves along
//!    every leg, the reference's dark and reference, settle + integration × averages per site)
//!    plus the fixed costs measured as whole commands (start-up, outputs), which shows that
//!    fitting and writing hide behind motion;
//! 2. planned path length against a 2-opt tour, for grid and custom plans;
//! 3. ordering time of large custom plans (up to the 10 000-site ceiling), and the path of the
//!    neighbour-list 2-opt used above 500 sites against exhaustive 2-opt;
//! 4. the whole `isopach refit` command on a dense run (spectra per second, on disk).

use isopach::bench::machine::{parse, BUILTIN_SIMULATED};
use isopach::recipe::{self, pattern, schema::PatternSpec, Site};
use isopach::run::plan;
use isopach::run::plan::Plan;
use std::path::Path;
use std::time::Instant;

fn main() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let load = std::fs::read_to_string("/proc/loadavg").unwrap_or_default();
    println!("## The whole `isopach run` command on the simulated bench in real time\n");
    println!("Load average before: {}\n", load.trim());
    println!("| recipe | sites | wall, median [range] | CPU, median [range] | kinematic bound | fixed: start-up + outputs | wall / (bound + fixed) |");
    println!("|---|---|---|---|---|---|---|");
    whole_command_runs(&root.join("recipes").join("oxide-150-49.toml"), 3);
    println!("\n## The whole `isopach refit` command on a dense run, on disk\n");
    println!("| spectra | refit wall, median [range] | CPU, median | spectra/s, whole command | fit phase, median [range] | spectra/s, fit phase | render alone |");
    println!("|---|---|---|---|---|---|---|");
    refit_runs(&root.join("recipes").join("oxide-150-49.toml"), 5);
    println!("\n## Planned path against a 2-opt tour\n");
    println!("| plan | sites | planned path | 2-opt tour | ratio |");
    println!("|---|---|---|---|---|");
    for name in ["resist-100-grid.toml", "stack-200-diameter.toml"] {
        let loaded = recipe::load(&root.join("recipes").join(name)).unwrap();
        path_row(name, &loaded.recipe.pattern, &loaded.sites());
    }
    // A scattered custom plan: 60 pseudo-random sites on a 200 mm wafer.
    let mut x: u64 = 0x2545_f491_4f6c_dd1d;
    let mut rnd = || {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        (x % 10_000) as f64 / 10_000.0
    };
    let pts: Vec<[f64; 2]> = (0..60)
        .map(|_| {
            let (r, a) = (90.0 * rnd().sqrt(), std::f64::consts::TAU * rnd());
            [r * a.cos(), r * a.sin()]
        })
        .collect();
    let spec = PatternSpec::Custom { sites_mm: pts };
    let wafer = recipe::Wafer::from_spec(&recipe::schema::WaferSpec {
        diameter_mm: 200.0,
        edge_exclusion_mm: 3.0,
        orientation: recipe::schema::OrientationKind::Notch,
        orientation_angle_deg: 270.0,
    });
    path_row(
        "custom, 60 scattered sites",
        &spec,
        &pattern::sites(&spec, &wafer),
    );
    println!("\n## Large custom plans\n");
    println!("| sites | ordering time | planned path | exhaustive 2-opt path | ratio |");
    println!("|---|---|---|---|---|");
    for n in [1_000, 2_000, 10_000] {
        let sites: Vec<Site> = (1..=n)
            .map(|number| {
                let (r, a) = (90.0 * rnd().sqrt(), std::f64::consts::TAU * rnd());
                Site {
                    number,
                    x_mm: r * a.cos(),
                    y_mm: r * a.sin(),
                }
            })
            .collect();
        let spec = PatternSpec::Custom {
            sites_mm: sites.iter().map(|s| [s.x_mm, s.y_mm]).collect(),
        };
        let t0 = Instant::now();
        let planned = plan::path_length((0.0, 0.0), &plan::order(&spec, &sites));
        let took = t0.elapsed().as_secs_f64();
        // Exhaustive 2-opt grows about n² per sweep: measured up to 2 000 sites only.
        let (full, ratio) = if n <= 2_000 {
            let tour = plan::path_length(
                (0.0, 0.0),
                &plan::order::two_opt_exhaustive(plan::nearest_neighbour(&sites, (0.0, 0.0))),
            );
            (format!("{tour:.0} mm"), format!("{:.3}", planned / tour))
        } else {
            ("—".into(), "—".into())
        };
        println!(
            "| {n} | {:.0} ms | {planned:.0} mm | {full} | {ratio} |",
            took * 1e3
        );
    }
}

/// The whole `isopach refit` command, `repeats` times, on a run of the oxide recipe made dense
/// (a 4 mm grid: 964 sites) on a fast simulated bench (100× real time), in a folder on disk beside the
/// build (not a RAM file system); against `render` of the same run, the outputs part of it.
fn refit_runs(recipe_path: &Path, repeats: usize) {
    let text = std::fs::read_to_string(recipe_path).unwrap().replace(
        "kind = \"standard\"\nsites = 49",
        "kind = \"grid\"\npitch_mm = 4",
    );
    let scratch = Path::new(env!("CARGO_TARGET_TMPDIR"));
    let dir = tempfile::tempdir_in(scratch).unwrap();
    let recipe = dir.path().join("dense.toml");
    std::fs::write(&recipe, text).unwrap();
    let machine = dir.path().join("fast.toml");
    std::fs::write(
        &machine,
        // A steady lamp: a long virtual run with the default drift and no lamp-drift
        // references fails sites, and this measures refitting, not the spectra's quality.
        BUILTIN_SIMULATED.replace("time_scale = 25", "time_scale = 100")
            + "\n[simulation.spectrometer]\nlamp_drift_pct_per_hour = 0\n",
    )
    .unwrap();
    let runs = dir.path().join("runs");
    let (r, m, out) = (
        recipe.to_str().unwrap(),
        machine.to_str().unwrap(),
        runs.to_str().unwrap(),
    );
    timed_command(&[
        "run",
        r,
        "--machine",
        m,
        "--wafer",
        "D1",
        "--runs",
        out,
        "--seed",
        "3",
    ]);
    let run = std::fs::read_dir(&runs)
        .unwrap()
        .next()
        .unwrap()
        .unwrap()
        .path();
    let run = run.to_str().unwrap();
    let mut spectra = 0;
    let (mut walls, mut cpus, mut phases, mut renders) = (vec![], vec![], vec![], vec![]);
    for _ in 0..repeats {
        let (w, c, err) = timed_command_err(&["refit", run]);
        walls.push(w);
        cpus.push(c);
        // `fitted N spectra in X s (…)`: reading, normalising, fitting and journalling.
        let (n, phase) = err
            .lines()
            .find_map(|l| {
                let (n, rest) = l.strip_prefix("fitted ")?.split_once(" spectra in ")?;
                Some((
                    n.parse::<usize>().ok()?,
                    rest.split(' ').next()?.parse::<f64>().ok()?,
                ))
            })
            .expect("refit prints its fit phase");
        spectra = n;
        phases.push(phase);
        renders.push(timed_command(&["render", run]).0);
    }
    let (wall, lo, hi) = spread(&walls);
    let (cpu, _, _) = spread(&cpus);
    let (phase, p_lo, p_hi) = spread(&phases);
    let (render, _, _) = spread(&renders);
    println!(
        "| {spectra} | {wall:.3} s [{lo:.3}–{hi:.3}] | {cpu:.3} s | {:.0} | {phase:.3} s [{p_lo:.3}–{p_hi:.3}] | {:.0} | {render:.3} s |",
        spectra as f64 / wall,
        spectra as f64 / phase
    );
}

/// Planned path vs a 2-opt tour (nearest neighbour from the centre, then 2-opt).
fn path_row(name: &str, spec: &PatternSpec, sites: &[Site]) {
    let planned = plan::path_length((0.0, 0.0), &plan::order(spec, sites));
    let tour = plan::path_length(
        (0.0, 0.0),
        &plan::two_opt(plan::nearest_neighbour(sites, (0.0, 0.0))),
    );
    println!(
        "| {name} | {} | {planned:.0} mm | {tour:.0} mm | {:.3} |",
        sites.len(),
        planned / tour
    );
}

/// Wall and CPU seconds of one whole command, from spawn to exit (CPU: the child's user +
/// system time, from `getrusage(RUSAGE_CHILDREN)` around it).
fn timed_command(args: &[&str]) -> (f64, f64) {
    let (wall, cpu, _) = timed_command_err(args);
    (wall, cpu)
}

/// [`timed_command`], with what the command wrote on stderr.
fn timed_command_err(args: &[&str]) -> (f64, f64, String) {
    let cpu = || {
        // SAFETY: rusage is plain data the kernel fills.
        let mut u: libc::rusage = unsafe { std::mem::zeroed() };
        unsafe { libc::getrusage(libc::RUSAGE_CHILDREN, &mut u) };
        let s = |t: libc::timeval| t.tv_sec as f64 + t.tv_usec as f64 * 1e-6;
        s(u.ru_utime) + s(u.ru_stime)
    };
    let (c0, t0) = (cpu(), Instant::now());
    let o = std::process::Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(args)
        .output()
        .unwrap();
    let wall = t0.elapsed().as_secs_f64();
    assert!(
        o.status.success(),
        "isopach {args:?}: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    (
        wall,
        cpu() - c0,
        String::from_utf8_lossy(&o.stderr).into_owned(),
    )
}

/// Median, min and max of `v`.
fn spread(v: &[f64]) -> (f64, f64, f64) {
    let mut v = v.to_vec();
    v.sort_by(f64::total_cmp);
    (v[v.len() / 2], v[0], v[v.len() - 1])
}

/// The whole `isopach run` command on the built-in simulated bench in real time (time scale 1,
/// every other setting the default), from process start to the map written, `repeats` times;
/// against the plan's kinematic bound plus the fixed costs measured as whole commands too:
/// start-up and planning (`run --dry-run`) and the final outputs (`render` of the finished
/// run: sites.csv, summary.json, SVG and PNG maps).
fn whole_command_runs(recipe_path: &Path, repeats: usize) {
    let loaded = recipe::load(recipe_path).unwrap();
    let text = BUILTIN_SIMULATED.replace("time_scale = 25", "time_scale = 1");
    let machine = parse(&text, Path::new("<bench>")).unwrap();
    let bound = Plan::new(&loaded, Some(&machine))
        .unwrap()
        .checked()
        .unwrap()
        .duration_s;
    let dir = tempfile::tempdir().unwrap();
    let machine_path = dir.path().join("real-time.toml");
    std::fs::write(&machine_path, &text).unwrap();
    let (r, m) = (
        recipe_path.to_str().unwrap(),
        machine_path.to_str().unwrap(),
    );
    let runs = dir.path().join("runs");
    let runs = runs.to_str().unwrap();
    let (mut walls, mut cpus, mut starts, mut outputs) = (vec![], vec![], vec![], vec![]);
    for i in 0..repeats {
        starts.push(timed_command(&["run", r, "--machine", m, "--dry-run"]).0);
        let wafer = format!("B{i}");
        let (w, c) = timed_command(&[
            "run",
            r,
            "--machine",
            m,
            "--wafer",
            &wafer,
            "--runs",
            runs,
            "--yes",
        ]);
        walls.push(w);
        cpus.push(c);
        let run = std::fs::read_dir(runs)
            .unwrap()
            .filter_map(|e| e.ok().map(|e| e.path()))
            .find(|p| p.to_string_lossy().ends_with(&format!("-{wafer}")))
            .unwrap();
        outputs.push(timed_command(&["render", run.to_str().unwrap()]).0);
    }
    let (wall, wall_lo, wall_hi) = spread(&walls);
    let (cpu, cpu_lo, cpu_hi) = spread(&cpus);
    let (start, _, _) = spread(&starts);
    let (out, _, _) = spread(&outputs);
    let fixed = start + out;
    let name = recipe_path.file_name().unwrap().to_string_lossy();
    println!(
        "| {name} | {} | {wall:.2} s [{wall_lo:.2}–{wall_hi:.2}] | {cpu:.2} s [{cpu_lo:.2}–{cpu_hi:.2}] | {bound:.2} s | {start:.3} s + {out:.3} s | {:.3} |",
        loaded.sites().len(),
        wall / (bound + fixed)
    );
}
