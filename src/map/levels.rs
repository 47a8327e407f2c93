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

/// Levels as [`nice_levels`], but never closer than `min_step` (the measurement noise): a
/// finer step would draw the noise as structure. When the asked count needs a finer step,
/// the step is the smallest round step (1, 2, 2.5 or 5 × 10ᵏ) not below `min_step`, which may
/// leave no level inside the range. A non-finite or non-positive `min_step` sets no floor.
pub fn nice_levels_at_least(lo: f64, hi: f64, target: usize, min_step: f64) -> Levels {
    let levels = nice_levels(lo, hi, target);
    if !(min_step.is_finite() && min_step > 0.0) || levels.step >= min_step {
        return levels;
    }
    if levels.values.is_empty() && !levels.step.is_finite() {
        return levels;
    }
    let step = round_step_at_least(min_step);
    Levels {
        values: inside(lo, hi, step),
        step,
        decimals: decimals_for(step),
    }
}

/// The smallest round step (1, 2, 2.5 or 5 × 10ᵏ) at or above `x` (> 0).
fn round_step_at_least(x: f64) -> f64 {
    let e = x.log10().floor();
    [e, e + 1.0]
        .iter()
        .flat_map(|&k| MANTISSAS.map(|m| m * 10f64.powf(k)))
        .find(|&s| s >= x * (1.0 - 1e-12))
        .unwrap_or(10f64.powf(e + 1.0))
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
    fn isoline_step_is_never_finer_than_the_noise() {
        // 20 nm of range asks for a 2.5 nm step with 8 lines; with 3 nm noise the step is the
        // next round step above it, 5 nm.
        let free = nice_levels(990.0, 1010.0, 8);
        assert_eq!(free.step, 2.5);
        let floored = nice_levels_at_least(990.0, 1010.0, 8, 3.0);
        assert_eq!(floored.step, 5.0);
        assert_eq!(floored.values, vec![995.0, 1000.0, 1005.0]);
        // A 0.06 nm range with 0.2 nm noise: no level fits.
        let flat = nice_levels_at_least(1000.00, 1000.06, 10, 0.2);
        assert!(flat.values.is_empty() && flat.step >= 0.2, "{flat:?}");
        // Noise below the asked step changes nothing.
        assert_eq!(nice_levels_at_least(990.0, 1010.0, 8, 0.5), free);
        assert_eq!(round_step_at_least(0.2), 0.2);
        assert_eq!(round_step_at_least(0.21), 0.25);
        assert_eq!(round_step_at_least(6.0), 10.0);
    }

    #[test]
    fn empty_range_has_no_levels() {
        assert!(nice_levels(5.0, 5.0, 8).values.is_empty());
        assert!(nice_levels(f64::NAN, 5.0, 8).values.is_empty());
    }
}
