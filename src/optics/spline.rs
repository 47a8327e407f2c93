//! Natural cubic spline through tabulated points: the interpolation used for n,k tables.
//!
//! "Natural" means zero second derivative at both ends (the same rule as
//! `scipy.interpolate.CubicSpline(bc_type="natural")`, which the reference fixtures use).
//! Outside the table the end values are held constant: optical constants must not be
//! extrapolated by a cubic.

/// A natural cubic spline y(x) over strictly increasing knots.
#[derive(Debug, Clone, PartialEq)]
pub struct NaturalSpline {
    x: Vec<f64>,
    y: Vec<f64>,
    /// Second derivatives at the knots.
    m: Vec<f64>,
}

impl NaturalSpline {
    /// Builds the spline; `x` must be strictly increasing and as long as `y` (checked by the
    /// callers that parse tables, which report the offending line).
    pub fn new(x: Vec<f64>, y: Vec<f64>) -> NaturalSpline {
        debug_assert_eq!(x.len(), y.len());
        let n = x.len();
        let mut m = vec![0.0; n];
        if n >= 3 {
            // Tridiagonal system for the interior second derivatives (Thomas algorithm).
            let mut c_prime = vec![0.0; n];
            let mut d_prime = vec![0.0; n];
            for i in 1..n - 1 {
                let h0 = x[i] - x[i - 1];
                let h1 = x[i + 1] - x[i];
                let a = h0 / 6.0;
                let b = (h0 + h1) / 3.0;
                let c = h1 / 6.0;
                let d = (y[i + 1] - y[i]) / h1 - (y[i] - y[i - 1]) / h0;
                let denom = b - a * c_prime[i - 1];
                c_prime[i] = c / denom;
                d_prime[i] = (d - a * d_prime[i - 1]) / denom;
            }
            for i in (1..n - 1).rev() {
                m[i] = d_prime[i] - c_prime[i] * m[i + 1];
            }
        }
        NaturalSpline { x, y, m }
    }

    /// First and last knot.
    pub fn domain(&self) -> (f64, f64) {
        (self.x[0], self.x[self.x.len() - 1])
    }

    /// Value at `x`; the end values are held outside the knots.
    pub fn eval(&self, x: f64) -> f64 {
        let n = self.x.len();
        if n == 1 || x <= self.x[0] {
            return self.y[0];
        }
        if x >= self.x[n - 1] {
            return self.y[n - 1];
        }
        // Index of the interval [x[i], x[i+1]] holding x.
        let i = self
            .x
            .partition_point(|k| *k <= x)
            .saturating_sub(1)
            .min(n - 2);
        let h = self.x[i + 1] - self.x[i];
        let a = (self.x[i + 1] - x) / h;
        let b = (x - self.x[i]) / h;
        a * self.y[i]
            + b * self.y[i + 1]
            + ((a * a * a - a) * self.m[i] + (b * b * b - b) * self.m[i + 1]) * h * h / 6.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn passes_through_the_knots() {
        let x = vec![0.0, 1.0, 2.5, 4.0];
        let y = vec![1.0, -2.0, 0.5, 3.0];
        let s = NaturalSpline::new(x.clone(), y.clone());
        for (xi, yi) in x.iter().zip(&y) {
            assert!((s.eval(*xi) - yi).abs() < 1e-12);
        }
    }

    #[test]
    fn reproduces_a_straight_line_exactly() {
        // A natural spline through collinear points is that line (its second derivative is 0).
        let x: Vec<f64> = (0..6).map(|i| i as f64 * 1.3).collect();
        let y: Vec<f64> = x.iter().map(|v| 2.0 * v - 1.0).collect();
        let s = NaturalSpline::new(x, y);
        assert!((s.eval(2.2) - 3.4).abs() < 1e-12);
    }

    #[test]
    fn matches_a_hand_solved_three_point_spline() {
        // Knots (0,0), (1,1), (2,0): natural spline has m1 = -3, so y(0.5) = 0.5 + 3/16 = 0.6875
        // (solved by hand from the tridiagonal equation h/6 m0 + 2h/3 m1 + h/6 m2 = Δslope).
        let s = NaturalSpline::new(vec![0.0, 1.0, 2.0], vec![0.0, 1.0, 0.0]);
        assert!((s.eval(0.5) - 0.6875).abs() < 1e-12);
    }

    #[test]
    fn holds_end_values_outside() {
        let s = NaturalSpline::new(vec![1.0, 2.0, 3.0], vec![5.0, 6.0, 8.0]);
        assert_eq!(s.eval(0.0), 5.0);
        assert_eq!(s.eval(9.0), 8.0);
    }
}
