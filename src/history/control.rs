//! Individuals and moving-range (I-MR) control charts for run-to-run trends.
//!
//! Centre line x̄; σ̂ = MR̄ / d₂ with d₂ = 1.128 for moving ranges of two; individuals limits
//! x̄ ± 3σ̂; moving-range chart limits [0, D₄·MR̄] with D₄ = 3.267 (standard SPC constants for
//! n = 2; NIST/SEMATECH e-Handbook of Statistical Methods, §6.3.2.2).

use serde::Serialize;

/// d₂ for subgroups of two.
pub const D2: f64 = 1.128;
/// D₄ for subgroups of two.
pub const D4: f64 = 3.267;

/// Limits of an I-MR chart.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ControlLimits {
    pub center: f64,
    /// Mean moving range.
    pub mr_bar: f64,
    /// σ estimated from the moving range.
    pub sigma: f64,
    pub lcl: f64,
    pub ucl: f64,
    /// Upper limit of the moving-range chart (its lower limit is 0).
    pub mr_ucl: f64,
}

/// Limits from a series of individual values (at least two).
pub fn limits(values: &[f64]) -> Option<ControlLimits> {
    if values.len() < 2 {
        return None;
    }
    let center = values.iter().sum::<f64>() / values.len() as f64;
    let mr = moving_ranges(values);
    let mr_bar = mr.iter().sum::<f64>() / mr.len() as f64;
    let sigma = mr_bar / D2;
    Some(ControlLimits {
        center,
        mr_bar,
        sigma,
        lcl: center - 3.0 * sigma,
        ucl: center + 3.0 * sigma,
        mr_ucl: D4 * mr_bar,
    })
}

/// |xᵢ − xᵢ₋₁| for i ≥ 1.
pub fn moving_ranges(values: &[f64]) -> Vec<f64> {
    values.windows(2).map(|w| (w[1] - w[0]).abs()).collect()
}

/// Why a point is out of control.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Signal {
    AboveUcl,
    BelowLcl,
    /// Its moving range exceeds the moving-range chart's upper limit.
    Jump,
}

/// The signals of each point (empty when in control).
pub fn signals(values: &[f64], limits: &ControlLimits) -> Vec<Vec<Signal>> {
    values
        .iter()
        .enumerate()
        .map(|(i, &v)| {
            let mut s = Vec::new();
            if v > limits.ucl {
                s.push(Signal::AboveUcl);
            }
            if v < limits.lcl {
                s.push(Signal::BelowLcl);
            }
            if i > 0 && (v - values[i - 1]).abs() > limits.mr_ucl {
                s.push(Signal::Jump);
            }
            s
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nist_handbook_flow_rate_example() {
        // NIST/SEMATECH e-Handbook of Statistical Methods, §6.3.2.2 "Individuals control
        // charts": flow rate of the first 10 batches of a new process (values from memory;
        // the handbook gives x̄ = 50.81, MR̄ = 1.8778, UCL = 55.80, LCL = 45.82).
        let x = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1];
        let l = limits(&x).unwrap();
        assert!((l.center - 50.81).abs() < 1e-9);
        assert!((l.mr_bar - 1.8778).abs() < 1e-4);
        assert!((l.ucl - 55.80).abs() < 0.005, "{}", l.ucl);
        assert!((l.lcl - 45.82).abs() < 0.005, "{}", l.lcl);
        assert!((l.mr_ucl - 6.13).abs() < 0.005, "{}", l.mr_ucl);
        assert!(signals(&x, &l).iter().all(Vec::is_empty));
    }

    #[test]
    fn flags_points_beyond_the_limits() {
        let mut x = vec![100.0, 101.0, 99.0, 100.5, 99.5, 100.0, 101.0, 99.0];
        x.push(120.0);
        let l = limits(&x[..8]).unwrap();
        let s = signals(&x, &l);
        assert_eq!(s[8], vec![Signal::AboveUcl, Signal::Jump]);
        assert!(s[..8].iter().all(Vec::is_empty));
    }
}
