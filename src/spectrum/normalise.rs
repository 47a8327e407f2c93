//! Dark/reference normalisation, R = (S − D)/(Ref − D) · R_ref(λ), and signal checks.

use super::saturation::clipped_pixels;
use super::{Counts, RawSpectrum, Spectrum, SpectrumError};

/// What the counts say about a measurement beyond its reflectance.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct SignalQuality {
    /// Pixels where the sample or reference was clipped (left out of the spectrum).
    pub saturated_pixels: usize,
    /// Pixels left out because the reference did not rise above the dark.
    pub dropped_pixels: usize,
    /// The sample or reference signal is too weak for a trustworthy fit.
    pub low_signal: bool,
}

/// Signal-to-noise below which a measurement is `low-signal`: the median signal must be at
/// least this many times the noise, i.e. about 2 % noise per pixel (common practice).
const MIN_SNR: f64 = 50.0;

/// Checks the counts for saturation and weak signal.
pub fn assess(sample: &Counts, dark: &Counts, reference: &Counts) -> SignalQuality {
    let sat_s = clipped_pixels(&sample.counts);
    let sat_r = clipped_pixels(&reference.counts);
    let saturated_pixels = sat_s.iter().zip(&sat_r).filter(|(a, b)| **a || **b).count();
    let dropped_pixels = reference
        .counts
        .iter()
        .zip(&dark.counts)
        .filter(|(r, d)| **r <= **d)
        .count();
    // Dark noise from successive differences (robust to the dark's slow shape).
    let mut diffs: Vec<f64> = dark
        .counts
        .windows(2)
        .map(|w| (w[1] - w[0]).abs())
        .collect();
    let noise = median(&mut diffs).unwrap_or(0.0) / (std::f64::consts::SQRT_2 * 0.6745);
    let signal = |c: &Counts| {
        let mut s: Vec<f64> = c
            .counts
            .iter()
            .zip(&dark.counts)
            .map(|(v, d)| v - d)
            .collect();
        median(&mut s).unwrap_or(0.0)
    };
    // The dark's read noise is the noise floor. Only when the dark carries no noise at all
    // (a spectrometer that subtracts it, rounded to zero) is the signal's own shot noise,
    // √counts, the best guess left.
    let floor = |s: f64| {
        if noise > 0.0 {
            noise
        } else {
            s.max(0.0).sqrt()
        }
    };
    let (ss, sr) = (signal(sample), signal(reference));
    let low_signal = ss < MIN_SNR * floor(ss) || sr < MIN_SNR * floor(sr);
    SignalQuality {
        saturated_pixels,
        dropped_pixels,
        low_signal,
    }
}

fn median(v: &mut [f64]) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    let mid = v.len() / 2;
    v.select_nth_unstable_by(mid, f64::total_cmp);
    Some(v[mid])
}

/// R = (S − D)/(Ref − D) · R_ref at each pixel. Pixels where the reference does not rise
/// above the dark, or where the sample or reference is clipped, are left out; it is an error
/// when none is left, or when the spectra do not share one wavelength axis.
pub fn normalise(
    sample: &Counts,
    dark: &Counts,
    reference: &Counts,
    r_ref: &[f64],
) -> Result<Spectrum, SpectrumError> {
    let n = sample.counts.len();
    for (name, c) in [("sample", sample), ("dark", dark), ("reference", reference)] {
        if c.counts.len() != n || c.wavelength_nm.len() != n {
            return Err(SpectrumError::Invalid(format!(
                "{name} has {} pixels, the sample {n}: sample, dark and reference must come from one spectrometer setting",
                c.counts.len()
            )));
        }
        if let Some(i) = (0..n).find(|i| c.wavelength_nm[*i] != sample.wavelength_nm[*i]) {
            return Err(SpectrumError::Invalid(format!(
                "{name} pixel {i} is at {} nm, the sample's at {} nm: the wavelength axes differ",
                c.wavelength_nm[i], sample.wavelength_nm[i]
            )));
        }
    }
    if r_ref.len() != n {
        return Err(SpectrumError::Invalid(format!(
            "{} reference reflectance values for {n} pixels",
            r_ref.len()
        )));
    }
    let clipped_s = clipped_pixels(&sample.counts);
    let clipped_r = clipped_pixels(&reference.counts);
    let mut out = Spectrum::default();
    for i in 0..n {
        let (s, d, r) = (sample.counts[i], dark.counts[i], reference.counts[i]);
        let values_ok = s.is_finite() && d.is_finite() && r.is_finite() && r_ref[i].is_finite();
        if !values_ok {
            return Err(SpectrumError::Invalid(format!(
                "pixel {i} ({} nm): a count or the reference reflectance is not finite",
                sample.wavelength_nm[i]
            )));
        }
        if r > d && !clipped_s[i] && !clipped_r[i] {
            out.wavelength_nm.push(sample.wavelength_nm[i]);
            out.reflectance.push((s - d) / (r - d) * r_ref[i]);
        }
    }
    if out.is_empty() {
        return Err(SpectrumError::Invalid(
            "no pixel has reference counts above the dark (or unclipped): the reference spectrum is dark or saturated — check the lamp and the integration time".into(),
        ));
    }
    Ok(out)
}

/// [`normalise`] and [`assess`] in one call.
pub fn normalise_raw(
    raw: &RawSpectrum,
    r_ref: &[f64],
) -> Result<(Spectrum, SignalQuality), SpectrumError> {
    let spectrum = normalise(&raw.sample, &raw.dark, &raw.reference, r_ref)?;
    Ok((spectrum, assess(&raw.sample, &raw.dark, &raw.reference)))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn c(v: &[f64]) -> Counts {
        Counts {
            wavelength_nm: (0..v.len()).map(|i| 400.0 + i as f64).collect(),
            counts: v.to_vec(),
        }
    }

    #[test]
    fn applies_the_formula() {
        // R = (S − D)/(Ref − D)·R_ref: (510 − 10)/(1010 − 10)·0.4 = 0.2
        let s = normalise(
            &c(&[510.0, 260.0]),
            &c(&[10.0, 10.0]),
            &c(&[1010.0, 510.0]),
            &[0.4, 0.3],
        )
        .unwrap();
        assert!((s.reflectance[0] - 0.2).abs() < 1e-15 && (s.reflectance[1] - 0.15).abs() < 1e-15);
    }

    #[test]
    fn drops_dark_and_clipped_pixels_and_reports_them() {
        let sample = c(&[500.0, 500.0, 500.0, 500.0, 400.0, 300.0]);
        let dark = c(&[10.0; 6]);
        let reference = c(&[5.0, 900.0, 4000.0, 4000.0, 4000.0, 800.0]);
        let r = normalise(&sample, &dark, &reference, &[0.3; 6]).unwrap();
        assert_eq!(
            r.wavelength_nm,
            vec![405.0],
            "pixel 0 is dark, 0–3 sample-clipped, 2–4 reference-clipped"
        );
        let q = assess(&sample, &dark, &reference);
        assert_eq!(q.dropped_pixels, 1);
        assert_eq!(
            q.saturated_pixels, 5,
            "sample run 0–3 and reference run 2–4 cover pixels 0–4"
        );
    }

    #[test]
    fn errors_on_mismatch_and_darkness() {
        let e = normalise(&c(&[1.0, 2.0]), &c(&[1.0]), &c(&[3.0, 4.0]), &[0.3, 0.3]).unwrap_err();
        assert!(e.to_string().contains("dark has 1 pixels"));
        let e = normalise(
            &c(&[1.0, 2.0]),
            &c(&[5.0, 5.0]),
            &c(&[3.0, 4.0]),
            &[0.3, 0.3],
        )
        .unwrap_err();
        assert!(e.to_string().contains("dark"));
    }

    #[test]
    fn weak_signal_is_flagged() {
        let dark: Vec<f64> = (0..200)
            .map(|i| 1000.0 + if i % 2 == 0 { 5.0 } else { -5.0 })
            .collect();
        let strong: Vec<f64> = dark.iter().map(|d| d + 20000.0).collect();
        let weak: Vec<f64> = dark.iter().map(|d| d + 50.0).collect();
        assert!(!assess(&c(&strong), &c(&dark), &c(&strong)).low_signal);
        assert!(assess(&c(&weak), &c(&dark), &c(&strong)).low_signal);
    }
}
