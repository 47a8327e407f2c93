//! The built-in simulated bench end to end: the real G-code stage driving the virtual
//! controller, the virtual spectrometer reading the stage's position and rendering the
//! virtual wafer through the optics module.

use isopach::bench::Bench;
use isopach::fit::Fitter;
use isopach::optics;
use isopach::recipe::{self, LoadedRecipe, Site};
use isopach::spectrum::{normalise, Counts, RawSpectrum};
use std::path::Path;

fn recipe(name: &str) -> LoadedRecipe {
    recipe::load(
        &Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("recipes")
            .join(name),
    )
    .unwrap()
}

fn net(c: &Counts, d: &Counts) -> f64 {
    c.counts.iter().zip(&d.counts).map(|(a, b)| a - b).sum()
}

#[tokio::test(start_paused = true)]
async fn counts_scale_with_integration_time_and_saturate() {
    let r = recipe("oxide-150-49.toml");
    let mut b = Bench::open(None, &r, 1).await.unwrap();
    b.move_to_site(&Site {
        number: 1,
        x_mm: 0.0,
        y_mm: 0.0,
    })
    .await
    .unwrap();
    let s = &mut b.spectrometer;
    let (d10, d20) = (
        s.dark(10.0, 16).await.unwrap(),
        s.dark(20.0, 16).await.unwrap(),
    );
    let (c10, c20) = (
        s.acquire(10.0, 16).await.unwrap(),
        s.acquire(20.0, 16).await.unwrap(),
    );
    let ratio = net(&c20, &d20) / net(&c10, &d10);
    assert!(
        (ratio - 2.0).abs() < 0.01,
        "signal doubles with the integration time: {ratio}"
    );
    // Dark level rises with the dark current (0.5 counts/ms by default): 5 counts per pixel.
    let dd = d20
        .counts
        .iter()
        .zip(&d10.counts)
        .map(|(a, b)| a - b)
        .sum::<f64>()
        / d10.counts.len() as f64;
    assert!((dd - 5.0).abs() < 0.5, "dark current: {dd}");
    let sat = s.reference(2000.0, 1).await.unwrap();
    let top = sat.counts.iter().cloned().fold(0.0, f64::max);
    assert_eq!(top, 65535.0, "long integrations clip at full scale");
}

#[tokio::test(start_paused = true)]
async fn seeded_noise_is_reproducible() {
    let r = recipe("oxide-150-49.toml");
    // Each bench is opened and read in turn, so each spectrum is taken at the same virtual
    // time after its bench opened: the virtual lamp drifts with that time.
    let reference = |seed| {
        let r = &r;
        async move {
            let mut bench = Bench::open(None, r, seed).await.unwrap();
            bench.spectrometer.reference(20.0, 1).await.unwrap()
        }
    };
    let x = reference(7).await;
    let y = reference(7).await;
    let z = reference(8).await;
    assert_eq!(x, y);
    assert_ne!(x, z);
}

#[tokio::test(start_paused = true)]
async fn fitting_its_spectrum_recovers_the_virtual_wafers_thickness() {
    for name in ["oxide-150-49.toml", "resist-100-grid.toml"] {
        let r = recipe(name);
        let fitter = Fitter::from_recipe(&r).unwrap();
        let mut b = Bench::open(None, &r, 3).await.unwrap();
        let sites = r.sites();
        for site in [sites[0], sites[sites.len() / 2], sites[sites.len() - 1]] {
            let truth = b
                .virtual_wafer()
                .unwrap()
                .thickness_nm(site.x_mm, site.y_mm)
                .unwrap();
            b.move_to_site(&site).await.unwrap();
            let s = &mut b.spectrometer;
            let raw = RawSpectrum {
                dark: s.dark(20.0, 4).await.unwrap(),
                reference: s.reference(20.0, 4).await.unwrap(),
                sample: s.acquire(20.0, 4).await.unwrap(),
            };
            let fit = fitter.fit_raw(&raw, &b.machine.reference.material).unwrap();
            let found = fit.layers[0].thickness_nm;
            // 0.1 % of the thickness: the virtual spectrum is the model plus detector noise.
            assert!(
                (found - truth).abs() < 1e-3 * truth,
                "{name} site {}: fitted {found:.2} nm ({}) vs virtual wafer {truth:.2} nm",
                site.number,
                fit.method
            );
            assert!(
                fit.gof > 0.99,
                "{name} site {}: gof {}",
                site.number,
                fit.gof
            );
        }
    }
}

#[tokio::test(start_paused = true)]
async fn off_the_wafer_the_probe_sees_the_chuck_and_limits_still_apply() {
    let r = recipe("oxide-150-49.toml");
    let mut b = Bench::open(None, &r, 3).await.unwrap();
    assert!(b.is_simulated());
    let off = Site {
        number: 99,
        x_mm: 0.0,
        y_mm: 80.0,
    };
    assert!(b
        .virtual_wafer()
        .unwrap()
        .thickness_nm(off.x_mm, off.y_mm)
        .is_none());
    b.move_to_site(&off).await.unwrap();
    let s = &mut b.spectrometer;
    let (c, d, f) = (
        s.acquire(20.0, 8).await.unwrap(),
        s.dark(20.0, 8).await.unwrap(),
        s.reference(20.0, 8).await.unwrap(),
    );
    let lib = r.material_library().unwrap();
    let si = optics::Stack::bare(
        lib.require("air").unwrap().clone(),
        lib.require("si").unwrap().clone(),
    );
    let spectrum = normalise(
        &c,
        &d,
        &f,
        &optics::reflectance(&si, &c.wavelength_nm, 0.0, 0.0),
    )
    .unwrap();
    // Default chuck n = 2.8, k = 3.4: normal-incidence Fresnel R = ((n−1)² + k²)/((n+1)² + k²)
    // (Born & Wolf §13.2) = 14.8/26 ≈ 0.569 at every wavelength, no thin-film fringes.
    let fresnel = (1.8f64.powi(2) + 3.4f64.powi(2)) / (3.8f64.powi(2) + 3.4f64.powi(2));
    for (w, r) in spectrum
        .wavelength_nm
        .iter()
        .zip(&spectrum.reflectance)
        .step_by(16)
    {
        assert!(
            (r - fresnel).abs() < 0.02,
            "chuck at {w} nm: R = {r}, Fresnel {fresnel}"
        );
    }
    let far = Site {
        number: 100,
        x_mm: 300.0,
        y_mm: 0.0,
    };
    let e = b.move_to_site(&far).await.unwrap_err();
    assert!(e.to_string().contains("site 100"), "{e}");
}

#[tokio::test(start_paused = true)]
async fn a_49_site_plan_runs_on_the_built_in_bench() {
    let r = recipe("oxide-150-49.toml");
    let mut b = Bench::open(None, &r, 5).await.unwrap();
    let sites = r.sites();
    for s in &sites {
        b.stage_position(s)
            .expect("every site inside the built-in travel");
    }
    for s in &sites {
        let p = b.move_to_site(s).await.unwrap().unwrap();
        let want = b.transform.to_stage(s.x_mm, s.y_mm);
        assert!((p[0] - want[0]).abs() < 0.01 && (p[1] - want[1]).abs() < 0.01);
        b.spectrometer.acquire(20.0, 4).await.unwrap();
    }
}
