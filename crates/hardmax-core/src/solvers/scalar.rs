//! Safeguarded Newton–bisection root finding for a monotone scalar function on a bracket.
//!
//! The method keeps a bracket `[lo, hi]` that contains the root (the function is known to be
//! monotone with a known direction, so the sign at any point says which side the root is on),
//! takes a Newton step when it lands strictly inside the bracket and shrinks `|f|` fast enough,
//! and bisects otherwise. This is the classic safeguarded scheme (W. H. Press et al.,
//! "Numerical Recipes", `rtsafe`): it never leaves the bracket, so it converges whenever a root
//! exists in it, and says so with an error value when the root lies outside.
//!
//! Endpoints are not evaluated up front: a good starting point then costs only the Newton
//! iterations. When the iterates collapse onto an original endpoint without reaching a root, the
//! root lies outside the bracket and [`ScalarError::NotBracketed`] names the side.

use thiserror::Error;

/// Stopping rule of [`solve_monotone`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ScalarTolerance {
    /// Converged when `|f(x)| <= ftol`.
    pub ftol: f64,
    /// Converged (or, at an original endpoint, not bracketed) when the bracket is narrower
    /// than `xtol`.
    pub xtol: f64,
    /// Maximum number of function evaluations.
    pub max_iter: usize,
}

impl Default for ScalarTolerance {
    fn default() -> Self {
        ScalarTolerance {
            ftol: 1e-12,
            xtol: 1e-13,
            max_iter: 200,
        }
    }
}

/// A root found by [`solve_monotone`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ScalarRoot {
    /// The root.
    pub x: f64,
    /// f at the root.
    pub f: f64,
    /// Function evaluations spent.
    pub iterations: usize,
}

/// Why [`solve_monotone`] returned no root.
#[derive(Clone, Copy, Debug, PartialEq, Error)]
pub enum ScalarError {
    /// The function keeps one sign over the whole bracket: the root lies below `lo`
    /// (`below == true`) or above `hi`.
    #[error("no root in [{lo:.6e}, {hi:.6e}]: the root lies {} the bracket (f = {f:.3e} at the end)", if *.below { "below" } else { "above" })]
    NotBracketed {
        lo: f64,
        hi: f64,
        below: bool,
        f: f64,
    },
    /// The iteration limit was reached.
    #[error("no convergence after {iterations} evaluations: x = {x:.9e}, f = {f:.3e}, bracket width {width:.3e}")]
    NoConvergence {
        x: f64,
        f: f64,
        width: f64,
        iterations: usize,
    },
}

/// Find the root of a monotone function `f` in `[lo, hi]`, starting at `x0`.
///
/// `f(x)` returns the value and the derivative. `increasing` gives the direction of
/// monotonicity. Non-finite values are allowed and treated by sign only (`+inf` means "above
/// the root" for an increasing function); a non-finite or zero derivative makes the method bisect.
pub fn solve_monotone<F>(
    mut f: F,
    lo: f64,
    hi: f64,
    x0: f64,
    increasing: bool,
    tol: ScalarTolerance,
) -> Result<ScalarRoot, ScalarError>
where
    F: FnMut(f64) -> (f64, f64),
{
    let (lo0, hi0) = (lo, hi);
    let (mut lo, mut hi) = (lo, hi);
    let mut x = if x0.is_finite() {
        x0.clamp(lo, hi)
    } else {
        0.5 * (lo + hi)
    };
    let mut f_prev = f64::INFINITY;
    let mut last_f = f64::NAN;
    for it in 1..=tol.max_iter {
        let (fx, dfx) = f(x);
        last_f = fx;
        if fx.is_nan() {
            // Treat as "cannot tell": bisect towards the middle of the current bracket.
            x = 0.5 * (lo + hi);
            continue;
        }
        if fx.abs() <= tol.ftol {
            return Ok(ScalarRoot {
                x,
                f: fx,
                iterations: it,
            });
        }
        // Which side of the root is x on?
        let above = (fx > 0.0) == increasing;
        if above {
            hi = x;
        } else {
            lo = x;
        }
        if hi - lo <= tol.xtol {
            if (hi - lo0).abs() <= tol.xtol && above {
                return Err(ScalarError::NotBracketed {
                    lo: lo0,
                    hi: hi0,
                    below: true,
                    f: fx,
                });
            }
            if (hi0 - lo).abs() <= tol.xtol && !above {
                return Err(ScalarError::NotBracketed {
                    lo: lo0,
                    hi: hi0,
                    below: false,
                    f: fx,
                });
            }
            return Ok(ScalarRoot {
                x,
                f: fx,
                iterations: it,
            });
        }
        let newton = x - fx / dfx;
        let good_newton = fx.is_finite()
            && dfx.is_finite()
            && dfx != 0.0
            && newton > lo
            && newton < hi
            && fx.abs() <= 0.5 * f_prev.abs();
        f_prev = if fx.is_finite() { fx } else { f64::INFINITY };
        x = if good_newton { newton } else { 0.5 * (lo + hi) };
    }
    Err(ScalarError::NoConvergence {
        x,
        f: last_f,
        width: hi - lo,
        iterations: tol.max_iter,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Root of x^3 - 2 is 2^(1/3) (elementary algebra).
    #[test]
    fn cube_root_of_two() {
        let r = solve_monotone(
            |x| (x * x * x - 2.0, 3.0 * x * x),
            0.0,
            4.0,
            0.0,
            true,
            ScalarTolerance::default(),
        )
        .unwrap();
        assert!((r.x - 2f64.cbrt()).abs() < 1e-12);
    }

    /// A decreasing exponential with a root at ln 3 (elementary algebra), from a bad start.
    #[test]
    fn decreasing_exponential() {
        let r = solve_monotone(
            |x| (3.0 * (-x).exp() - 1.0, -3.0 * (-x).exp()),
            -50.0,
            50.0,
            -50.0,
            false,
            ScalarTolerance::default(),
        )
        .unwrap();
        assert!((r.x - 3f64.ln()).abs() < 1e-11, "{r:?}");
    }

    /// A root outside the bracket is reported with its side, never returned as a root.
    #[test]
    fn root_outside_bracket_is_an_error() {
        let e = solve_monotone(
            |x| (x - 10.0, 1.0),
            0.0,
            1.0,
            0.5,
            true,
            ScalarTolerance::default(),
        )
        .unwrap_err();
        assert!(matches!(e, ScalarError::NotBracketed { below: false, .. }));
        let e = solve_monotone(
            |x| (x + 10.0, 1.0),
            0.0,
            1.0,
            0.5,
            true,
            ScalarTolerance::default(),
        )
        .unwrap_err();
        assert!(matches!(e, ScalarError::NotBracketed { below: true, .. }));
    }

    /// Infinite values at an end are used by sign only.
    #[test]
    fn infinite_values_bisect() {
        let r = solve_monotone(
            |x: f64| (x.ln() - 0.5f64.ln(), 1.0 / x),
            0.0,
            1.0,
            0.0,
            true,
            ScalarTolerance::default(),
        )
        .unwrap();
        assert!((r.x - 0.5).abs() < 1e-12);
    }
}
