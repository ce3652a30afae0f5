//! Pieces shared by the competition circuits ([`super::wta`], [`super::diffpair`], and the
//! generic solver [`super::dc`]): parameter and mismatch checks, transistor evaluation at a
//! temperature, and the bookkeeping of a solve (its failures and its solution).
//!
//! Numerical core: no I/O, no printing.

use crate::device::{DrainCoupling, Ekv, MosMismatch, Polarity, Process, Transistor};
use crate::physics::thermal_voltage;
use crate::solvers::ScalarError;

use super::circuit::CircuitMessages;
use super::{
    fill_shares, validate_inputs, CompetitionError, InputSummary, SolveInfo, SolveMethod,
    StageSolution, Workspace,
};

/// Inverse of the EKV forward function: x with F(x) = i (`x = 2 ln(e^sqrt(i) - 1)`).
#[inline]
pub(super) fn ekv_f_inverse(i: f64) -> f64 {
    2.0 * i.sqrt().exp_m1().ln()
}

/// Check the number of lines: a competition needs at least 2 (`reason` says of what).
pub(super) fn at_least_two(
    stage: &'static str,
    n: usize,
    reason: &'static str,
) -> Result<(), CompetitionError> {
    if n < 2 {
        return Err(CompetitionError::InvalidParameter {
            stage,
            parameter: "n",
            value: n as f64,
            reason,
        });
    }
    Ok(())
}

/// Check that a transistor is an NMOS (`reason` says why it must be).
pub(super) fn nmos(
    stage: &'static str,
    parameter: &'static str,
    t: &Transistor,
    reason: &'static str,
) -> Result<(), CompetitionError> {
    if t.polarity != Polarity::Nmos {
        return Err(CompetitionError::InvalidParameter {
            stage,
            parameter,
            value: -1.0,
            reason,
        });
    }
    Ok(())
}

/// Check a design value: finite and >= 0.
pub(super) fn nonnegative(
    stage: &'static str,
    parameter: &'static str,
    value: f64,
) -> Result<(), CompetitionError> {
    if !(value.is_finite() && value >= 0.0) {
        return Err(CompetitionError::InvalidParameter {
            stage,
            parameter,
            value,
            reason: "must be finite and >= 0",
        });
    }
    Ok(())
}

/// Check a design value: finite.
pub(super) fn finite(
    stage: &'static str,
    parameter: &'static str,
    value: f64,
) -> Result<(), CompetitionError> {
    if !value.is_finite() {
        return Err(CompetitionError::InvalidParameter {
            stage,
            parameter,
            value,
            reason: "must be finite",
        });
    }
    Ok(())
}

/// `n` mismatch draws of transistor `t`, in order.
pub(super) fn draw_n<F>(n: usize, t: &Transistor, draw: &mut F) -> Vec<MosMismatch>
where
    F: FnMut(&Transistor) -> MosMismatch,
{
    (0..n).map(|_| draw(t)).collect()
}

/// Check the length of a per-transistor mismatch vector.
pub(super) fn check_count(
    stage: &'static str,
    what: &'static str,
    expected: usize,
    got: usize,
) -> Result<(), CompetitionError> {
    if got != expected {
        return Err(CompetitionError::WrongLength {
            stage,
            what,
            expected,
            got,
        });
    }
    Ok(())
}

/// Check every mismatch draw: finite, and a beta factor above -100 %.
pub(super) fn check_mismatch<'a>(
    stage: &'static str,
    draws: impl Iterator<Item = &'a MosMismatch>,
) -> Result<(), CompetitionError> {
    for m in draws {
        if !(m.dvt0.is_finite() && m.dbeta_rel.is_finite() && m.dbeta_rel > -1.0) {
            return Err(CompetitionError::InvalidParameter {
                stage,
                parameter: "mismatch",
                value: m.dbeta_rel,
                reason: "dvt0 must be finite and dbeta_rel finite and > -1",
            });
        }
    }
    Ok(())
}

/// Evaluates a design's transistors at a temperature, with the design's drain-coupling
/// override (if any) in place of the process value.
pub(super) struct Devices<'a> {
    process: &'a Process,
    drain_coupling: Option<DrainCoupling>,
    /// Temperature, K.
    temperature: f64,
}

impl<'a> Devices<'a> {
    pub(super) fn new(
        process: &'a Process,
        drain_coupling: Option<DrainCoupling>,
        temperature: f64,
    ) -> Devices<'a> {
        Devices {
            process,
            drain_coupling,
            temperature,
        }
    }

    /// One transistor with its mismatch.
    pub(super) fn one(&self, t: &Transistor, mm: MosMismatch) -> Ekv {
        let mut d = self.process.ekv(t, self.temperature, mm);
        if let Some(dc) = self.drain_coupling {
            d.eta = dc.eta(d.n, t.l, thermal_voltage(self.process.t_nom));
        }
        d
    }

    /// One instance of transistor `t` per mismatch draw.
    pub(super) fn each(&self, t: &Transistor, mms: &[MosMismatch]) -> Vec<Ekv> {
        mms.iter().map(|m| self.one(t, *m)).collect()
    }
}

/// The error of a solve that stopped short of its tolerance.
pub(super) fn not_converged(
    stage: &'static str,
    iterations: usize,
    residual: f64,
    tolerance: f64,
    inputs: InputSummary,
) -> CompetitionError {
    CompetitionError::NotConverged {
        stage,
        iterations,
        residual,
        tolerance,
        inputs,
    }
}

/// Refuse a final residual that is NaN or above the tolerance.
pub(super) fn check_residual(
    stage: &'static str,
    iterations: usize,
    residual: f64,
    tolerance: f64,
    inputs: &[f64],
    unit: &'static str,
) -> Result<(), CompetitionError> {
    if residual.is_nan() || residual > tolerance {
        return Err(not_converged(
            stage,
            iterations,
            residual,
            tolerance,
            InputSummary::of_in(inputs, unit),
        ));
    }
    Ok(())
}

/// The error for a failed monotone solve of the common node (log-form KCL residual `f`):
/// below ground blames the source (`source_key`), above the supply blames the supply; `spent`
/// iterations of an earlier phase are added to the count.
pub(super) fn common_node_failure(
    stage: &'static str,
    err: ScalarError,
    source_key: &'static str,
    msgs: &CircuitMessages,
    spent: usize,
    tolerance: f64,
    inputs: InputSummary,
) -> CompetitionError {
    match err {
        ScalarError::NotBracketed { below: true, .. } => CompetitionError::Compliance {
            stage,
            parameter: source_key,
            reason: msgs.below_reason,
            fix: msgs.below_fix,
            inputs,
        },
        ScalarError::NotBracketed { below: false, .. } => CompetitionError::Compliance {
            stage,
            parameter: "supply",
            reason: msgs.above_reason,
            fix: msgs.above_fix,
            inputs,
        },
        ScalarError::NoConvergence { f, iterations, .. } => not_converged(
            stage,
            spent + iterations,
            f.exp_m1().abs(),
            tolerance,
            inputs,
        ),
    }
}

/// Start a solve: check the inputs and size the scratch and the solution for `n` lines.
pub(super) fn begin_solve(
    stage: &'static str,
    n: usize,
    inputs: &[f64],
    unit: &'static str,
    ws: &mut Workspace,
    out: &mut StageSolution,
) -> Result<(), CompetitionError> {
    validate_inputs(stage, n, inputs, unit, unit == "A")?;
    ws.ensure(n);
    out.resize(n, n + 1);
    Ok(())
}

/// Finish a solve whose outputs are in `out.outputs`: store the line voltages and the common
/// node's, the shares and the solver report.
pub(super) fn finish_solve(
    out: &mut StageSolution,
    lines: &[f64],
    common: f64,
    iterations: usize,
    residual: f64,
    method: SolveMethod,
) {
    let n = lines.len();
    out.node_voltages[..n].copy_from_slice(lines);
    out.node_voltages[n] = common;
    fill_shares(&out.outputs, &mut out.shares);
    out.info = SolveInfo {
        iterations,
        residual,
        converged: true,
        method,
    };
}

#[cfg(test)]
mod tests {
    use super::*;

    // Pins the EKV forward-function inverse against its definition F(x) = ln^2(1 + e^(x/2))
    // (C. Enz, F. Krummenacher, E. Vittoz, 1995; model notes §3).
    #[test]
    fn ekv_f_inverse_inverts_the_forward_function() {
        for &x in &[-20.0_f64, -3.0, 0.0, 2.5, 30.0] {
            let f = (1.0 + (x / 2.0).exp()).ln().powi(2);
            approx::assert_relative_eq!(ekv_f_inverse(f), x, epsilon = 1e-9, max_relative = 1e-9);
        }
    }
}
