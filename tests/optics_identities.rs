//! Physical identities of the transfer-matrix reflectance (property tests).

use isopach::optics::{amplitude, reflectance, transmittance, Material, Polarisation, Stack};
use proptest::prelude::*;

fn lossless_stack(ns: &[f64], ds: &[f64], n_sub: f64) -> Stack {
    let mut s = Stack::bare(
        Material::constant("air", 1.0, 0.0),
        Material::constant("sub", n_sub, 0.0),
    );
    for (i, (n, d)) in ns.iter().zip(ds).enumerate() {
        s = s.with_layer(Material::constant(format!("l{i}"), *n, 0.0), *d);
    }
    s
}

proptest! {
    // Energy conservation: with no absorption, R + T = 1 (Macleod, Thin-Film Optical
    // Filters, §2: the net irradiance is continuous through lossless layers).
    #[test]
    fn r_plus_t_is_one_for_lossless_stacks(
        ns in prop::collection::vec(1.2f64..3.5, 1..4),
        ds in prop::collection::vec(0.0f64..3000.0, 3),
        n_sub in 1.3f64..4.0,
        lam in 300.0f64..1500.0,
        theta in 0.0f64..1.2,
        p in prop::bool::ANY,
    ) {
        let s = lossless_stack(&ns, &ds[..ns.len()], n_sub);
        let pol = if p { Polarisation::P } else { Polarisation::S };
        let r = amplitude(&s, lam, theta, pol).norm_sqr();
        let t = transmittance(&s, lam, theta, pol);
        prop_assert!((r + t - 1.0).abs() < 1e-10, "R={r} T={t}");
    }

    // A layer of zero thickness changes nothing, whatever its index (even absorbing).
    #[test]
    fn zero_thickness_layer_changes_nothing(
        n in 1.0f64..5.0, k in 0.0f64..3.0, d in 0.0f64..2000.0,
        lam in 300.0f64..1500.0, theta_deg in 0.0f64..60.0,
    ) {
        let base = Stack::bare(Material::constant("air", 1.0, 0.0), Material::constant("si", 3.8, 0.02))
            .with_layer(Material::constant("ox", 1.46, 0.0), d);
        let with_ghost = base.clone().with_layer(Material::constant("ghost", n, k), 0.0);
        let a = reflectance(&base, &[lam], theta_deg, 0.0)[0];
        let b = reflectance(&with_ghost, &[lam], theta_deg, 0.0)[0];
        prop_assert!((a - b).abs() < 1e-13);
    }

    // A lossless layer one half wave thick is absent at its design wavelength (Macleod §2).
    #[test]
    fn half_wave_layer_is_absent(n in 1.2f64..3.0, lam in 400.0f64..1000.0) {
        let bare = Stack::bare(Material::constant("air", 1.0, 0.0), Material::constant("g", 1.52, 0.0));
        let hw = bare.clone().with_layer(Material::constant("f", n, 0.0), lam / (2.0 * n));
        let a = reflectance(&bare, &[lam], 0.0, 0.0)[0];
        let b = reflectance(&hw, &[lam], 0.0, 0.0)[0];
        prop_assert!((a - b).abs() < 1e-12);
    }
}

#[test]
fn small_cone_tends_to_collimated() {
    let s = Stack::bare(
        Material::constant("air", 1.0, 0.0),
        Material::constant("si", 3.8, 0.02),
    )
    .with_layer(Material::constant("ox", 1.46, 0.0), 2000.0);
    let w = [500.0, 600.0, 700.0];
    let r0 = reflectance(&s, &w, 0.0, 0.0);
    let r1 = reflectance(&s, &w, 0.0, 1e-4);
    for i in 0..3 {
        // R changes as θ²: NA = 1e-4 moves it by ~1e-8 for this 2 µm film.
        assert!((r0[i] - r1[i]).abs() < 1e-7);
    }
    // a wide cone washes out the fringes of a thick film: the spread of R shrinks
    let spread = |r: &[f64]| {
        r.iter().cloned().fold(f64::MIN, f64::max) - r.iter().cloned().fold(f64::MAX, f64::min)
    };
    let w: Vec<f64> = (0..200).map(|i| 500.0 + i as f64).collect();
    assert!(spread(&reflectance(&s, &w, 0.0, 0.6)) < spread(&reflectance(&s, &w, 0.0, 0.0)));
}
