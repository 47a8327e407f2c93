//! Map-run benchmarks (a bench binary, `cargo bench --bench run`):
//! 1. wall time of a 49-site run on the simulated bench in real time against its lower bound
//!    (trapezoidal move times + settle + integration × averages per site), which shows that
//!    fitting and writing hide behind motion;
//! 2. planned path length against a 2-opt tour, for grid and custom plans;
//! 3. ordering time of large custom plans (up to the 10 000-site ceiling), and the path of the
//!    neighbour-list 2-opt used above 500 sites against exhaustive 2-opt.

use isopach::bench::machine::{parse, BUILTIN_SIMULATED};
use isopach::history::location::HistoryLocation;
use isopach::recipe::{self, pattern, schema::PatternSpec, Site};
use isopach::run::events::Event;
use isopach::run::measure::{self, Hooks, Which};
use isopach::run::new_run::{self, NewRun};
use isopach::run::plan;
use isopach::run::plan::Plan;
use isopach::run::stream::{RunEvent, Watcher};
use std::path::Path;
use std::sync::{Arc, Mutex};
use std::time::Instant;

fn main() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    println!("## Simulated bench in real time\n");
    println!("| recipe | sites | wall time of the sites | lower bound | ratio |");
    println!("|---|---|---|---|---|");
    let name = "oxide-150-49.toml";
    let (sites, wall, bound) = real_time_run(&root.join("recipes").join(name));
    println!(
        "| {name} | {sites} | {wall:.2} s | {bound:.2} s | {:.3} |",
        wall / bound
    );
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

/// Runs the recipe on the simulated bench at time scale 1; returns (sites, wall time from the
/// first site move to the last fit, lower bound of that span).
fn real_time_run(recipe_path: &Path) -> (usize, f64, f64) {
    let loaded = recipe::load(recipe_path).unwrap();
    // Status polled every 5 ms (controllers answer `?` in real time; common practice).
    let text = BUILTIN_SIMULATED
        .replace("time_scale = 25", "time_scale = 1")
        .replace("poll_interval_ms = 20", "poll_interval_ms = 5");
    let machine = parse(&text, Path::new("<bench>")).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let new = NewRun {
        wafer: "BENCH".into(),
        lot: String::new(),
        operator: String::new(),
        runs_dir: dir.path().to_path_buf(),
        machine: Some(toml::Table::try_from(&machine).unwrap()),
        seed: 7,
    };
    let plan = Plan::new(&loaded, Some(&machine))
        .unwrap()
        .checked()
        .unwrap();
    let (folder, meta) = new_run::create(&plan, &new).unwrap();
    let marks: Arc<Mutex<(Option<Instant>, Option<Instant>)>> = Arc::default();
    let m = marks.clone();
    let (_tx, cancel) = tokio::sync::watch::channel(false);
    let hooks = Hooks {
        confirm: Box::new(|_| Ok(())),
        prompt: None,
        subscribers: vec![Box::new(Watcher(move |e: &RunEvent| {
            let mut g = m.lock().unwrap();
            match e {
                RunEvent::Pass { pass: 0, .. } => g.0 = Some(Instant::now()),
                RunEvent::Journal(Event::SiteFitted { .. } | Event::SiteFailed { .. }) => {
                    g.1 = Some(Instant::now())
                }
                _ => {}
            }
        }))],
        cancel,
    };
    let rt = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
        .unwrap();
    let report = rt
        .block_on(measure::session(
            &plan,
            &folder,
            &meta,
            &Which::Missing,
            "bench",
            &HistoryLocation::from_setting(None, dir.path()).unwrap(),
            hooks,
        ))
        .unwrap();
    assert!(matches!(
        report.outcome,
        isopach::run::sequencer::Outcome::Finished
    ));
    let (start, end) = *marks.lock().unwrap();
    let wall = (end.unwrap() - start.unwrap()).as_secs_f64();
    (plan.sites().count(), wall, plan.duration_s)
}
