//! Gauge studies on the simulated bench, run as a user runs them (`isopach gauge`, `resume`):
//! the static scatter against the Cramér–Rao bound and the fit's σ, the dynamic scatter
//! against the modelled positioning error times the local thickness gradient, P/T and the
//! verdict recomputed from `gauge.json`, and a study killed with SIGKILL and resumed.

mod run_common;

use isopach::run::events::Event;
use isopach::run::gauge::GaugeReport;
use run_common::{bench_dir, events, only_run, RECIPE};
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

/// The rel-9 recipe (600 nm oxide) with a spec window.
fn recipe_with_spec(dir: &Path, spec: &str) -> PathBuf {
    let path = dir.join(format!("gauge-{}.toml", spec.len()));
    std::fs::write(&path, format!("{RECIPE}[accept]\nspec_nm = {spec}\n")).unwrap();
    path
}

fn gauge_args(recipe: &Path, machine: &Path, runs: &Path, extra: &[&str]) -> Vec<String> {
    let mut v: Vec<String> = [
        "gauge",
        recipe.to_str().unwrap(),
        "--machine",
        machine.to_str().unwrap(),
        "--runs",
        runs.to_str().unwrap(),
    ]
    .map(String::from)
    .to_vec();
    v.extend(extra.iter().map(|s| s.to_string()));
    v
}

fn gauge(recipe: &Path, machine: &Path, runs: &Path, extra: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(gauge_args(recipe, machine, runs, extra))
        .output()
        .expect("run isopach")
}

fn report(runs: &Path) -> GaugeReport {
    let text = std::fs::read_to_string(only_run(runs).join("gauge.json")).unwrap();
    serde_json::from_str(&text).expect("gauge.json parses")
}

fn ok(o: &Output) {
    assert!(
        o.status.success(),
        "exit {:?}\n{}\n{}",
        o.status.code(),
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    );
}

/// Sample standard deviation.
fn sd(v: &[f64]) -> f64 {
    let m = v.iter().sum::<f64>() / v.len() as f64;
    (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64).sqrt()
}

#[test]
fn static_scatter_meets_the_cramer_rao_bound_and_the_fit_sigma() {
    let (dir, _, machine) = bench_dir("");
    // 560–900 nm, where the lamp and detector give nearly even light: the bound's white-noise
    // assumption holds (over 420–980 nm the blue end is several times noisier and an
    // unweighted fit sits above this form of the bound; gauge.json gives both, docs/gauge.md).
    let recipe = dir.path().join("even.toml");
    std::fs::write(
        &recipe,
        RECIPE.replace("wavelength_nm = [420, 980]", "wavelength_nm = [560, 900]"),
    )
    .unwrap();
    let runs = dir.path().join("runs");
    let o = gauge(
        &recipe,
        &machine,
        &runs,
        &[
            "--sites",
            "1,2,3",
            "--repeats",
            "12",
            "--passes",
            "2",
            "--seed",
            "7",
        ],
    );
    ok(&o);
    let r = report(&runs);
    assert_eq!(r.measured, 72);
    assert_eq!(r.planned, 72);
    let p = &r.pooled;
    let (sigma, bound, fit) = (
        p.repeatability_nm.unwrap(),
        p.crb_nm.unwrap(),
        p.fit_sigma_nm.unwrap(),
    );
    eprintln!("static: σ {sigma:.5} nm, Cramér–Rao bound {bound:.5} nm, fit σ {fit:.5} nm");
    for s in &r.sites {
        eprintln!(
            "  site {}: σ {:?}, bound {:?}, per-pixel bound {:?}, unweighted LS {:?}",
            s.site,
            s.scatter.repeatability_nm,
            s.scatter.crb_nm,
            s.crb_per_pixel_nm,
            s.unweighted_nm
        );
    }
    // A least-squares fit at this signal-to-noise is efficient: its scatter meets the bound
    // (Kay 1993, ch. 3; the model fit is the maximum-likelihood estimate for Gaussian noise)
    // — within 20 % as the issue asks; 66 degrees of freedom give σ to ±9 % (1σ).
    assert!(
        (sigma / bound - 1.0).abs() <= 0.2,
        "σ {sigma} vs bound {bound}"
    );
    // The fit's own σ comes from its residual, which also holds the reference's and the
    // dark's noise (common to the repeats of a pass): it may exceed the static scatter, not
    // by more than √2 (reference as noisy as the sample) plus the 20 % of the estimate.
    assert!(
        fit >= 0.8 * sigma && fit <= 1.2 * 2f64.sqrt() * sigma,
        "fit σ {fit} vs σ {sigma}"
    );
    // No motion between static repeats: not one line after the first move of a site.
    let measured: Vec<(usize, u32)> = events(&only_run(&runs))
        .iter()
        .filter_map(|e| match e {
            Event::SiteMeasured { site, attempt, .. } => Some((*site, *attempt)),
            _ => None,
        })
        .collect();
    assert_eq!(measured.len(), 72);
}

#[test]
fn dynamic_scatter_grows_by_positioning_error_times_the_gradient() {
    // A tilted virtual wafer and nothing else: the gradient is 4 nm/mm everywhere; the stage
    // lands within 20 µm (1σ per axis) of where it is sent.
    let tilt = [4.0, 0.0];
    let repeatability_mm = 0.02;
    let (dir, recipe, machine) = bench_dir(&format!(
        "[simulation.wafer]\ntilt_nm_per_mm = [{}, {}]\ndome_nm = 0\nripple_nm = 0\nedge_bead_nm = 0\nroughness_nm = 0\n",
        tilt[0], tilt[1]
    ));
    // The built-in file already has [simulation.controller]: the keys go into it.
    let text = std::fs::read_to_string(&machine).unwrap().replace(
        "[simulation.controller]",
        &format!(
            "[simulation.controller]\nrepeatability_mm = {repeatability_mm}\nbacklash_mm = 0.05"
        ),
    );
    std::fs::write(&machine, text).unwrap();
    let args = [
        "--sites",
        "1,2,3",
        "--repeats",
        "15",
        "--passes",
        "2",
        "--seed",
        "5",
    ];
    let static_runs = dir.path().join("static");
    ok(&gauge(&recipe, &machine, &static_runs, &args));
    let dynamic_runs = dir.path().join("dynamic");
    let mut dynamic = args.to_vec();
    dynamic.extend(["--mode", "dynamic", "--away-mm", "15"]);
    ok(&gauge(&recipe, &machine, &dynamic_runs, &dynamic));
    let s = report(&static_runs).pooled.repeatability_nm.unwrap();
    let d = report(&dynamic_runs).pooled.repeatability_nm.unwrap();
    // The local gradient, independently: central differences of the virtual wafer's true
    // thickness at each site (the wafer of the run's machine file and seed).
    let run = only_run(&dynamic_runs);
    let folder = isopach::run::folder::RunFolder::new(&run);
    let meta = folder.read_run_toml().unwrap();
    let loaded = isopach::run::new_run::loaded_recipe(&folder, &meta);
    let m = isopach::run::measure::machine_of(&meta).unwrap();
    let rt = tokio::runtime::Runtime::new().unwrap();
    let bench = rt
        .block_on(isopach::bench::Bench::open(
            m.as_ref(),
            &loaded,
            meta.run.seed,
        ))
        .unwrap();
    let wafer = bench.virtual_wafer().unwrap();
    let h = 0.5;
    let gradients: Vec<f64> = report(&dynamic_runs)
        .sites
        .iter()
        .map(|site| {
            let t = |dx: f64, dy: f64| wafer.thickness_nm(site.x_mm + dx, site.y_mm + dy).unwrap();
            let gx = (t(h, 0.0) - t(-h, 0.0)) / (2.0 * h);
            let gy = (t(0.0, h) - t(0.0, -h)) / (2.0 * h);
            gx.hypot(gy)
        })
        .collect();
    for g in &gradients {
        assert!((g - 4.0).abs() < 1e-6, "a pure tilt: {g}");
    }
    // A wafer-frame shift δ (normal, σ_p per axis; the rigid chuck transform keeps it normal
    // with the same σ) changes the thickness by ∇t·δ, of variance σ_p²|∇t|²; it adds to the
    // static variance. The final approach is always from the same side, so the backlash only
    // shifts every reading alike and adds no scatter.
    let g2 = gradients.iter().map(|g| g * g).sum::<f64>() / gradients.len() as f64;
    let expected = (s * s + repeatability_mm * repeatability_mm * g2).sqrt();
    eprintln!("static σ {s:.5} nm, dynamic σ {d:.5} nm, expected {expected:.5} nm");
    // 84 degrees of freedom: σ to ±8 % (1σ); 25 % is three of those.
    assert!(
        (d / expected - 1.0).abs() <= 0.25,
        "dynamic σ {d} vs {expected}"
    );
    assert!(d > 2.0 * s, "the positioning error dominates: {d} vs {s}");
}

#[test]
fn p_to_t_and_verdict_match_an_independent_computation_from_gauge_json() {
    let (dir, _, machine) = bench_dir("");
    for (spec, exit, verdict) in [
        ("[590, 610]", 0, None),
        // 0.2 nm of tolerance: 6σ of a ~0.03 nm gauge is most of it.
        ("[599.9, 600.1]", 3, Some("not fit")),
    ] {
        let recipe = recipe_with_spec(dir.path(), spec);
        let runs = dir.path().join(format!("pt{}", spec.len()));
        let o = gauge(
            &recipe,
            &machine,
            &runs,
            &[
                "--sites",
                "1,4",
                "--repeats",
                "6",
                "--passes",
                "3",
                "--seed",
                "9",
            ],
        );
        assert_eq!(
            o.status.code(),
            Some(exit),
            "{}",
            String::from_utf8_lossy(&o.stderr)
        );
        let r = report(&runs);
        // One-way random-effects ANOVA per site (passes as groups), written out again here.
        let mut ss = 0.0;
        let mut dof = 0usize;
        let mut between = Vec::new();
        for site in &r.sites {
            let mut means = Vec::new();
            for pass in 1..=3 {
                let x: Vec<f64> = site
                    .readings
                    .iter()
                    .filter(|x| x.pass == pass)
                    .map(|x| x.thickness_nm)
                    .collect();
                let m = x.iter().sum::<f64>() / x.len() as f64;
                ss += x.iter().map(|v| (v - m).powi(2)).sum::<f64>();
                dof += x.len() - 1;
                means.push(m);
            }
            between.push((sd(&means), site.readings.len() as f64 / 3.0));
        }
        let sigma_r = (ss / dof as f64).sqrt();
        // Reproducibility per site: s²(pass means) − σ_r,site²/n; pooled as the RMS.
        let repro: Vec<f64> = r
            .sites
            .iter()
            .zip(&between)
            .map(|(site, (s_means, n))| {
                let own = site.scatter.repeatability_nm.unwrap();
                (s_means * s_means - own * own / n).max(0.0)
            })
            .collect();
        let sigma_repro = (repro.iter().sum::<f64>() / repro.len() as f64).sqrt();
        let combined = sigma_r.hypot(sigma_repro);
        let [lo, hi] = r.capability.spec_nm.unwrap();
        let pt = 6.0 * combined / (hi - lo);
        let want = if pt <= 0.1 {
            "good"
        } else if pt <= 0.3 {
            "acceptable"
        } else {
            "not fit"
        };
        eprintln!("spec {spec}: σ {combined:.5} nm, P/T {pt:.4}, {want}");
        assert!((r.pooled.combined_nm.unwrap() - combined).abs() < 1e-9);
        assert!((r.capability.p_to_t.unwrap() - pt).abs() < 1e-9, "{pt}");
        assert_eq!(r.capability.verdict, want);
        if let Some(v) = verdict {
            assert_eq!(want, v);
        }
        let stdout = String::from_utf8_lossy(&o.stdout);
        assert!(stdout.contains(&format!("verdict: {want}")), "{stdout}");
        assert!(only_run(&runs).join("gauge.html").exists());
    }
}

#[test]
fn a_study_killed_with_sigkill_resumes_to_every_reading_once() {
    let (dir, recipe, machine) = bench_dir("");
    let args = [
        "--sites",
        "1,2",
        "--repeats",
        "8",
        "--passes",
        "3",
        "--mode",
        "reload",
        "--seed",
        "4",
    ];
    let full = dir.path().join("full");
    let t0 = Instant::now();
    ok(&gauge(&recipe, &machine, &full, &args));
    let dur = t0.elapsed().as_secs_f64();
    let mut resumed = 0;
    for (k, at) in [0.35, 0.6, 0.8].into_iter().enumerate() {
        let runs = dir.path().join(format!("k{k}"));
        let mut child = Command::new(env!("CARGO_BIN_EXE_isopach"))
            .args(gauge_args(&recipe, &machine, &runs, &args))
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_secs_f64(dur * at));
        let _ = child.kill();
        let _ = child.wait();
        let Ok(mut entries) = std::fs::read_dir(&runs) else {
            continue;
        };
        if !entries.any(|e| !e.unwrap().file_name().to_string_lossy().starts_with('.')) {
            continue;
        }
        let run = only_run(&runs);
        let o = Command::new(env!("CARGO_BIN_EXE_isopach"))
            .args(["resume", run.to_str().unwrap()])
            .output()
            .unwrap();
        ok(&o);
        resumed += 1;
        // Every planned acquisition journalled exactly once, across both sessions.
        let mut measured: Vec<(usize, u32)> = events(&run)
            .iter()
            .filter_map(|e| match e {
                Event::SiteMeasured { site, attempt, .. } => Some((*site, *attempt)),
                _ => None,
            })
            .collect();
        measured.sort();
        let want: Vec<(usize, u32)> = [1, 2]
            .into_iter()
            .flat_map(|s| (1..=24).map(move |a| (s, a)))
            .collect();
        assert_eq!(measured, want, "kill at {at}");
        let r = report(&runs);
        assert_eq!((r.measured, r.planned), (48, 48));
        assert_eq!(r.sites.iter().map(|s| s.readings.len()).sum::<usize>(), 48);
        assert!(r.pooled.reproducibility_nm.is_some());
    }
    assert!(
        resumed >= 2,
        "the kills landed after the run folder existed"
    );
}
