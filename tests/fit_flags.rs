//! Quality flags, recipe options (NA cone, user n,k tables, window warnings) through the
//! public Fitter API. Spectra come from isopach's transfer-matrix code, which agrees with
//! the PyPI `tmm` reference to 1e-13 (tests/optics_tmm_reference.rs).

mod fit_common;

use fit_common::recipe;
use isopach::fit::Fitter;
use isopach::optics::reflectance;
use isopach::spectrum::{Counts, RawSpectrum, Spectrum};
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

fn oxide(extra: &str, min: f64, max: f64, window: [f64; 2]) -> Fitter {
    Fitter::from_recipe(&recipe(&format!(
        "ambient = \"air\"\nsubstrate = \"si\"\nlayers = [ {{ material = \"sio2\", nominal_nm = {nominal}, min_nm = {min}, max_nm = {max} }} ]\nwavelength_nm = [{}, {}]\nmethod = \"model\"\n{extra}",
        window[0],
        window[1],
        nominal = 0.5 * (min + max)
    )))
    .unwrap()
}

fn synth(
    f: &Fitter,
    d: f64,
    window: [f64; 2],
    pixels: usize,
    na: f64,
    noise: f64,
    seed: u64,
) -> Spectrum {
    let w: Vec<f64> = (0..pixels)
        .map(|i| window[0] + (window[1] - window[0]) * i as f64 / (pixels - 1) as f64)
        .collect();
    let mut r = reflectance(&f.stack(&[d]), &w, 0.0, na);
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    if noise > 0.0 {
        let n = Normal::new(0.0, noise).unwrap();
        r.iter_mut().for_each(|v| *v += n.sample(&mut rng));
    }
    Spectrum {
        wavelength_nm: w,
        reflectance: r,
    }
}

#[test]
fn at_bound_when_the_truth_lies_outside_the_range() {
    // A 905 nm film searched up to 900 nm: the best the range offers is its upper end.
    let f = oxide("", 100.0, 900.0, [420.0, 980.0]);
    let r = f.fit(&synth(&f, 905.0, [420.0, 980.0], 800, 0.0, 0.0, 1));
    assert!(
        r.has_flag("at-bound") && r.layers[0].thickness_nm == 900.0,
        "{r:?}"
    );
    let r = f.fit(&synth(&f, 700.0, [420.0, 980.0], 800, 0.0, 0.0, 1));
    assert!(
        !r.has_flag("at-bound") && (r.layers[0].thickness_nm - 700.0).abs() < 0.01,
        "{r:?}"
    );
}

#[test]
fn ambiguous_when_neighbouring_orders_fit_within_noise() {
    // A 12 nm window on a 3 µm film: neighbouring fringe orders differ by ~0.1 rad of phase
    // drift across it, which 3 % noise hides.
    let f = oxide("", 2000.0, 4000.0, [600.0, 612.0]);
    let r = f.fit(&synth(&f, 3000.0, [600.0, 612.0], 200, 0.0, 0.03, 5));
    assert!(r.has_flag("ambiguous"), "{r:?}");
    // the same film over a wide window is not ambiguous
    let f = oxide("", 2000.0, 4000.0, [420.0, 980.0]);
    let r = f.fit(&synth(&f, 3000.0, [420.0, 980.0], 2048, 0.0, 0.003, 5));
    assert!(
        !r.has_flag("ambiguous") && (r.layers[0].thickness_nm - 3000.0).abs() < 1.0,
        "{r:?}"
    );
}

#[test]
fn objective_cone_is_modelled() {
    // 2 µm of oxide seen through NA 0.3: fitted with the cone it is exact; without, the
    // fringes' shift fools the fit by several nm.
    let with = oxide("na = 0.3", 100.0, 3000.0, [420.0, 980.0]);
    let s = synth(&with, 2000.0, [420.0, 980.0], 1500, 0.3, 0.0, 1);
    let r = with.fit(&s);
    assert!((r.layers[0].thickness_nm - 2000.0).abs() < 0.05, "{r:?}");
    let without = oxide("", 100.0, 3000.0, [420.0, 980.0]);
    let r0 = without.fit(&s);
    assert!((r0.layers[0].thickness_nm - 2000.0).abs() > 2.0, "{r0:?}");
}

#[test]
fn oblique_incidence_is_modelled() {
    let f = oxide("incidence_deg = 45", 100.0, 3000.0, [420.0, 980.0]);
    let w: Vec<f64> = (0..1200)
        .map(|i| 420.0 + 560.0 * i as f64 / 1199.0)
        .collect();
    let s = Spectrum {
        reflectance: reflectance(&f.stack(&[1500.0]), &w, 45.0, 0.0),
        wavelength_nm: w,
    };
    let r = f.fit(&s);
    assert!((r.layers[0].thickness_nm - 1500.0).abs() < 0.01, "{r:?}");
}

#[test]
fn counts_flags_saturation_and_weak_signal() {
    let f = oxide("", 100.0, 3000.0, [420.0, 980.0]);
    let s = synth(&f, 800.0, [400.0, 1000.0], 1200, 0.0, 0.0, 1);
    let r_si = f.reference_reflectance("si", &s.wavelength_nm).unwrap();
    let raw = |level: f64, clip: Option<f64>| {
        let c = |v: Vec<f64>| Counts {
            wavelength_nm: s.wavelength_nm.clone(),
            counts: v,
        };
        let dark: Vec<f64> = (0..s.len()).map(|i| 500.0 + (i % 7) as f64).collect();
        let reference: Vec<f64> = dark.iter().map(|d| d + level).collect();
        let sample: Vec<f64> = s
            .reflectance
            .iter()
            .zip(&r_si)
            .zip(&dark)
            .map(|((r, rs), d)| {
                let v = d + level * r / rs;
                clip.map_or(v, |c| v.min(c))
            })
            .collect();
        RawSpectrum {
            sample: c(sample),
            dark: c(dark),
            reference: c(reference),
        }
    };
    let ok = f.fit_raw(&raw(40000.0, None), "si").unwrap();
    assert!(
        ok.flags.is_empty() && (ok.layers[0].thickness_nm - 800.0).abs() < 0.01,
        "{ok:?}"
    );
    let sat = f.fit_raw(&raw(40000.0, Some(40000.0)), "si").unwrap();
    assert!(sat.has_flag("saturated") && !sat.is_valid(0.0), "{sat:?}");
    let weak = f.fit_raw(&raw(30.0, None), "si").unwrap();
    assert!(weak.has_flag("low-signal"), "{weak:?}");
    assert!(f.reference_reflectance("unobtainium", &[500.0]).is_err());
}

#[test]
fn user_table_material_and_range_warning() {
    let dir = tempfile::tempdir().unwrap();
    // A table of a constant-index film, given only over 400–1000 nm.
    let path = fit_common::table_film_recipe(
        dir.path(),
        "# test film\nwavelength_nm,n,k\n400,1.7,0\n700,1.7,0\n1000,1.7,0\n",
        "material = \"film\", nominal_nm = 500, min_nm = 50, max_nm = 1500",
        [380, 900],
    );
    let loaded = isopach::recipe::load(&path).unwrap();
    let f = Fitter::from_recipe(&loaded).unwrap();
    assert!(
        f.warnings()
            .iter()
            .any(|w| w.contains("film") && w.contains("400–1000")),
        "{:?}",
        f.warnings()
    );
    let w: Vec<f64> = (0..900).map(|i| 380.0 + 520.0 * i as f64 / 899.0).collect();
    let s = Spectrum {
        reflectance: reflectance(&f.stack(&[654.0]), &w, 0.0, 0.0),
        wavelength_nm: w,
    };
    assert!((f.fit(&s).layers[0].thickness_nm - 654.0).abs() < 0.01);
}

#[test]
fn a_window_without_pixels_is_a_no_fit_not_a_panic() {
    let f = oxide("", 100.0, 3000.0, [420.0, 980.0]);
    let s = Spectrum {
        wavelength_nm: vec![1000.0, 1001.0, 1002.0],
        reflectance: vec![0.3; 3],
    };
    let r = f.fit(&s);
    assert!(r.has_flag("no-fit") && !r.is_valid(0.0));
    let e = f.try_fit(&s, &Default::default()).unwrap_err().to_string();
    assert!(e.contains("window 420–980 nm"), "{e}");
}

#[test]
fn scale_factor_absorbs_a_reference_level_error() {
    // The sample level is 4 % low (reference taken at another focus): without the scale
    // factor the fit is poor; with it the thickness is exact and the fit perfect.
    let f = oxide("", 100.0, 3000.0, [420.0, 980.0]);
    let mut s = synth(&f, 1500.0, [420.0, 980.0], 1200, 0.0, 0.0, 1);
    s.reflectance.iter_mut().for_each(|r| *r *= 0.96);
    let plain = f.fit(&s);
    let scaled = oxide("", 100.0, 3000.0, [420.0, 980.0])
        .with_scale_factor(true)
        .fit(&s);
    assert!(
        scaled.gof > 0.999_999 && (scaled.layers[0].thickness_nm - 1500.0).abs() < 0.01,
        "{scaled:?}"
    );
    assert!(plain.gof < scaled.gof, "{plain:?}");
}

#[test]
fn three_fitted_layers() {
    // Oxide–nitride–oxide on Si, all three fitted.
    let f = Fitter::from_recipe(&recipe(
        "ambient = \"air\"\nsubstrate = \"si\"\nlayers = [\n { material = \"sio2\", nominal_nm = 60, min_nm = 20, max_nm = 120 },\n { material = \"si3n4\", nominal_nm = 80, min_nm = 40, max_nm = 140 },\n { material = \"sio2\", nominal_nm = 300, min_nm = 200, max_nm = 500 },\n]\nwavelength_nm = [400, 1000]\nmethod = \"model\"",
    ))
    .unwrap();
    let w: Vec<f64> = (0..1200).map(|i| 400.0 + 0.5 * i as f64).collect();
    let truth = [47.0, 95.0, 321.0];
    let s = Spectrum {
        reflectance: reflectance(&f.stack(&truth), &w, 0.0, 0.0),
        wavelength_nm: w,
    };
    let r = f.fit(&s);
    for (l, t) in r.layers.iter().zip(truth) {
        assert!((l.thickness_nm - t).abs() < 0.05, "{r:?}");
    }
}
