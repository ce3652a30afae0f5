//! Levenberg-Marquardt least squares on a small parameter vector (K. Levenberg, Quarterly of
//! Applied Mathematics 2, 1944; D. Marquardt, SIAM J. Appl. Math. 11, 1963), with Marquardt's
//! diagonal scaling and a central-difference Jacobian. Numerical core: no I/O.

use ndarray::{Array1, Array2};

/// Result of a minimisation.
#[derive(Clone, Debug, PartialEq)]
pub struct LmResult {
    pub x: Vec<f64>,
    /// Sum of squared residuals at `x`.
    pub cost: f64,
    pub iterations: usize,
    /// True when a step criterion was met (relative step or cost change below tolerance).
    pub converged: bool,
}

/// Options.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LmOptions {
    pub max_iterations: usize,
    /// Stop when every relative parameter step is below this.
    pub x_tol: f64,
    /// Stop when the relative cost decrease is below this.
    pub f_tol: f64,
}

impl Default for LmOptions {
    fn default() -> Self {
        LmOptions {
            max_iterations: 500,
            x_tol: 1e-13,
            f_tol: 1e-16,
        }
    }
}

fn cost_of(r: &[f64]) -> f64 {
    r.iter().map(|v| v * v).sum()
}

/// Solve `a x = b` for a small symmetric positive definite `a` (Cholesky); `None` when not
/// positive definite.
fn cholesky_solve(a: &Array2<f64>, b: &Array1<f64>) -> Option<Array1<f64>> {
    let n = b.len();
    let mut l = Array2::<f64>::zeros((n, n));
    for i in 0..n {
        for j in 0..=i {
            let mut s = a[[i, j]];
            for k in 0..j {
                s -= l[[i, k]] * l[[j, k]];
            }
            if i == j {
                if s <= 0.0 || !s.is_finite() {
                    return None;
                }
                l[[i, i]] = s.sqrt();
            } else {
                l[[i, j]] = s / l[[j, j]];
            }
        }
    }
    let mut y = Array1::<f64>::zeros(n);
    for i in 0..n {
        let mut s = b[i];
        for k in 0..i {
            s -= l[[i, k]] * y[k];
        }
        y[i] = s / l[[i, i]];
    }
    let mut x = Array1::<f64>::zeros(n);
    for i in (0..n).rev() {
        let mut s = y[i];
        for k in i + 1..n {
            s -= l[[k, i]] * x[k];
        }
        x[i] = s / l[[i, i]];
    }
    Some(x)
}

/// Minimise `sum r_i(x)^2`; `residuals(x, r)` fills `r` (length `m`), returning `false` when
/// `x` is outside where the model is defined (the step is then rejected). `scale` gives each
/// parameter's typical size (for the finite-difference steps and the step test).
pub fn minimize<F>(
    mut residuals: F,
    x0: &[f64],
    scale: &[f64],
    m: usize,
    opts: &LmOptions,
) -> LmResult
where
    F: FnMut(&[f64], &mut [f64]) -> bool,
{
    let p = x0.len();
    let mut x = x0.to_vec();
    let mut r = vec![0.0; m];
    if !residuals(&x, &mut r) {
        return LmResult {
            x,
            cost: f64::INFINITY,
            iterations: 0,
            converged: false,
        };
    }
    let mut cost = cost_of(&r);
    let mut lambda = 1e-3;
    let mut jac = Array2::<f64>::zeros((m, p));
    let (mut rp, mut rm, mut rt) = (vec![0.0; m], vec![0.0; m], vec![0.0; m]);
    let mut xt = x.clone();
    for it in 0..opts.max_iterations {
        // Central-difference Jacobian.
        for j in 0..p {
            let h = 1e-6 * scale[j].abs().max(x[j].abs() * 1e-3).max(1e-300);
            xt.copy_from_slice(&x);
            xt[j] = x[j] + h;
            let okp = residuals(&xt, &mut rp);
            xt[j] = x[j] - h;
            let okm = residuals(&xt, &mut rm);
            for i in 0..m {
                jac[[i, j]] = match (okp, okm) {
                    (true, true) => (rp[i] - rm[i]) / (2.0 * h),
                    (true, false) => (rp[i] - r[i]) / h,
                    (false, true) => (r[i] - rm[i]) / h,
                    _ => 0.0,
                };
            }
        }
        let jtj = jac.t().dot(&jac);
        let rv = Array1::from(r.clone());
        let g = jac.t().dot(&rv);
        let mut improved = false;
        for _ in 0..40 {
            let mut a = jtj.clone();
            for j in 0..p {
                a[[j, j]] += lambda * jtj[[j, j]].max(1e-300);
            }
            let Some(step) = cholesky_solve(&a, &g.mapv(|v| -v)) else {
                lambda *= 10.0;
                continue;
            };
            for j in 0..p {
                xt[j] = x[j] + step[j];
            }
            if residuals(&xt, &mut rt) {
                let c = cost_of(&rt);
                if c.is_finite() && c <= cost {
                    let small_step =
                        (0..p).all(|j| step[j].abs() <= opts.x_tol * (x[j].abs() + scale[j].abs()));
                    let small_gain = cost - c <= opts.f_tol * cost.max(1e-300);
                    x.copy_from_slice(&xt);
                    r.copy_from_slice(&rt);
                    cost = c;
                    lambda = (lambda * 0.3).max(1e-15);
                    improved = true;
                    if small_step || small_gain || cost == 0.0 {
                        return LmResult {
                            x,
                            cost,
                            iterations: it + 1,
                            converged: true,
                        };
                    }
                    break;
                }
            }
            lambda *= 10.0;
        }
        if !improved {
            // No downhill step at any damping: a (local) minimum to machine precision.
            return LmResult {
                x,
                cost,
                iterations: it + 1,
                converged: true,
            };
        }
    }
    LmResult {
        x,
        cost,
        iterations: opts.max_iterations,
        converged: false,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The Rosenbrock function as least squares, r = (10 (y - x^2), 1 - x): minimum at (1, 1)
    /// (H. Rosenbrock, The Computer Journal 3, 1960), from the classic start (-1.2, 1).
    #[test]
    fn rosenbrock_minimum() {
        let res = minimize(
            |x, r| {
                r[0] = 10.0 * (x[1] - x[0] * x[0]);
                r[1] = 1.0 - x[0];
                true
            },
            &[-1.2, 1.0],
            &[1.0, 1.0],
            2,
            &LmOptions::default(),
        );
        assert!(res.converged);
        approx::assert_relative_eq!(res.x[0], 1.0, max_relative = 1e-9);
        approx::assert_relative_eq!(res.x[1], 1.0, max_relative = 1e-9);
    }
}
