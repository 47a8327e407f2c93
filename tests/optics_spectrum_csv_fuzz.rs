//! Fuzzed spectrum CSV text never panics: it parses or returns an error naming a line; a
//! file reads as its text parses; no file passes the pixel ceiling.

use isopach::spectrum::{
    normalise_raw, parse_csv, read_csv, SpectrumError, SpectrumFile, MAX_PIXELS,
};
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
    #![proptest_config(fixed(2000))]

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

/// Fixed seed and a bounded case count for CI; a longer run is
/// `PROPTEST_CASES=100000 cargo test --release --test optics_spectrum_csv_fuzz` (the seed
/// stays fixed; change `SEED` to explore elsewhere).
const SEED: u64 = 18;

fn fixed(cases: u32) -> ProptestConfig {
    let longer = std::env::var("PROPTEST_CASES")
        .ok()
        .and_then(|v| v.parse().ok());
    ProptestConfig {
        cases: longer.unwrap_or(cases),
        rng_seed: proptest::test_runner::RngSeed::Fixed(SEED),
        ..ProptestConfig::default()
    }
}

proptest! {
    #![proptest_config(fixed(300))]

    /// Reading a file (streamed line by line) gives what parsing its text gives, whatever
    /// the text: line endings, a byte-order mark, blank and comment lines, bad rows.
    #[test]
    fn a_file_reads_as_its_text_parses(
        lines in prop::collection::vec(line(), 0..30),
        crlf in prop::bool::ANY,
        bom in prop::bool::ANY,
    ) {
        let sep = if crlf { "\r\n" } else { "\n" };
        let text = format!("{}{}", if bom { "\u{feff}" } else { "" }, lines.join(sep));
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("fuzz.csv");
        std::fs::write(&path, &text).unwrap();
        let (file, parsed) = (read_csv(&path), parse_csv(&text, &path));
        prop_assert_eq!(format!("{file:?}"), format!("{parsed:?}"));
    }
}

proptest! {
    // Each case parses 100 000 rows: a few cases pin it, however long the run.
    #![proptest_config(ProptestConfig { cases: 8, ..fixed(8) })]

    /// Past the pixel ceiling a file is refused at the first row too many, whatever its rows
    /// hold before that.
    #[test]
    fn rows_past_the_ceiling_are_refused_at_that_row(
        extra in 1usize..50,
        comments in 0usize..5,
    ) {
        let mut text = "# c\n".repeat(comments);
        text.push_str("wavelength_nm,reflectance\n");
        for i in 0..MAX_PIXELS + extra {
            text.push_str(&format!("{},0.3\n", 300 + i));
        }
        match parse_csv(&text, Path::new("big.csv")) {
            Err(SpectrumError::Line { line, message, .. }) => {
                prop_assert_eq!(line, comments + 2 + MAX_PIXELS);
                prop_assert!(message.contains("more than 100000 data rows"), "{}", message);
            }
            other => prop_assert!(false, "{:?}", other.map(|_| ())),
        }
    }
}
