//! Any finite spectrum, however wrong, gives a result (maybe flagged), never a panic, for
//! every method.

mod fit_common;

use fit_common::recipe;
use isopach::fit::Fitter;
use isopach::spectrum::Spectrum;
use proptest::prelude::*;

fn fitters() -> Vec<Fitter> {
    ["auto", "model", "fourier", "extrema"]
        .iter()
        .map(|m| {
            Fitter::from_recipe(&recipe(&format!(
                "ambient = \"air\"\nsubstrate = \"si\"\nlayers = [ {{ material = \"sio2\", nominal_nm = 500, min_nm = 1, max_nm = 5000 }} ]\nwavelength_nm = [420, 980]\nmethod = \"{m}\""
            )))
            .unwrap()
        })
        .collect()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(48))]

    #[test]
    fn arbitrary_spectra_never_panic(
        start in 300.0f64..600.0,
        step in 0.05f64..5.0,
        values in prop::collection::vec(prop_oneof![Just(0.0), Just(1.0), -0.1f64..1.5], 0..600),
    ) {
        let s = Spectrum {
            wavelength_nm: (0..values.len()).map(|i| start + step * i as f64).collect(),
            reflectance: values,
        };
        for f in fitters() {
            let r = f.fit(&s);
            prop_assert!((0.0..=1.0).contains(&r.gof));
            prop_assert_eq!(r.layers.len(), 1);
            let t = r.layers[0].thickness_nm;
            prop_assert!(t.is_nan() || (1.0..=5000.0).contains(&t), "{t}");
        }
    }
}
