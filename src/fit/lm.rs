//! Levenberg–Marquardt for a few bounded parameters (K. Levenberg 1944, D. W. Marquardt
//! 1963), on the normal equations with Marquardt's diagonal scaling. Bounds are kept by
//! projecting each step onto the box. Small and specialised on purpose: the fitters have
//! 1–4 parameters and evaluate residuals and Jacobian in one pass, which a general solver's
//! separate callbacks would double.

use super::lanes;
use nalgebra::{DMatrix, DVector};

/// The problem: fills residuals and the Jacobian (row-major, `residuals.len() × params`)
/// at `x`, returns Σ residual².
pub trait Problem {
    fn params(&self) -> usize;
    fn eval(&self, x: &[f64], residuals: &mut [f64], jacobian: &mut [f64]) -> f64;
    fn residuals(&self) -> usize;
}

/// Rejected steps tried per iteration before giving up (damping grows 4× each time).
const MAX_REJECTIONS: usize = 12;

/// Outcome of a minimisation.
#[derive(Debug, Clone)]
pub struct Solution {
    pub x: Vec<f64>,
    pub chi2: f64,
    /// (JᵀJ)⁻¹ at the solution, if it is invertible (row-major p × p).
    pub inv_jtj: Option<Vec<f64>>,
    /// Residuals at the solution.
    pub residuals: Vec<f64>,
    pub iterations: usize,
    /// Residual evaluations made.
    pub evaluations: usize,
}

/// Stopping rules.
#[derive(Debug, Clone, Copy)]
pub struct Settings {
    pub max_iterations: usize,
    /// Stop when χ² falls by less than this fraction.
    pub rel_tol: f64,
    /// Stop when no parameter moves by more than this.
    pub x_tol: f64,
    /// Marquardt's damping λ at the start: 10⁻³ (Marquardt's own choice) from a rough
    /// start; far less from a start already near the minimum, where the undamped
    /// Gauss–Newton step is the one to take (a damped one falls short and costs another
    /// evaluation).
    pub initial_damping: f64,
}

impl Default for Settings {
    fn default() -> Settings {
        Settings {
            max_iterations: 60,
            rel_tol: 1e-10,
            x_tol: 1e-5,
            initial_damping: 1e-3,
        }
    }
}

/// Minimises from `x0` inside `[lower, upper]`.
pub fn minimise(
    problem: &impl Problem,
    x0: &[f64],
    lower: &[f64],
    upper: &[f64],
    settings: Settings,
) -> Solution {
    let p = problem.params();
    let m = problem.residuals();
    let clamp = |x: &mut [f64]| {
        for i in 0..p {
            x[i] = x[i].clamp(lower[i], upper[i]);
        }
    };
    let mut x = x0.to_vec();
    clamp(&mut x);
    let mut res = vec![0.0; m];
    let mut jac = vec![0.0; m * p];
    let mut chi2 = problem.eval(&x, &mut res, &mut jac);
    let mut evaluations = 1;
    let mut trial_res = vec![0.0; m];
    let mut trial_jac = vec![0.0; m * p];
    let mut lambda = settings.initial_damping;
    let mut iterations = 0;
    let (mut jtj, mut jtr) = normal(&res, &jac, p);
    while iterations < settings.max_iterations {
        iterations += 1;
        let mut improved = false;
        // Raise the damping until a step lowers χ²; a step too small to matter means the
        // minimum is reached (checked before paying for an evaluation).
        for _ in 0..MAX_REJECTIONS {
            let mut a = jtj.clone();
            for i in 0..p {
                a[(i, i)] += lambda * jtj[(i, i)].max(1e-30);
            }
            let Some(step) = a.cholesky().map(|c| c.solve(&(-&jtr))) else {
                lambda *= 10.0;
                continue;
            };
            let mut xt: Vec<f64> = x.iter().zip(step.iter()).map(|(a, b)| a + b).collect();
            clamp(&mut xt);
            if xt
                .iter()
                .zip(&x)
                .all(|(a, b)| (a - b).abs() <= settings.x_tol)
            {
                break;
            }
            let c = problem.eval(&xt, &mut trial_res, &mut trial_jac);
            evaluations += 1;
            if c < chi2 {
                let rel = (chi2 - c) / chi2.max(1e-300);
                x = xt;
                chi2 = c;
                std::mem::swap(&mut res, &mut trial_res);
                std::mem::swap(&mut jac, &mut trial_jac);
                (jtj, jtr) = normal(&res, &jac, p);
                lambda = (lambda * 0.3).max(1e-12);
                improved = rel > settings.rel_tol;
                break;
            }
            lambda *= 4.0;
        }
        if !improved {
            break;
        }
    }
    let inv_jtj = jtj.clone().try_inverse().map(|m| m.as_slice().to_vec());
    // nalgebra stores column-major; the matrix is symmetric so the layout does not matter.
    Solution {
        x,
        chi2,
        inv_jtj,
        residuals: res,
        iterations,
        evaluations,
    }
}

fn normal(res: &[f64], jac: &[f64], p: usize) -> (DMatrix<f64>, DVector<f64>) {
    // Plain sums over rows (the matrices are a few parameters wide), in independent partial
    // sums; one and two parameters, the common cases, in one pass over the rows.
    let mut jtj = vec![0.0; p * p];
    let mut jtr = vec![0.0; p];
    match p {
        1 => {
            jtr[0] = lanes::dot(jac, res);
            jtj[0] = lanes::dot(jac, jac);
        }
        2 => {
            const R: usize = 4;
            let mut acc = [[0.0; R]; 5];
            let rows = res.len() - res.len() % R;
            for (r, j) in res[..rows]
                .chunks_exact(R)
                .zip(jac[..2 * rows].chunks_exact(2 * R))
            {
                for l in 0..R {
                    let (a, b) = (j[2 * l], j[2 * l + 1]);
                    acc[0][l] += a * r[l];
                    acc[1][l] += b * r[l];
                    acc[2][l] += a * a;
                    acc[3][l] += a * b;
                    acc[4][l] += b * b;
                }
            }
            let mut t: [f64; 5] = acc.map(|v| v.iter().sum());
            for i in rows..res.len() {
                let (a, b, r) = (jac[2 * i], jac[2 * i + 1], res[i]);
                t[0] += a * r;
                t[1] += b * r;
                t[2] += a * a;
                t[3] += a * b;
                t[4] += b * b;
            }
            jtr.copy_from_slice(&t[..2]);
            jtj.copy_from_slice(&[t[2], t[3], t[3], t[4]]);
        }
        _ => {
            for a in 0..p {
                jtr[a] = lanes::sum(res.len(), |i| jac[i * p + a] * res[i]);
                for b in 0..=a {
                    let v = lanes::sum(res.len(), |i| jac[i * p + a] * jac[i * p + b]);
                    jtj[a * p + b] = v;
                    jtj[b * p + a] = v;
                }
            }
        }
    }
    (DMatrix::from_vec(p, p, jtj), DVector::from_vec(jtr))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Exponential decay y = A exp(−t/τ): a standard LM test with a known optimum.
    struct Decay {
        t: Vec<f64>,
        y: Vec<f64>,
    }

    impl Problem for Decay {
        fn params(&self) -> usize {
            2
        }
        fn residuals(&self) -> usize {
            self.t.len()
        }
        fn eval(&self, x: &[f64], r: &mut [f64], j: &mut [f64]) -> f64 {
            let mut s = 0.0;
            for (i, (t, y)) in self.t.iter().zip(&self.y).enumerate() {
                let e = (-t / x[1]).exp();
                r[i] = x[0] * e - y;
                j[2 * i] = e;
                j[2 * i + 1] = x[0] * e * t / (x[1] * x[1]);
                s += r[i] * r[i];
            }
            s
        }
    }

    #[test]
    fn finds_the_known_optimum_and_respects_bounds() {
        let t: Vec<f64> = (0..30).map(|i| i as f64 * 0.2).collect();
        let y = t.iter().map(|t| 3.0 * (-t / 1.7f64).exp()).collect();
        let p = Decay { t, y };
        let s = minimise(
            &p,
            &[1.0, 0.5],
            &[0.0, 0.1],
            &[10.0, 10.0],
            Settings::default(),
        );
        assert!(
            (s.x[0] - 3.0).abs() < 1e-7 && (s.x[1] - 1.7).abs() < 1e-7,
            "{:?}",
            s.x
        );
        let s = minimise(
            &p,
            &[1.0, 0.5],
            &[0.0, 0.1],
            &[2.0, 10.0],
            Settings::default(),
        );
        assert_eq!(s.x[0], 2.0, "held at the upper bound");
    }
}
