//! Pieces shared by the current-mode WTA ([`super::wta`]) and the multi-input differential
//! pair ([`super::diffpair`]): both drain a common node through a current source (an ideal
//! current or an NMOS with a fixed gate voltage), evaluate their transistors the same way, and
//! report their parameters, mismatch draws, solver failures and solutions alike.
//!
//! Numerical core: no I/O, no printing.

use crate::device::{DrainCoupling, Ekv, MosMismatch, Polarity, Process, Transistor};
use crate::physics::thermal_voltage;
use crate::solvers::ScalarError;

use super::diffpair::TailSource;
use super::mos::Mos;
use super::wta::{CircuitBias, WtaBias};
use super::{
    fill_shares, positive, validate_inputs, CompetitionError, InputSummary, SolveInfo, SolveMethod,
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

/// The current source that drains a stage's common node, as designed.
#[derive(Clone, Copy, Debug)]
pub(super) enum SourceSpec {
    /// Ideal sink current, A.
    Ideal(f64),
    /// NMOS (drain at the common node, source ground) and its gate voltage, V.
    Transistor(Transistor, f64),
}

impl From<WtaBias> for SourceSpec {
    fn from(b: WtaBias) -> SourceSpec {
        match b {
            WtaBias::Ideal { current } => SourceSpec::Ideal(current),
            WtaBias::Transistor {
                device,
                gate_voltage,
            } => SourceSpec::Transistor(device, gate_voltage),
        }
    }
}

impl From<TailSource> for SourceSpec {
    fn from(t: TailSource) -> SourceSpec {
        match t {
            TailSource::Ideal { current } => SourceSpec::Ideal(current),
            TailSource::Transistor {
                device,
                gate_voltage,
            } => SourceSpec::Transistor(device, gate_voltage),
        }
    }
}

/// Parameter names (config keys) of a stage's source, for its error messages.
pub(super) struct SourceKeys {
    /// The ideal current.
    pub current: &'static str,
    /// The transistor (its polarity).
    pub device: &'static str,
    /// The transistor's width.
    pub w: &'static str,
    /// The transistor's length.
    pub l: &'static str,
    /// The transistor's gate voltage.
    pub gate_voltage: &'static str,
    /// Why the transistor must be an NMOS.
    pub nmos_reason: &'static str,
    /// Check the polarity before the size (else after): which error a design with several
    /// faults reports first.
    pub nmos_first: bool,
}

impl SourceSpec {
    /// Check the source's parameters; the error names the first bad one.
    pub(super) fn validate(
        self,
        stage: &'static str,
        keys: &SourceKeys,
    ) -> Result<(), CompetitionError> {
        match self {
            SourceSpec::Ideal(current) => positive(stage, keys.current, current),
            SourceSpec::Transistor(device, gate_voltage) => {
                if keys.nmos_first {
                    nmos(stage, keys.device, &device, keys.nmos_reason)?;
                }
                positive(stage, keys.w, device.w)?;
                positive(stage, keys.l, device.l)?;
                if !keys.nmos_first {
                    nmos(stage, keys.device, &device, keys.nmos_reason)?;
                }
                finite(stage, keys.gate_voltage, gate_voltage)
            }
        }
    }

    /// The source's mismatch: one draw for a transistor, none for an ideal current.
    pub(super) fn draw<F>(self, draw: &mut F) -> MosMismatch
    where
        F: FnMut(&Transistor) -> MosMismatch,
    {
        match self {
            SourceSpec::Transistor(device, _) => draw(&device),
            SourceSpec::Ideal(_) => MosMismatch::default(),
        }
    }

    /// The source evaluated with `devices` (its mismatch `mm` is ignored for an ideal current).
    pub(super) fn at(self, devices: &Devices<'_>, mm: MosMismatch) -> CircuitBias {
        match self {
            SourceSpec::Ideal(current) => CircuitBias::Ideal(current),
            SourceSpec::Transistor(device, gate_voltage) => CircuitBias::Transistor {
                device: devices.one(&device, mm),
                gate_voltage,
            },
        }
    }
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

/// The fast form of an evaluated source (see [`Mos`]).
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) enum FastSource {
    Ideal(f64),
    Mos(Mos, f64),
}

impl FastSource {
    pub(super) fn of(b: &CircuitBias) -> FastSource {
        match *b {
            CircuitBias::Ideal(i) => FastSource::Ideal(i),
            CircuitBias::Transistor {
                device,
                gate_voltage,
            } => FastSource::Mos(Mos::new(&device), gate_voltage),
        }
    }

    /// Source current and its derivative in the common-node voltage `v`.
    #[inline]
    pub(super) fn eval(&self, v: f64) -> (f64, f64) {
        match *self {
            FastSource::Ideal(i) => (i, 0.0),
            FastSource::Mos(m, vg) => {
                let e = m.eval(vg, v, 0.0);
                (e.id, e.d_vd)
            }
        }
    }

    /// ln of the source current; for a transistor, its weak-inversion saturation current.
    #[inline]
    pub(super) fn ln_weak_current(&self) -> f64 {
        match *self {
            FastSource::Ideal(i) => i.ln(),
            FastSource::Mos(m, vg) => m.is.ln() + (vg - m.vt0) * m.inv_n * m.inv_ut,
        }
    }

    /// The parameter that sets the source current: `keys.current` or `keys.gate_voltage`.
    pub(super) fn key(&self, keys: &SourceKeys) -> &'static str {
        match self {
            FastSource::Ideal(_) => keys.current,
            FastSource::Mos(..) => keys.gate_voltage,
        }
    }
}

/// Name of node `i` of a stage with `n` lines: `{prefix}{i}`, and `common` for node `n`.
pub(super) fn node_name(i: usize, n: usize, common: &str, prefix: &str) -> String {
    if i == n {
        common.to_string()
    } else {
        format!("{prefix}{i}")
    }
}

/// True when `inputs` has `n` entries and `voltages` and `out` have `n + 1`.
#[inline]
pub(super) fn node_lengths_ok(n: usize, inputs: &[f64], voltages: &[f64], out: &[f64]) -> bool {
    inputs.len() == n && voltages.len() == n + 1 && out.len() == n + 1
}

/// The error of a solve that stopped short of its tolerance.
pub(super) fn not_converged(
    stage: &'static str,
    iterations: usize,
    residual: f64,
    tolerance: f64,
    inputs: &[f64],
) -> CompetitionError {
    CompetitionError::NotConverged {
        stage,
        iterations,
        residual,
        tolerance,
        inputs: InputSummary::of(inputs),
    }
}

/// Refuse a final residual that is NaN or above the tolerance.
pub(super) fn check_residual(
    stage: &'static str,
    iterations: usize,
    residual: f64,
    tolerance: f64,
    inputs: &[f64],
) -> Result<(), CompetitionError> {
    if residual.is_nan() || residual > tolerance {
        return Err(not_converged(
            stage, iterations, residual, tolerance, inputs,
        ));
    }
    Ok(())
}

/// What a stage says when its common node has no solution within the supply.
pub(super) struct CommonNodeMessages {
    /// The node would have to fall below ground.
    pub below_reason: &'static str,
    pub below_fix: &'static str,
    /// The node would have to rise above the supply.
    pub above_reason: &'static str,
    pub above_fix: &'static str,
}

/// The error for a failed monotone solve of the common node (log-form KCL residual `f`):
/// below ground blames the source (`source_key`), above the supply blames the supply; `spent`
/// iterations of an earlier phase are added to the count.
pub(super) fn common_node_failure(
    stage: &'static str,
    err: ScalarError,
    source_key: &'static str,
    msgs: &CommonNodeMessages,
    spent: usize,
    tolerance: f64,
    inputs: &[f64],
) -> CompetitionError {
    match err {
        ScalarError::NotBracketed { below: true, .. } => CompetitionError::Compliance {
            stage,
            parameter: source_key,
            reason: msgs.below_reason,
            fix: msgs.below_fix,
            inputs: InputSummary::of(inputs),
        },
        ScalarError::NotBracketed { below: false, .. } => CompetitionError::Compliance {
            stage,
            parameter: "supply",
            reason: msgs.above_reason,
            fix: msgs.above_fix,
            inputs: InputSummary::of(inputs),
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

    fn pmos(w: f64) -> Transistor {
        Transistor {
            polarity: Polarity::Pmos,
            w,
            l: 1e-6,
        }
    }

    fn parameter(r: Result<(), CompetitionError>) -> Option<&'static str> {
        match r {
            Err(CompetitionError::InvalidParameter { parameter, .. }) => Some(parameter),
            _ => None,
        }
    }

    // Regression pin of the stages' own documented contract ("the error names the first bad
    // one", in each stage's check order), no outside source: a PMOS source of zero width is
    // reported by its polarity when `nmos_first`, by its width otherwise.
    #[test]
    fn source_check_order_follows_the_keys() {
        let mut keys = SourceKeys {
            current: "s.current",
            device: "s.device",
            w: "s.device.w",
            l: "s.device.l",
            gate_voltage: "s.gate_voltage",
            nmos_reason: "must be an NMOS",
            nmos_first: true,
        };
        let bad = SourceSpec::Transistor(pmos(0.0), 0.5);
        assert_eq!(parameter(bad.validate("t", &keys)), Some("s.device"));
        keys.nmos_first = false;
        assert_eq!(parameter(bad.validate("t", &keys)), Some("s.device.w"));
        let gate = SourceSpec::Transistor(
            Transistor {
                polarity: Polarity::Nmos,
                w: 1e-6,
                l: 1e-6,
            },
            f64::NAN,
        );
        assert_eq!(parameter(gate.validate("t", &keys)), Some("s.gate_voltage"));
        assert_eq!(
            parameter(SourceSpec::Ideal(-1.0).validate("t", &keys)),
            Some("s.current")
        );
        assert!(SourceSpec::Ideal(1e-9).validate("t", &keys).is_ok());
    }

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
