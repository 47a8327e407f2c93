//! "Nice" contour levels: round steps of 1, 2, 2.5 or 5 × 10ᵏ (Heckbert, "Nice numbers for
//! graph labels", Graphics Gems, 1990, extended with 2.5), so labels read like a hand-drawn
//! isopach map.

/// Isoline levels over a value range, with the step and how many decimals to print.
#[derive(Debug, Clone, PartialEq)]
pub struct Levels {
    /// Levels strictly inside (lo, hi), ascending.
    pub values: Vec<f64>,
    /// Distance between neighbouring levels.
    pub step: f64,
    /// Decimals that print every level exactly.
    pub decimals: usize,
}

/// Mantissas of the allowed steps.
const MANTISSAS: [f64; 4] = [1.0, 2.0, 2.5, 5.0];

/// Levels over `[lo, hi]` with about `target` isolines (at least one step when the range is
/// not empty). An empty or non-finite range gives no levels.
pub fn nice_levels(lo: f64, hi: f64, target: usize) -> Levels {
    let span = hi - lo;
    if !(span.is_finite() && span > 0.0) || target == 0 {
        return Levels {
            values: Vec::new(),
            step: f64::NAN,
            decimals: 1,
        };
    }
    let ideal = span / (target as f64 + 1.0);
    let e = ideal.log10().floor();
    // Candidates around the ideal step; pick the one whose level count is nearest the target
    // (ties to the larger step, fewer lines).
    let mut best: Option<(usize, f64, f64)> = None;
    for k in [e - 1.0, e, e + 1.0] {
        for m in MANTISSAS {
            let step = m * 10f64.powf(k);
            let count = inside(lo, hi, step).len();
            let miss = (count as f64 - target as f64).abs();
            if best.is_none_or(|(_, bm, bs)| miss < bm || (miss == bm && step > bs)) {
                best = Some((count, miss, step));
            }
        }
    }
    let step = best.map(|b| b.2).unwrap_or(ideal);
    Levels {
        values: inside(lo, hi, step),
        step,
        decimals: decimals_for(step),
    }
}

/// Multiples of `step` strictly between lo and hi.
fn inside(lo: f64, hi: f64, step: f64) -> Vec<f64> {
    let first = (lo / step).floor() as i64 + 1;
    let last = (hi / step).ceil() as i64 - 1;
    if last < first || last - first > 10_000 {
        return Vec::new();
    }
    (first..=last).map(|i| i as f64 * step).collect()
}

/// Decimals needed to print multiples of `step` exactly.
pub fn decimals_for(step: f64) -> usize {
    (0..=6)
        .find(|&d| {
            let scaled = step * 10f64.powi(d as i32);
            (scaled - scaled.round()).abs() < 1e-6 * scaled.max(1.0)
        })
        .unwrap_or(6)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn levels_are_round_and_inside() {
        let l = nice_levels(981.3, 1027.9, 8);
        assert_eq!(l.step, 5.0);
        assert_eq!(l.values.first(), Some(&985.0));
        assert_eq!(l.values.last(), Some(&1025.0));
        assert_eq!(l.decimals, 0);
        let l = nice_levels(1.02, 1.09, 6);
        assert!((l.step - 0.01).abs() < 1e-15, "{}", l.step);
        assert_eq!(l.decimals, 2);
        assert_eq!(decimals_for(2.5), 1);
    }

    #[test]
    fn empty_range_has_no_levels() {
        assert!(nice_levels(5.0, 5.0, 8).values.is_empty());
        assert!(nice_levels(f64::NAN, 5.0, 8).values.is_empty());
    }
}
