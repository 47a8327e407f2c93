//! Systematic terms (issue #12): a reference taken at another focus (an intensity scale
//! error) plus a slow tilt of the intensity across the window. With the recipe's
//! `fit_scale` and `fit_tilt` the thickness stays within 0.2 nm of the truth and within 3σ,
//! σ coming from the full covariance including both terms. Spectra from isopach's
//! transfer-matrix code (agrees with PyPI `tmm` to 1e-13, tests/optics_tmm_reference.rs).

mod fit_common;

use fit_common::recipe;
use isopach::fit::Fitter;
use isopach::optics::reflectance;
use isopach::spectrum::Spectrum;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

fn oxide(terms: &str) -> Fitter {
    Fitter::from_recipe(&recipe(&format!(
        "ambient = \"air\"\nsubstrate = \"si\"\nlayers = [ {{ material = \"sio2\", nominal_nm = 1000, min_nm = 100, max_nm = 3000 }} ]\nwavelength_nm = [420, 980]\nmethod = \"model\"\n{terms}"
    )))
    .unwrap()
}

/// 1 µm of oxide, 2048 pixels, the sample level `scale`·(1 + `tilt`·u) with u from −1 to +1
/// across the window, 0.3 % noise.
fn distorted(scale: f64, tilt: f64, seed: u64) -> Spectrum {
    let f = oxide("");
    let w: Vec<f64> = (0..2048)
        .map(|i| 420.0 + 560.0 * i as f64 / 2047.0)
        .collect();
    let r = reflectance(&f.stack(&[1000.0]), &w, 0.0, 0.0);
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 0.003).unwrap();
    let reflectance = w
        .iter()
        .zip(&r)
        .map(|(l, r)| {
            let u = (2.0 * l - 420.0 - 980.0) / 560.0;
            scale * (1.0 + tilt * u) * r + noise.sample(&mut rng)
        })
        .collect();
    Spectrum {
        wavelength_nm: w,
        reflectance,
    }
}

#[test]
fn scale_and_tilt_terms_recover_the_thickness() {
    let with = oxide("fit_scale = true\nfit_tilt = true");
    let without = oxide("");
    for (seed, tilt) in [(1, 0.03), (2, -0.03), (3, 0.03), (4, -0.03)] {
        let s = distorted(0.95, tilt, seed);
        let (r, terms) = with.try_fit_with_terms(&s, &Default::default()).unwrap();
        let l = &r.layers[0];
        let err = l.thickness_nm - 1000.0;
        eprintln!(
            "tilt {tilt:+}: {:.3} ± {:.3} nm, terms {terms:?}, flags {:?}",
            l.thickness_nm, l.sigma_nm, r.flags
        );
        assert!(err.abs() <= 0.2, "error {err} nm");
        assert!(
            err.abs() <= 3.0 * l.sigma_nm,
            "error {err} nm, σ {} nm",
            l.sigma_nm
        );
        assert!(
            r.is_valid(0.95) && !r.has_flag("residual-structure"),
            "{r:?}"
        );
        assert_eq!(terms.len(), 2);
        assert!((terms[0].value - 0.95).abs() < 0.005, "{terms:?}");
        assert!((terms[1].value - tilt).abs() < 0.005, "{terms:?}");
        // The same spectrum without the terms: the misfit shows as residual structure.
        let plain = without.fit(&s);
        assert!(plain.has_flag("residual-structure"), "{plain:?}");
    }
}

#[test]
fn sigma_grows_with_the_terms() {
    // The full covariance: freeing the scale and tilt can only widen the thickness's σ.
    let s = distorted(1.0, 0.0, 9);
    let plain = oxide("").fit(&s).layers[0].sigma_nm;
    let both = oxide("fit_scale = true\nfit_tilt = true").fit(&s).layers[0].sigma_nm;
    assert!(both >= plain * 0.999, "{both} vs {plain}");
}
