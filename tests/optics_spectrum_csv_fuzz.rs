//! Fuzzed spectrum CSV text never panics: it parses or returns an error naming a line.

use isopach::spectrum::{normalise_raw, parse_csv, SpectrumError, SpectrumFile};
use proptest::prelude::*;
use std::path::Path;

fn token() -> impl Strategy<Value = String> {
    prop_oneof![
        Just("NaN".to_string()),
        Just("inf".to_string()),
        Just("-inf".to_string()),
        Just("".to_string()),
        Just("1e400".to_string()),
        Just("-0".to_string()),
        Just("65535".to_string()),
        Just("\u{feff}".to_string()),
        Just("#".to_string()),
        (-1e6f64..1e6).prop_map(|v| v.to_string()),
        (0.0f64..1.2).prop_map(|v| format!("{v:.4}")),
        (200.0f64..1200.0).prop_map(|v| format!("{v:.2}")),
        "[ -~]{0,8}",
    ]
}

fn line() -> impl Strategy<Value = String> {
    prop_oneof![
        Just("wavelength_nm,reflectance".to_string()),
        Just("wavelength_nm,sample,dark,reference".to_string()),
        Just("# comment".to_string()),
        prop::collection::vec(token(), 0..6).prop_map(|t| t.join(",")),
    ]
}

fn check(text: &str) {
    match parse_csv(text, Path::new("fuzz.csv")) {
        Ok(SpectrumFile::Reflectance(s)) => {
            assert_eq!(s.wavelength_nm.len(), s.reflectance.len());
            assert!(s.wavelength_nm.windows(2).all(|w| w[0] < w[1]));
        }
        Ok(SpectrumFile::Counts(raw)) => {
            // Normalising a parsed counts file must not panic either.
            let r_ref = vec![0.35; raw.sample.counts.len()];
            let _ = normalise_raw(&raw, &r_ref);
        }
        Err(SpectrumError::Line { line, .. }) => {
            assert!(line >= 1 && line <= text.lines().count().max(1))
        }
        Err(e) => panic!("unexpected error kind {e}"),
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(2000))]

    #[test]
    fn arbitrary_text_never_panics(text in "\\PC{0,300}") {
        check(&text);
    }

    #[test]
    fn csv_like_text_never_panics(lines in prop::collection::vec(line(), 0..30)) {
        check(&lines.join("\n"));
    }

    #[test]
    fn valid_header_with_fuzzed_rows_never_panics(
        counts in prop::bool::ANY,
        rows in prop::collection::vec(prop::collection::vec(token(), 2..5), 0..40),
    ) {
        let header = if counts { "wavelength_nm,sample,dark,reference" } else { "wavelength_nm,reflectance" };
        let body: Vec<String> = rows.iter().map(|r| r.join(",")).collect();
        check(&format!("{header}\n{}", body.join("\n")));
    }
}
