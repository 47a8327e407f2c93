//! The analytic Jacobian of the model fit matches central finite differences (property test),
//! for absorbing and transparent layers, oblique incidence and a cone, with the scale factor
//! and the tilt.

use isopach::fit::kernel::{channels, Prepared};
use isopach::fit::model::{residuals_and_jacobian, Setup};
use isopach::optics::{cone_samples, Material, MaterialLibrary};
use proptest::prelude::*;

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    #[test]
    fn jacobian_matches_finite_differences(
        d in prop::collection::vec(0.0f64..2500.0, 3),
        k in 0.0f64..0.3,
        theta in 0.0f64..40.0,
        na in prop_oneof![Just(0.0), 0.05f64..0.4],
        scale in 0.8f64..1.2,
        tilt in -0.1f64..0.1,
        fitted_mask in 1usize..8,
    ) {
        let lib = MaterialLibrary::builtin();
        let m = |n: &str| lib.get(n).unwrap().clone();
        let absorber = Material::constant("abs", 2.1, k);
        let w: Vec<f64> = (0..40).map(|i| 420.0 + 14.0 * i as f64).collect();
        let layers = [m("si3n4"), absorber, m("sio2")];
        let prep = Prepared::new(&m("air"), &layers, &m("si"), &channels(&cone_samples(theta, na, 5)), &w);
        let measured: Vec<f64> = (0..w.len()).map(|j| 0.2 + 0.001 * j as f64).collect();
        let fitted: Vec<usize> = (0..3).filter(|i| fitted_mask & (1 << i) != 0).collect();
        let setup = Setup {
            prep: &prep,
            measured: &measured,
            base: d.clone(),
            fitted: fitted.clone(),
            lower: vec![0.0; fitted.len()],
            upper: vec![1e5; fitted.len()],
            steps: vec![10.0; fitted.len()],
            scale: true,
            tilt: true,
            slit: None,
        };
        let mut x: Vec<f64> = fitted.iter().map(|i| d[*i] + 1.0).collect();
        x.push(scale);
        x.push(tilt);
        let p = x.len();
        let (_, jac) = residuals_and_jacobian(&setup, &x);
        for a in 0..p {
            let h = if a + 2 >= p { 1e-6 } else { 1e-4 };
            let (mut xp, mut xm) = (x.clone(), x.clone());
            xp[a] += h;
            xm[a] -= h;
            let (rp, _) = residuals_and_jacobian(&setup, &xp);
            let (rm, _) = residuals_and_jacobian(&setup, &xm);
            for j in 0..w.len() {
                let fd = (rp[j] - rm[j]) / (2.0 * h);
                let an = jac[j * p + a];
                prop_assert!((fd - an).abs() < 1e-6 * (1.0 + an.abs()), "param {a} pixel {j}: fd {fd} vs analytic {an}");
            }
        }
    }
}
