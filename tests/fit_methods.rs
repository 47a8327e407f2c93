//! The `fourier` and `extrema` methods and `auto`'s choice, on the reference fixtures
//! (PyPI `tmm`, scripts/make_tmm_fixtures.py) and on isopach's own spectra where a case
//! needs a pixel grid the fixtures do not have.

mod fit_common;

use fit_common::{fixture, recipe};
use isopach::fit::Fitter;
use isopach::optics::reflectance;
use isopach::spectrum::Spectrum;

fn oxide(method: &str, min: f64, max: f64) -> Fitter {
    Fitter::from_recipe(&recipe(&format!(
        "ambient = \"air\"\nsubstrate = \"si\"\nlayers = [ {{ material = \"sio2\", nominal_nm = 1000, min_nm = {min}, max_nm = {max} }} ]\nwavelength_nm = [420, 980]\nmethod = \"{method}\""
    )))
    .unwrap()
}

const THICK: [&str; 5] = ["001000p0", "001873p4", "005555p5", "010000p0", "015000p0"];

#[test]
fn fourier_on_reference_spectra() {
    // The substrate's reflection phase biases the Fourier peak a little: within
    // max(1 nm, 0.1 %) from 1 µm up (our target for this method, documented in docs/optics.md).
    let f = oxide("fourier", 100.0, 16000.0);
    for tag in THICK {
        for noisy in ["", "_noisy"] {
            let (s, truth) = fixture(&format!("sio2_si_{tag}nm{noisy}.csv"));
            let r = f.fit(&s);
            let (got, want) = (r.layers[0].thickness_nm, truth["sio2"]);
            assert_eq!(r.method, "fourier");
            assert!(
                (got - want).abs() <= (1.0f64).max(0.001 * want),
                "{tag}{noisy}: {got} vs {want}"
            );
        }
    }
    // 600 nm is near the resolution of this window (2/Δx ≈ 500 nm): flagged.
    let (s, _) = fixture("sio2_si_000600p0nm.csv");
    assert!(f.fit(&s).has_flag("below-resolution"));
    assert!(f.fourier_resolution_nm(&s.window(420.0, 980.0).wavelength_nm) > 400.0);
}

#[test]
fn extrema_on_reference_spectra() {
    let f = oxide("extrema", 100.0, 16000.0);
    for tag in ["000247p3", "000600p0"].iter().chain(THICK.iter()) {
        for noisy in ["", "_noisy"] {
            let (s, truth) = fixture(&format!("sio2_si_{tag}nm{noisy}.csv"));
            let r = f.fit(&s);
            let (got, want) = (r.layers[0].thickness_nm, truth["sio2"]);
            assert_eq!(r.method, "extrema");
            assert!(
                (got - want).abs() <= (2.0f64).max(0.001 * want),
                "{tag}{noisy}: {got} vs {want}"
            );
        }
    }
    // A 37 nm film has no fringe in this window: no thickness, flagged, never a guess.
    let (s, _) = fixture("sio2_si_000037p0nm.csv");
    let r = f.fit(&s);
    assert!(r.layers[0].thickness_nm.is_nan() && r.has_flag("no-fit") && !r.is_valid(0.0));
}

#[test]
fn auto_uses_fourier_when_fringes_are_undersampled() {
    // 40 µm of oxide seen by 600 pixels across 420–980 nm: ~1.4 pixels per fringe at 420 nm,
    // too few for the model search; the Fourier peak is still below Nyquist.
    let f = oxide("auto", 1.0, 50000.0);
    let w: Vec<f64> = (0..600).map(|i| 420.0 + 560.0 * i as f64 / 599.0).collect();
    let r = reflectance(&f.stack(&[40000.0]), &w, 0.0, 0.0);
    let s = Spectrum {
        wavelength_nm: w,
        reflectance: r,
    };
    let out = f.fit(&s);
    assert_eq!(out.method, "fourier");
    assert!(
        (out.layers[0].thickness_nm - 40000.0).abs() < 0.005 * 40000.0,
        "{out:?}"
    );
    // with a well-sampled spectrum, auto uses the model
    let (s, _) = fixture("sio2_si_005555p5nm.csv");
    assert_eq!(f.fit(&s).method, "model");
}
