//! Detector saturation: runs of pixels stuck at the largest value of a spectrum.

/// Pixels that sit in a run of at least 3 neighbours all equal to the spectrum's maximum:
/// a clipped detector (common practice; a real, unclipped peak is never flat to the count).
pub fn clipped_pixels(values: &[f64]) -> Vec<bool> {
    let mut out = vec![false; values.len()];
    let max = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !(max.is_finite() && max > 0.0) {
        return out;
    }
    let mut i = 0;
    while i < values.len() {
        if values[i] == max {
            let start = i;
            while i < values.len() && values[i] == max {
                i += 1;
            }
            if i - start >= 3 {
                out[start..i].iter_mut().for_each(|v| *v = true);
            }
        } else {
            i += 1;
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_flat_tops_only() {
        let v = [1.0, 5.0, 9.0, 9.0, 9.0, 9.0, 3.0, 9.0];
        let c = clipped_pixels(&v);
        assert_eq!(c, [false, false, true, true, true, true, false, false]);
        assert!(!clipped_pixels(&[1.0, 2.0, 3.0, 2.0]).iter().any(|c| *c));
        assert!(!clipped_pixels(&[0.0, 0.0, 0.0, 0.0]).iter().any(|c| *c));
    }
}
