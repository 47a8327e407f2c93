//! The spectrometer's slit function (issue #12): a 40 µm oxide whose fringes (≈ 5 pixels a
//! period at 420 nm) are seen through a Gaussian slit 2 pixels wide loses fringe contrast;
//! with the resolution given the fit models it and the site is valid. The measurement is
//! simulated here independently of the fitter's slit code: isopach's transfer-matrix
//! reflectance (agrees with PyPI `tmm` to 1e-13, tests/optics_tmm_reference.rs) on a grid
//! 32× finer than the pixels, averaged with an untruncated Gaussian.

mod fit_common;

use fit_common::recipe;
use isopach::fit::Fitter;
use isopach::optics::reflectance;
use isopach::spectrum::Spectrum;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

fn thick_oxide() -> Fitter {
    Fitter::from_recipe(&recipe(
        "ambient = \"air\"\nsubstrate = \"si\"\nlayers = [ { material = \"sio2\", nominal_nm = 40000, min_nm = 35000, max_nm = 45000 } ]\nwavelength_nm = [420, 980]\nmethod = \"model\"",
    ))
    .unwrap()
}

/// 2048 pixels over 420–980 nm through a Gaussian slit of `fwhm_px` pixels, 0.3 % noise.
fn through_slit(f: &Fitter, d: f64, fwhm_px: f64) -> Spectrum {
    let step = 560.0 / 2047.0;
    let pixels: Vec<f64> = (0..2048).map(|i| 420.0 + step * i as f64).collect();
    let sub = 32;
    let sigma = fwhm_px * step / (8.0 * std::f64::consts::LN_2).sqrt();
    let reach = (5.0 * sigma / (step / sub as f64)).ceil() as i64;
    let fine: Vec<f64> = (-reach..(2048 * sub) as i64 + reach)
        .map(|k| 420.0 + step * k as f64 / sub as f64)
        .collect();
    let r = reflectance(&f.stack(&[d]), &fine, 0.0, 0.0);
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
    let noise = Normal::new(0.0, 0.003).unwrap();
    let reflectance = (0..2048)
        .map(|j| {
            let centre = reach + (j * sub) as i64;
            let (mut sum, mut wsum) = (0.0, 0.0);
            for k in centre - reach..=centre + reach {
                let w = (-0.5 * ((fine[k as usize] - pixels[j]) / sigma).powi(2)).exp();
                sum += w * r[k as usize];
                wsum += w;
            }
            sum / wsum + noise.sample(&mut rng)
        })
        .collect();
    Spectrum {
        wavelength_nm: pixels,
        reflectance,
    }
}

#[test]
fn a_thick_film_through_a_two_pixel_slit_is_valid_with_the_resolution_set() {
    let plain = thick_oxide();
    let s = through_slit(&plain, 40000.0, 2.0);
    let fwhm_nm = 2.0 * 560.0 / 2047.0;
    let with = thick_oxide().with_resolution_nm(fwhm_nm);
    let r = with.fit(&s);
    let l = &r.layers[0];
    eprintln!("with the slit: {r:?}");
    assert!(r.is_valid(0.95), "{r:?}");
    assert!((l.thickness_nm - 40000.0).abs() < 1.0, "{r:?}");
    assert!(
        (l.thickness_nm - 40000.0).abs() <= 3.0 * l.sigma_nm.max(0.05),
        "{r:?}"
    );
    assert!(!r.has_flag("residual-structure"), "{r:?}");
    // Without it the model's fringes are too deep: the residual shows structure and the
    // gof drops (0.974 against 0.999 here).
    let r0 = plain.fit(&s);
    eprintln!("without: {r0:?}");
    assert!(
        r0.has_flag("residual-structure") && r0.gof < r.gof - 0.01,
        "{r0:?}"
    );
}
