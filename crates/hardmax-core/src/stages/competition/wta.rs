//! Current-mode winner-take-all circuit of N cells (J. Lazzaro, S. Ryckebusch, M. Mahowald,
//! C. Mead, "Winner-take-all networks of O(N) complexity", Advances in Neural Information
//! Processing Systems 1, 1989).
//!
//! Cell k: the input current I_k flows into node V_k; NMOS A_k (gate V_C, drain V_k, source
//! ground) sinks it; NMOS B_k (gate V_k, source V_C, drain at the fixed output voltage) carries
//! the output current; one bias (an ideal current I_b, or an NMOS with its gate at a bias voltage,
//! drain V_C, source ground) drains the common node V_C. Every bulk is at ground, so B_k sees its
//! body effect through the bulk-referred EKV model. Unknowns V_0..V_{N-1}, V_C; equations: KCL at
//! each V_k (I_k = I_A,k) and at V_C (Σ I_B,k = I_bias).
//!
//! ## Gain (our derivation, checked numerically by the tests)
//!
//! In weak-inversion saturation with EKV (`I = I_S e^{v_p - v_s}`, `v_p = (V_G - V_T0 +
//! eta (V_D - V_S))/(n U_T)`), KCL at V_k gives `V_k = (n U_T ln(I_k/I_S,A) + V_T0,A - V_C)/eta_A`
//! and B_k then carries `I_B,k ∝ exp(V_k/(n_B U_T)) · (terms common to all cells)`, so
//! `I_B,k ∝ I_k^g` with `g = n_A / (n_B eta_A)` (`= kappa/sigma_A` for equal slope factors) and
//! KCL at V_C normalises them: `I_out,k = I_b I_k^g / Σ_j I_j^g`. The same algebra refers
//! mismatch to the input: a threshold shift dV_T on A_k multiplies I_k by `exp(dV_T/(n U_T))`;
//! a shift on B_k multiplies I_out,k by `exp(-dV_T/(n U_T))`, i.e. acts on the input divided by g.
//! The closed form gives the solver's starting point; the full EKV solve is the answer.
//!
//! ## Solver
//!
//! The circuit implements [`SharedNodeCircuit`] once (load of line k = sink A_k, output of line
//! k = B_k, source = the bias): the generic DC solver ([`super::dc`]: damped Newton on the
//! arrowhead with the KCL residuals in log form, then a nested bracketing solve) and the
//! transient ([`super::transient`]) use these node equations. The closed form above gives the
//! starting point.

// Index loops run over parallel per-cell arrays; iterators would zip five of them.
#![allow(clippy::needless_range_loop)]

use crate::device::{DrainCoupling, Ekv, MosMismatch, Process, Transistor};

use super::circuit::{
    kcl_residuals, mos_shot_psd, node_currents, Branch, BranchLanes, CircuitMessages, DcStrategy,
    Lanes, SharedNodeCircuit, LANES,
};
use super::common::{
    at_least_two, check_count, check_mismatch, draw_n, ekv_f_inverse, nmos, nonnegative, Devices,
};
use super::mos::{Mos, MosLanes};
use super::source::{CurrentSource, SourceKeys};
use super::{positive, CompetitionError};
use crate::maths;

const STAGE: &str = "current-mode WTA";

/// Config keys of the bias, for error messages.
const BIAS_KEYS: SourceKeys = SourceKeys {
    current: "bias current",
    device: "bias.device",
    w: "bias.device.w",
    l: "bias.device.l",
    gate_voltage: "bias.gate_voltage",
    nmos_reason: "the bias transistor is an NMOS",
    nmos_first: false,
};

/// What the DC solve says when it finds no operating point within the supply.
static MESSAGES: CircuitMessages = CircuitMessages {
    source_keys: BIAS_KEYS,
    below_reason: "the inputs cannot carry the bias current with the common node V_C \
                   at or above ground",
    below_fix: "raise the input currents or lower the bias current",
    above_reason: "the common node V_C would have to rise above the supply",
    above_fix: "raise the supply, widen the sink transistors, or lower the input currents",
    line_reason: "an input node would have to rise above the supply: its sink transistor \
                  cannot carry the input current",
    line_fix: "widen the sink transistors (W/L), lower the input currents, or raise the supply",
};

/// Relative KCL tolerance of the DC solve (at every node, relative to that node's current).
/// At 1e-8 the node voltages are within about `1e-8 n U_T / eta` (≈ 30 nV at eta = 0.01) of the
/// exact solution, far below any mismatch or noise effect.
pub const WTA_RELATIVE_TOLERANCE: f64 = 1e-8;

/// Nominal design of a current-mode WTA (every quantity SI).
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct WtaDesign {
    /// Number of cells (class lines), at least 2.
    pub n: usize,
    /// Process parameters (NMOS used for every transistor).
    pub process: Process,
    /// Sink transistor A_k (gate V_C, drain V_k, source ground).
    pub sink: Transistor,
    /// Output transistor B_k (gate V_k, source V_C, drain at `output_voltage`).
    pub output: Transistor,
    /// Bias of the common node.
    pub bias: CurrentSource,
    /// Supply V_dd, V: upper limit of every node (the input sources' compliance).
    pub supply: f64,
    /// Voltage at which the output drains are held (a current read-out), V.
    pub output_voltage: f64,
    /// Overrides the process's drain coupling for A_k and B_k (sets the gain g = 1/eta of the
    /// sink for equal slope factors); `None` uses the process value.
    pub drain_coupling: Option<DrainCoupling>,
    /// Capacitance on each input node V_k, F (for transient evaluation).
    pub input_capacitance: f64,
    /// Capacitance on the common node V_C, F (for transient evaluation).
    pub common_capacitance: f64,
}

impl WtaDesign {
    /// The sink's drain coupling sigma = eta / n: the weight of its drain voltage V_k in the
    /// weak-inversion exponent (d ln I / d V_k = sigma / U_T), with this design's override or
    /// the process's value at the sink's length. The input node's own conductance is
    /// sigma I_k / U_T (the common-node gate is shared by every cell).
    pub fn sink_sigma(&self) -> f64 {
        let t = &self.process.nmos;
        let dc = self.drain_coupling.unwrap_or(t.drain_coupling);
        dc.eta(
            t.n,
            self.sink.l,
            crate::physics::thermal_voltage(self.process.t_nom),
        ) / t.n
    }

    /// A design with the supply and output voltage at the process's V_dd, the process's drain
    /// coupling, and node capacitances of 50 fF (inputs) and 200 fF (common node): placeholders
    /// of ours, set them from your layout.
    pub fn new(
        n: usize,
        process: Process,
        sink: Transistor,
        output: Transistor,
        bias: CurrentSource,
    ) -> WtaDesign {
        let vdd = process.vdd;
        WtaDesign {
            n,
            process,
            sink,
            output,
            bias,
            supply: vdd,
            output_voltage: vdd,
            drain_coupling: None,
            input_capacitance: 50e-15,
            common_capacitance: 200e-15,
        }
    }

    /// Check every parameter; the error names the first bad one.
    pub fn validate(&self) -> Result<(), CompetitionError> {
        at_least_two(STAGE, self.n, "a competition needs at least 2 cells")?;
        for (name, t) in [("sink", &self.sink), ("output", &self.output)] {
            nmos(STAGE, name, t, "this WTA is built from NMOS transistors")?;
        }
        positive(STAGE, "sink.w", self.sink.w)?;
        positive(STAGE, "sink.l", self.sink.l)?;
        positive(STAGE, "output.w", self.output.w)?;
        positive(STAGE, "output.l", self.output.l)?;
        positive(STAGE, "supply", self.supply)?;
        nonnegative(STAGE, "output_voltage", self.output_voltage)?;
        nonnegative(STAGE, "input_capacitance", self.input_capacitance)?;
        nonnegative(STAGE, "common_capacitance", self.common_capacitance)?;
        self.bias.validate(STAGE, &BIAS_KEYS)?;
        if let Some(dc) = self.drain_coupling {
            let v = match dc {
                DrainCoupling::Eta(x)
                | DrainCoupling::Sigma(x)
                | DrainCoupling::EarlyVoltage(x)
                | DrainCoupling::EarlyVoltagePerLength(x) => x,
            };
            let ok = match dc {
                DrainCoupling::Eta(_) | DrainCoupling::Sigma(_) => v.is_finite() && v >= 0.0,
                _ => v.is_finite() && v > 0.0,
            };
            if !ok {
                return Err(CompetitionError::InvalidParameter {
                    stage: STAGE,
                    parameter: "drain_coupling",
                    value: v,
                    reason: "eta/sigma must be >= 0, an Early voltage > 0",
                });
            }
        }
        if !(self.process.t_nom > 0.0 && self.process.nmos.n > 0.0) {
            return Err(CompetitionError::InvalidParameter {
                stage: STAGE,
                parameter: "process.nmos.n",
                value: self.process.nmos.n,
                reason: "slope factor and nominal temperature must be > 0",
            });
        }
        Ok(())
    }

    /// Number of transistors per chip: N sinks, N outputs, and the bias transistor if any.
    pub fn transistor_count(&self) -> usize {
        2 * self.n + usize::from(self.bias.is_transistor())
    }
}

/// One sampled WTA chip: the design plus every transistor's static mismatch.
#[derive(Clone, Debug, PartialEq)]
pub struct WtaChip {
    pub design: WtaDesign,
    /// Mismatch of A_0..A_{N-1}.
    pub sink: Vec<MosMismatch>,
    /// Mismatch of B_0..B_{N-1}.
    pub output: Vec<MosMismatch>,
    /// Mismatch of the bias transistor (ignored for an ideal bias).
    pub bias: MosMismatch,
}

impl WtaChip {
    /// A chip without mismatch.
    pub fn nominal(design: WtaDesign) -> Result<WtaChip, CompetitionError> {
        let n = design.n;
        WtaChip::from_mismatch(
            design,
            vec![MosMismatch::default(); n],
            vec![MosMismatch::default(); n],
            MosMismatch::default(),
        )
    }

    /// A chip from given mismatch draws (N sinks, N outputs, one bias).
    pub fn from_mismatch(
        design: WtaDesign,
        sink: Vec<MosMismatch>,
        output: Vec<MosMismatch>,
        bias: MosMismatch,
    ) -> Result<WtaChip, CompetitionError> {
        design.validate()?;
        check_count(STAGE, "sink mismatch", design.n, sink.len())?;
        check_count(STAGE, "output mismatch", design.n, output.len())?;
        check_mismatch(
            STAGE,
            sink.iter().chain(&output).chain(std::iter::once(&bias)),
        )?;
        Ok(WtaChip {
            design,
            sink,
            output,
            bias,
        })
    }

    /// Sample a chip, drawing each transistor's mismatch with `draw` in a fixed order:
    /// A_0..A_{N-1}, then B_0..B_{N-1}, then the bias transistor (only if the bias is one).
    /// Wire `draw` to Pelgrom sampling on the chip's stream.
    pub fn sample<F>(design: WtaDesign, mut draw: F) -> Result<WtaChip, CompetitionError>
    where
        F: FnMut(&Transistor) -> MosMismatch,
    {
        design.validate()?;
        let sink = draw_n(design.n, &design.sink, &mut draw);
        let output = draw_n(design.n, &design.output, &mut draw);
        let bias = design.bias.draw(&mut draw);
        WtaChip::from_mismatch(design, sink, output, bias)
    }

    /// The chip at a temperature (K), ready to solve.
    pub fn at(&self, temperature: f64) -> Result<WtaCircuit, CompetitionError> {
        positive(STAGE, "temperature", temperature)?;
        let d = &self.design;
        let devices = Devices::new(&d.process, d.drain_coupling, temperature);
        let sink = devices.each(&d.sink, &self.sink);
        let output = devices.each(&d.output, &self.output);
        let bias = d.bias.at(&devices, self.bias);
        Ok(WtaCircuit {
            n: d.n,
            sink_fast: sink.iter().map(Mos::new).collect(),
            output_fast: output.iter().map(Mos::new).collect(),
            sink,
            output,
            bias_fast: bias.fast(),
            bias,
            supply: d.supply,
            output_voltage: d.output_voltage,
            vc_min: 0.0,
            temperature,
            input_capacitance: d.input_capacitance,
            common_capacitance: d.common_capacitance,
            tolerance: WTA_RELATIVE_TOLERANCE,
            max_newton: 60,
        })
    }
}

/// A WTA chip at a temperature: one EKV device per transistor, ready to solve.
#[derive(Clone, Debug, PartialEq)]
pub struct WtaCircuit {
    n: usize,
    sink: Vec<Ekv>,
    output: Vec<Ekv>,
    bias: CurrentSource<Ekv>,
    sink_fast: Vec<Mos>,
    output_fast: Vec<Mos>,
    bias_fast: CurrentSource<Mos>,
    /// Supply V_dd, V.
    pub supply: f64,
    /// Output drain voltage, V.
    pub output_voltage: f64,
    /// Lowest voltage the common node may take (ground), V.
    pub vc_min: f64,
    /// Temperature, K.
    pub temperature: f64,
    /// Input node capacitance, F.
    pub input_capacitance: f64,
    /// Common node capacitance, F.
    pub common_capacitance: f64,
    /// Relative KCL tolerance at every node.
    pub tolerance: f64,
    /// Newton steps before the bracketing solve takes over.
    pub max_newton: usize,
}

impl WtaCircuit {
    /// Sink transistor A_k.
    pub fn sink(&self, k: usize) -> Option<&Ekv> {
        self.sink.get(k)
    }

    /// Output transistor B_k.
    pub fn output(&self, k: usize) -> Option<&Ekv> {
        self.output.get(k)
    }

    /// The bias.
    pub fn bias(&self) -> &CurrentSource<Ekv> {
        &self.bias
    }

    /// Weak-inversion gain g = n_A/(n_B eta_A) of cell k (= kappa/sigma of the sink for equal
    /// slope factors); infinite without drain coupling. See the module docs for the derivation.
    pub fn gain(&self, k: usize) -> Option<f64> {
        let a = self.sink.get(k)?;
        let b = self.output.get(k)?;
        Some(a.n / (b.n * a.eta))
    }

    /// Relative KCL residual at each node for given node voltages `[V_0..V_{N-1}, V_C]`:
    /// entry k is `(I_k - I_A,k)/max(I_k, I_A,k)` (0 when both are 0), entry N is
    /// `(Σ I_B,k - I_bias)/I_bias`. Evaluated with the folded EKV form of [`Mos`], which keeps
    /// full relative precision when a sink's V_DS is a tiny fraction of U_T (where a plain
    /// difference of EKV F values cannot). Returns `None` on a length mismatch.
    pub fn kcl_residuals(&self, inputs: &[f64], voltages: &[f64], out: &mut [f64]) -> Option<()> {
        kcl_residuals(self, inputs, voltages, out)
    }

    /// Net current (A) flowing into each node for node voltages `[V_0..V_{N-1}, V_C]`:
    /// entry k is `I_k - I_A,k`, entry N is `Σ I_B,k - I_bias`. Zero at a DC solution; with the
    /// node capacitances it gives the right-hand side of the circuit's ODE,
    /// `C dV/dt = node current`. Returns `None` on a length mismatch.
    pub fn node_currents(&self, inputs: &[f64], voltages: &[f64], out: &mut [f64]) -> Option<()> {
        node_currents(self, inputs, voltages, out)
    }

    /// Starting V_C from the weak-inversion closed form (module docs), clamped to the supply.
    /// Writes each cell's closed-form share `I_k^g / Σ I_j^g` into `shares` and returns
    /// `(V_C, ln I_b)` (for a bias transistor, I_b is its weak-inversion saturation current).
    fn closed_form_vc(&self, inputs: &[f64], shares: &mut [f64]) -> (f64, f64) {
        let vout = self.output_voltage;
        let ln_ib = self.bias_fast.ln_weak_current();
        let mut max_e = f64::NEG_INFINITY;
        let mut slope = 0.0;
        for k in 0..self.n {
            let i = inputs[k];
            if i <= 0.0 {
                shares[k] = f64::NEG_INFINITY;
                continue;
            }
            let a = &self.sink_fast[k];
            let b = &self.output_fast[k];
            let eta_a = a.eta.max(1e-3);
            // EKV forward law inverted (x = 2 ln(e^sqrt(i) - 1), ≈ ln i in weak inversion):
            // keeps the start close where the pure exponential is off by a few per cent.
            let x = ekv_f_inverse(i / a.is);
            let alpha = (a.n() * a.ut() * x + a.vt0) / eta_a;
            let e = b.is.ln() + (alpha - b.vt0 + b.eta * vout) * b.inv_n * b.inv_ut;
            shares[k] = e;
            max_e = max_e.max(e);
            slope = (1.0 / eta_a + b.eta) * b.inv_n * b.inv_ut + b.inv_ut;
        }
        let mut s = 0.0;
        for x in shares[..self.n].iter_mut() {
            *x = (*x - max_e).exp();
            s += *x;
        }
        for x in shares[..self.n].iter_mut() {
            *x /= s;
        }
        if !(max_e.is_finite() && slope > 0.0) {
            return (self.vc_min, ln_ib);
        }
        let vc = (max_e + s.ln() - ln_ib) / slope;
        let vc = if vc.is_finite() {
            vc.clamp(self.vc_min, self.supply)
        } else {
            self.vc_min
        };
        (vc, ln_ib)
    }

    /// The pieces of [`Self::closed_form_vc`] for circuits built on these cells (the k-winners
    /// start): `logs[k]` = ln of the current B_k would carry at V_C = 0 with its sink carrying
    /// `inputs[k]` (weak-inversion closed form; -inf for an input <= 0), and returns
    /// `(slope, ln I_b)` where `slope` is d ln I_B / dV_C, so a group of cells sharing a
    /// current I has `V_C = (ln Σ e^logs - ln I) / slope`.
    pub(super) fn closed_form_logs(&self, inputs: &[f64], logs: &mut [f64]) -> (f64, f64) {
        let vout = self.output_voltage;
        let ln_ib = self.bias_fast.ln_weak_current();
        let mut slope = 0.0;
        for k in 0..self.n {
            let i = inputs[k];
            if i <= 0.0 {
                logs[k] = f64::NEG_INFINITY;
                continue;
            }
            let a = &self.sink_fast[k];
            let b = &self.output_fast[k];
            let eta_a = a.eta.max(1e-3);
            let x = ekv_f_inverse(i / a.is);
            let alpha = (a.n() * a.ut() * x + a.vt0) / eta_a;
            logs[k] = b.is.ln() + (alpha - b.vt0 + b.eta * vout) * b.inv_n * b.inv_ut;
            slope = (1.0 / eta_a + b.eta) * b.inv_n * b.inv_ut + b.inv_ut;
        }
        (slope, ln_ib)
    }

    /// Starting V_k of a cell expected to carry `i_out` through its output transistor B_k at
    /// a given V_C (saturated B_k, inverted EKV forward law `x = 2 ln(e^sqrt(i) - 1)`).
    #[inline]
    pub(super) fn cell_guess_from_output(&self, k: usize, i_out: f64, vc: f64) -> f64 {
        let b = &self.output_fast[k];
        let x = ekv_f_inverse(i_out / b.is);
        b.n() * (b.ut() * x + vc) + b.vt0 - b.eta * (self.output_voltage - vc)
    }

    /// Starting V_k for a given V_C: the sink's weak-inversion law with drain coupling,
    /// `I_k = I_sat e^(eta V_k/(n U_T)) (1 - e^(-V_k/U_T))` with `I_sat = I_S F(v_p(V_k = 0))`,
    /// solved by a few cheap Newton steps in ln V_k (the law is concave in V_k, near-linear in
    /// ln V_k in triode and convex in saturation).
    #[inline]
    pub(super) fn cell_guess(&self, k: usize, i: f64, vc: f64) -> f64 {
        if i <= 0.0 {
            return 0.0;
        }
        let a = &self.sink_fast[k];
        let x = (vc - a.vt0) * a.inv_n * a.inv_ut;
        let h = 0.5 * x;
        let sp = h.max(0.0) + (-h.abs()).exp().ln_1p();
        let isat = a.is * sp * sp;
        let r = i / isat;
        let ut = a.ut();
        let alpha = a.eta.max(1e-4) * a.inv_n * a.inv_ut;
        let ln_r = r.ln();
        let mut v = if r < 0.5 {
            -ut * (-r).ln_1p()
        } else {
            ut + ln_r.max(0.0) / alpha
        };
        if !(v.is_finite() && v > 0.0) {
            return 0.5 * self.supply;
        }
        v = v.min(self.supply);
        for _ in 0..4 {
            let e = (v * a.inv_ut).exp_m1();
            // ln(1 - e^(-V/U_T)) = ln(e^(V/U_T) - 1) - V/U_T
            let g = alpha * v + e.ln() - v * a.inv_ut - ln_r;
            let dg = v * (alpha + a.inv_ut / e);
            let dy = (-g / dg).clamp(-5.0, 2.0);
            v = (v * dy.exp()).min(self.supply);
            if dy.abs() < 1e-2 {
                break;
            }
        }
        if v.is_finite() && v > 0.0 {
            v.min(0.999 * self.supply)
        } else {
            0.5 * self.supply
        }
    }
}

/// `|x| < 0.05`, the reach of the start's short series (false for NaN: the kernels take it).
#[inline(always)]
fn within_series_reach(x: f64) -> bool {
    x.abs() < 0.05
}

/// `e^t - 1` by its series to `t^4` (remainder under `|t|^5/120 e^|t|`: 3e-9 for `|t| < 0.05`).
#[inline(always)]
fn exp_m1_series(t: f64) -> f64 {
    t * (1.0 + t * (0.5 + t * (1.0 / 6.0 + t * (1.0 / 24.0))))
}

/// `ln(1 + u)` by its series to `u^5` (remainder under `|u|^6/6`: 3e-9 for `|u| < 0.05`).
#[inline(always)]
fn ln_1p_series(u: f64) -> f64 {
    u * (1.0 - u * (0.5 - u * (1.0 / 3.0 - u * (0.25 - u * 0.2))))
}

/// A sink's drain law at given pinch-off voltages (`WtaCircuit::loser_start_lanes`), every lane:
/// `h_f = v_p/(2 U_T)` at the grounded source, `e = e^(-|h_f|)`, `lp = ln(1 + e)`, `s_f =
/// softplus(h_f)`, `s_r = sqrt(s_f^2 - I_k/I_S)`, `em = e^(s_r) - 1`, `h_r = ln(em)` (so the
/// drain sits at `V_k = v_p - 2 U_T h_r`), and whether the sink carries I_k below saturation
/// there (`ok`). Starting-point kernels.
#[derive(Clone, Copy)]
struct DrainLaw {
    hf: Lanes,
    e: Lanes,
    lp: Lanes,
    sf: Lanes,
    sr: Lanes,
    em: Lanes,
    hr: Lanes,
    ok: [bool; LANES],
}

impl DrainLaw {
    /// `(h_f, e, lp)` at the pinch-off voltages `vp`.
    #[inline(always)]
    fn source_side(a: &Mos, vp: &Lanes) -> (Lanes, Lanes, Lanes) {
        let mut hf = [0.0; LANES];
        let mut na = [0.0; LANES];
        for l in 0..LANES {
            hf[l] = 0.5 * vp[l] * a.inv_ut;
            na[l] = -hf[l].abs();
        }
        let e = maths::exp_start(&na);
        let lp = maths::ln_1p_start(&e);
        (hf, e, lp)
    }

    #[inline(always)]
    fn at(a: &Mos, i: &Lanes, vp: &Lanes) -> DrainLaw {
        let (hf, e, lp) = DrainLaw::source_side(a, vp);
        let mut sf = [0.0; LANES];
        let mut sr = [0.0; LANES];
        let mut ok = [false; LANES];
        for l in 0..LANES {
            sf[l] = hf[l].max(0.0) + lp[l];
            let d = sf[l] * sf[l] - i[l] / a.is;
            ok[l] = i[l] > 0.0 && d > 0.0 && d.is_finite();
            sr[l] = if ok[l] { d.sqrt() } else { 1.0 };
        }
        let em = maths::exp_m1_start(&sr);
        let hr = maths::ln_start(&em);
        DrainLaw {
            hf,
            e,
            lp,
            sf,
            sr,
            em,
            hr,
            ok,
        }
    }

    /// One Newton step on the fixed point `V = G(V)`, `G(V) = v_p(V) - 2 U_T h_r(V)` (times the
    /// polarity), from `v` where the law was taken (pinch-off `vp`): `G'(V) = (eta/n) (1 - s_f
    /// l_f/(s_r l_r))`, from `dh_r/dv_p = s_f l_f/(2 U_T s_r l_r)`, `l` the logistic (`l_r = 1 -
    /// e^(-s_r)`).
    #[inline(always)]
    fn newton(&self, a: &Mos, vp: &Lanes, v: &Lanes) -> Lanes {
        let (p, ut, en) = (a.sign, a.ut(), a.eta * a.inv_n);
        let mut out = [0.0; LANES];
        for l in 0..LANES {
            let g = p * (vp[l] - 2.0 * ut * self.hr[l]);
            let e = self.e[l];
            let lf = if self.hf[l] >= 0.0 {
                1.0 / (1.0 + e)
            } else {
                e / (1.0 + e)
            };
            let lr = self.em[l] / (1.0 + self.em[l]);
            let dg = en * (1.0 - self.sf[l] * lf / (self.sr[l] * lr));
            out[l] = v[l] + (g - v[l]) / (1.0 - dg);
        }
        out
    }
}

/// Cells queued for the saturation-side start (`WtaCircuit::loser_start_lanes` marks them),
/// [`LANES`] at a time, each slot with its own line's sink (`MosLanes`): a lane computes the
/// cells that need this start whichever decision and line they belong to, instead of every
/// line computing it for all lanes when one lane needs it.
struct SaturatedCells {
    len: usize,
    cell: [usize; LANES],
    lane: [usize; LANES],
    input: Lanes,
    vc: Lanes,
    f_inv: Lanes,
    /// The drain-law start of the cell (NaN when it has none), kept where this one fails.
    fallback: Lanes,
}

impl SaturatedCells {
    fn new() -> SaturatedCells {
        SaturatedCells {
            len: 0,
            cell: [0; LANES],
            lane: [0; LANES],
            input: [0.0; LANES],
            vc: [0.0; LANES],
            f_inv: [0.0; LANES],
            fallback: [0.0; LANES],
        }
    }

    /// Queue line k of lane l; true when the queue is full (the caller then flushes it).
    #[inline(always)]
    fn push(&mut self, k: usize, l: usize, input: f64, vc: f64, f_inv: f64, fallback: f64) -> bool {
        let j = self.len;
        (self.cell[j], self.lane[j]) = (k, l);
        (self.input[j], self.vc[j], self.f_inv[j], self.fallback[j]) = (input, vc, f_inv, fallback);
        self.len += 1;
        self.len == LANES
    }

    /// Solve the queued cells and write their starts into `lines`; empties the queue.
    #[inline(always)]
    fn flush(&mut self, c: &WtaCircuit, lines: &mut [Lanes]) {
        if self.len == 0 {
            return;
        }
        // Slots beyond the queue's end compute a copy of its first (ignored).
        for j in self.len..LANES {
            self.cell[j] = self.cell[0];
            (self.input[j], self.vc[j], self.f_inv[j]) = (self.input[0], self.vc[0], self.f_inv[0]);
        }
        let v = c.saturated_start(self);
        for j in 0..self.len {
            let (k, l) = (self.cell[j], self.lane[j]);
            lines[k][l] = if v[j].is_finite() && v[j] > 0.0 {
                v[j].min(0.999 * c.supply)
            } else if self.fallback[j].is_finite() {
                self.fallback[j]
            } else {
                c.cell_guess(k, self.input[j], self.vc[j])
            };
        }
        self.len = 0;
    }
}

/// `ekv_f_inverse` on every lane: `2 ln(e^sqrt(i) - 1)`.
#[inline(always)]
fn ekv_f_inverse_lanes(i: &Lanes) -> Lanes {
    let mut y = [0.0; LANES];
    for l in 0..LANES {
        y[l] = i[l].sqrt();
    }
    let e = maths::exp_m1_start(&y);
    let mut x = maths::ln_start(&e);
    for v in x.iter_mut() {
        *v *= 2.0;
    }
    x
}

impl WtaCircuit {
    /// [`WtaCircuit::closed_form_vc`] on every lane (the same formulas with the vectorised
    /// kernels). Writes the shares into `shares` and returns `(V_C, ln I_b)`.
    #[inline(always)]
    fn closed_form_vc_lanes(
        &self,
        inputs: &[Lanes],
        shares: &mut [Lanes],
        f_inverse: &mut [Lanes],
    ) -> (Lanes, f64) {
        let vout = self.output_voltage;
        let ln_ib = self.bias_fast.ln_weak_current();
        let mut max_e = [f64::NEG_INFINITY; LANES];
        let mut slope = [0.0; LANES];
        for k in 0..self.n {
            let a = &self.sink_fast[k];
            let b = &self.output_fast[k];
            let eta_a = a.eta.max(1e-3);
            let inv_is = 1.0 / a.is;
            let mut r = [0.0; LANES];
            for l in 0..LANES {
                r[l] = inputs[k][l] * inv_is;
            }
            let x = ekv_f_inverse_lanes(&r);
            f_inverse[k] = x;
            let ln_bis = b.ln_is;
            let slope_k = (1.0 / eta_a + b.eta) * b.inv_n * b.inv_ut + b.inv_ut;
            for l in 0..LANES {
                let alpha = (a.n() * a.ut() * x[l] + a.vt0) / eta_a;
                let e = ln_bis + (alpha - b.vt0 + b.eta * vout) * b.inv_n * b.inv_ut;
                let on = inputs[k][l] > 0.0;
                shares[k][l] = if on { e } else { f64::NEG_INFINITY };
                if on {
                    max_e[l] = max_e[l].max(e);
                    slope[l] = slope_k;
                }
            }
        }
        let mut s = [0.0; LANES];
        for k in 0..self.n {
            let mut d = [0.0; LANES];
            for l in 0..LANES {
                d[l] = shares[k][l] - max_e[l];
            }
            shares[k] = maths::exp_start(&d);
            for l in 0..LANES {
                s[l] += shares[k][l];
            }
        }
        let mut inv_s = [0.0; LANES];
        for l in 0..LANES {
            inv_s[l] = 1.0 / s[l];
        }
        for k in 0..self.n {
            for l in 0..LANES {
                shares[k][l] *= inv_s[l];
            }
        }
        let ln_s = maths::ln_start(&s);
        let mut vc = [0.0; LANES];
        for l in 0..LANES {
            let v = (max_e[l] + ln_s[l] - ln_ib) / slope[l];
            vc[l] = if !(max_e[l].is_finite() && slope[l] > 0.0 && v.is_finite()) {
                self.vc_min
            } else {
                v.clamp(self.vc_min, self.supply)
            };
        }
        (vc, ln_ib)
    }

    /// In each lane whose closed form has a clear winner (a share above 1/2), that cell's V_k
    /// and V_C from the exact device laws: its sink carries its input, and its output transistor
    /// with the other cells' outputs carries the bias current at V_C. The others' outputs are
    /// the closed form's `(1 - share)` of the bias at its V_C, moved with V_C as a
    /// source-driven transistor in weak inversion (`e^(-V_C/U_T)`; they are a small part of the
    /// sum, and in weak inversion, where the closed form holds). One Newton step on the two
    /// equations in log form from the closed form's V_C and the output law's V_k, every lane
    /// with its own winner's devices (`MosLanes`), starting-point kernels. Updates `vc` and
    /// returns `(winner, V_k)` per lane (`usize::MAX` where there is no clear winner, or the step
    /// leaves the supply, or a current is not positive).
    #[inline(always)]
    fn refine_winner_lanes(
        &self,
        inputs: &[Lanes],
        share: &[Lanes],
        vc: &mut Lanes,
    ) -> [(usize, f64); LANES] {
        let mut kw = [0usize; LANES];
        let mut best = [0.0; LANES];
        for k in 0..self.n {
            for l in 0..LANES {
                if share[k][l] > best[l] {
                    (kw[l], best[l]) = (k, share[k][l]);
                }
            }
        }
        let mut input = [0.0; LANES];
        let mut clear = [false; LANES];
        for l in 0..LANES {
            input[l] = inputs[kw[l]][l];
            clear[l] = best[l] > 0.5 && input[l] > 0.0;
        }
        let mut out = [(usize::MAX, 0.0); LANES];
        if !clear.iter().any(|&c| c) {
            return out;
        }
        let a = MosLanes::gather(&self.sink_fast, &kw);
        let b = MosLanes::gather(&self.output_fast, &kw);
        let vc0 = *vc;
        let (ib, dib) = self.bias_fast.eval_lanes_start(&vc0);
        let mut y = [0.0; LANES];
        for l in 0..LANES {
            y[l] = (best[l] * ib[l] / b.is[l]).sqrt();
        }
        let x = maths::ln_start(&maths::exp_m1_start(&y));
        let vout = self.output_voltage;
        let mut vk = [0.0; LANES];
        for l in 0..LANES {
            // The output law (saturated B_k, inverted EKV forward law), as `cell_guess_from_output`.
            let (n, ut) = (1.0 / b.inv_n[l], 1.0 / b.inv_ut[l]);
            vk[l] = n * (ut * 2.0 * x[l] + vc0[l]) + b.vt0[l] - b.eta[l] * (vout - vc0[l]);
        }
        let sink = a.eval_start(&vc0, &vk, &[0.0; LANES]);
        let outp = b.eval_start(&vk, &[vout; LANES], &vc0);
        // `others` at V_C = vc0: the closed form's (1 - share) of the bias.
        let mut others = [0.0; LANES];
        let mut sum = [0.0; LANES];
        let mut r1 = [1.0; LANES];
        let mut r2 = [1.0; LANES];
        for l in 0..LANES {
            others[l] = (1.0 - best[l]) * ib[l];
            sum[l] = outp.id[l] + others[l];
            if sink.id[l] > 0.0 && outp.id[l] > 0.0 && ib[l] > 0.0 {
                r1[l] = sink.id[l] / input[l];
                r2[l] = sum[l] / ib[l];
            } else {
                clear[l] = false;
            }
        }
        let f1 = maths::ln_start(&r1);
        let f2 = maths::ln_start(&r2);
        for l in 0..LANES {
            // f1 = ln(I_A/I_k), f2 = ln((I_B + others)/I_b); rows: d/dV_k, d/dV_C.
            let (j11, j12) = (sink.d_vd[l] / sink.id[l], sink.d_vg[l] / sink.id[l]);
            let j21 = outp.d_vg[l] / sum[l];
            let j22 = (outp.d_vs[l] - others[l] * b.inv_ut[l]) / sum[l] - dib[l] / ib[l];
            let det = j11 * j22 - j12 * j21;
            let dvk = (-f1[l] * j22 + f2[l] * j12) / det;
            let dvc = (-f2[l] * j11 + f1[l] * j21) / det;
            let nvk = vk[l] + dvk.clamp(-0.1, 0.1);
            let nvc = vc0[l] + dvc.clamp(-0.05, 0.05);
            let inside = dvk.is_finite()
                && dvc.is_finite()
                && nvk > 0.0
                && nvk < 0.999 * self.supply
                && nvc > self.vc_min
                && nvc < self.supply;
            if clear[l] && inside {
                vc[l] = nvc;
                out[l] = (kw[l], nvk);
            }
        }
        out
    }

    /// Starting V_k of a losing cell at each lane's V_C: its sink in triode carries I_k, so
    /// `F(x_r) = F(x_f) - I_k/I_S` in the EKV form `I = I_S (F(x_f) - F(x_r))` (Enz, Krummenacher,
    /// Vittoz 1995; `F(x) = s(x/2)^2`, `s` the softplus), solved for the drain in closed form:
    /// `s_r = sqrt(s_f^2 - I_k/I_S)`, `h_r = ln(e^(s_r) - 1)`, `V_k = v_p - 2 U_T h_r`. The pinch-off
    /// voltage `v_p` depends on V_k through the drain coupling eta: two rounds, the first at
    /// V_k = 0, the second a Newton step on the fixed point `V_k = G(V_k)` from the first's V_k
    /// (a plain fixed-point step would contract by only `eta/n (e^(V_k/U_T) - 1)`, which passes 1
    /// near V_k = 4 U_T, where a runner-up cell sits). Returns these starts (NaN where the
    /// drain law gives no voltage inside the supply or the input is not positive) and the lanes
    /// of `want` whose cell belongs to the saturation-side start instead
    /// ([`WtaCircuit::saturated_start`]): its sink cannot carry I_k at V_k = 0 (it saturates),
    /// or its drain lands above 4 U_T, where the fixed point is steep and one step falls short.
    /// Starting-point kernels: about 1e-5 relative.
    #[inline(always)]
    fn loser_start_lanes(
        &self,
        k: usize,
        i: &Lanes,
        vc: &Lanes,
        want: &[bool; LANES],
    ) -> (Lanes, [bool; LANES]) {
        let a = &self.sink_fast[k];
        let (p, ut, en) = (a.sign, a.ut(), a.eta * a.inv_n);
        // Round 1, at V_k = 0.
        let mut vp0 = [0.0; LANES];
        for l in 0..LANES {
            vp0[l] = (p * vc[l] - a.vt0) * a.inv_n;
        }
        let r1 = DrainLaw::at(a, i, &vp0);
        let mut ok = r1.ok;
        let mut v1 = [0.0; LANES];
        for l in 0..LANES {
            // G(0): the drain voltage the closed form gives at the pinch-off of V_k = 0.
            let g = p * (vp0[l] - 2.0 * ut * r1.hr[l]);
            ok[l] &= g.is_finite() && g > 0.0 && g < 0.999 * self.supply;
            v1[l] = if ok[l] { g } else { 0.0 };
        }
        // Round 2, at V_k = G(0): the pinch-off moves by (eta/n) V_k, a small step, so each
        // quantity is round 1's times a short series (exp to t^4, ln(1 + u) to u^5, remainders
        // under 3e-9 for |t|, |u| < 0.05); a lane beyond that reach takes the kernels.
        let mut r2 = r1;
        let mut vp = [0.0; LANES];
        let mut far = [false; LANES];
        for l in 0..LANES {
            vp[l] = vp0[l] + en * p * v1[l];
            r2.hf[l] = 0.5 * vp[l] * a.inv_ut;
            let t = r1.hf[l].abs() - r2.hf[l].abs();
            r2.e[l] = r1.e[l] * (1.0 + exp_m1_series(t));
            r2.lp[l] = r1.lp[l] + ln_1p_series((r2.e[l] - r1.e[l]) / (1.0 + r1.e[l]));
            r2.sf[l] = r2.hf[l].max(0.0) + r2.lp[l];
            far[l] = !within_series_reach(t);
        }
        if far.iter().any(|&f| f) {
            let (_, e, lp) = DrainLaw::source_side(a, &vp);
            for l in 0..LANES {
                if far[l] {
                    (r2.e[l], r2.lp[l]) = (e[l], lp[l]);
                    r2.sf[l] = r2.hf[l].max(0.0) + lp[l];
                }
            }
        }
        for l in 0..LANES {
            let d = r2.sf[l] * r2.sf[l] - i[l] / a.is;
            ok[l] &= d > 0.0 && d.is_finite();
            r2.sr[l] = if ok[l] { d.sqrt() } else { 1.0 };
            let dl = r2.sr[l] - r1.sr[l];
            r2.em[l] = r1.em[l] + (1.0 + r1.em[l]) * exp_m1_series(dl);
            let w = (r2.em[l] - r1.em[l]) / r1.em[l];
            r2.hr[l] = r1.hr[l] + ln_1p_series(w);
            far[l] = !(within_series_reach(dl) && within_series_reach(w));
        }
        if far.iter().any(|&f| f) {
            let em = maths::exp_m1_start(&r2.sr);
            let hr = maths::ln_start(&em);
            for l in 0..LANES {
                if far[l] {
                    (r2.em[l], r2.hr[l]) = (em[l], hr[l]);
                }
            }
        }
        let v2 = r2.newton(a, &vp, &v1);
        let mut out = [f64::NAN; LANES];
        for l in 0..LANES {
            out[l] = if !ok[l] {
                f64::NAN
            } else if v2[l].is_finite() && v2[l] > 0.0 && v2[l] < 0.999 * self.supply {
                v2[l]
            } else {
                v1[l]
            };
        }
        // Lanes for the saturation-side solve ([`SaturatedCells`]): a sink that cannot carry
        // I_k at V_k = 0 (it saturates), or whose drain lands above 4 U_T, where the drain
        // coupling's Newton step above is least accurate.
        let mut far_side = [false; LANES];
        for l in 0..LANES {
            far_side[l] = want[l]
                && i[l] > 0.0
                && en > 0.0
                && en < 1.0
                && (out[l].is_nan() || p * out[l] > 4.0 * ut);
        }
        (out, far_side)
    }

    /// The start of the queued cells (each slot its own line's sink, starting-point kernels),
    /// for sinks near or past saturation. At V_k = 0 the sink's saturation current is at or
    /// just below I_k, so the drain coupling lifts the pinch-off to the saturation law's
    /// `x_s = F^-1(I_k/I_S)` at `y_sat = (x_s - v_p0/U_T)/(eta/n)` (V_k/U_T; negative when the
    /// sink carries I_k below saturation), and the reverse part puts the drain `t U_T` above it.
    /// With the forward excess `F(x_s + (eta/n) t) - i ~ i kappa (eta/n) t` (`kappa = F'/F` at
    /// x_s `= (1 - e^(-q))/q`, `q = sqrt(i)`, `i = I_k/I_S`) and the reverse end in weak
    /// inversion, `F(x_r) ~ e^(x_r)` (`x_r = x_s - y_sat - (1 - eta/n) t`), `u = (1 - eta/n) t`
    /// solves `u e^u = z`, `ln z = ln((1 - eta/n)/(eta/n)) + x_s/2 + q - ln q - y_sat` (from
    /// `ln(1 - e^(-q)) = x_s/2 - q`): u = W(z), Lambert's function ([`maths::lambert_w_start`],
    /// Newton steps on `ln u + u = ln z`). A third step takes in the second-order terms at that
    /// u (the reverse end `ln F(x_r) = x_r - e^(x_r/2) + (5/12) e^(x_r)`, the forward excess's
    /// `+ d F''/(2 F')`, `d = (eta/n) t`, `F''/F' = (l + q (1 - l))/(2q)`, `l = 1 - e^(-q) =
    /// e^(x_s/2 - q)`), and a last Newton step on the exact law `ln(I_A/I_k)` in V_k polishes
    /// it. NaN in a slot where a step is not finite.
    #[inline(always)]
    fn saturated_start(&self, q: &SaturatedCells) -> Lanes {
        let a = MosLanes::gather(&self.sink_fast, &q.cell);
        let p = a.sign;
        let mut en = [0.0; LANES];
        let mut odds = [0.0; LANES];
        let mut sq = [0.0; LANES];
        for l in 0..LANES {
            en[l] = a.eta[l] * a.inv_n[l];
            odds[l] = (1.0 - en[l]) / en[l];
            sq[l] = (q.input[l] / a.is[l]).sqrt();
        }
        let ln_odds = maths::ln_start(&odds);
        let ln_q = maths::ln_start(&sq);
        let mut y_sat = [0.0; LANES];
        let mut ln_z = [0.0; LANES];
        for l in 0..LANES {
            let vp0 = (p * q.vc[l] - a.vt0[l]) * a.inv_n[l];
            y_sat[l] = (q.f_inv[l] - vp0 * a.inv_ut[l]) / en[l];
            ln_z[l] = ln_odds[l] + 0.5 * q.f_inv[l] + sq[l] - ln_q[l] - y_sat[l];
        }
        let (mut tau, mut u) = maths::lambert_w_start(&ln_z);
        let mut hr = [0.0; LANES];
        let mut lq = [0.0; LANES];
        for l in 0..LANES {
            hr[l] = 0.5 * (q.f_inv[l] - y_sat[l] - u[l]);
            lq[l] = 0.5 * q.f_inv[l] - sq[l];
        }
        let er = maths::exp_start(&hr);
        let lf = maths::exp_start(&lq);
        for l in 0..LANES {
            let d = en[l] * u[l] / (1.0 - en[l]);
            let curv = (lf[l] + sq[l] * (1.0 - lf[l])) / (2.0 * sq[l]);
            let eps = er[l] - (5.0 / 12.0) * er[l] * er[l] + 0.5 * curv * d;
            tau[l] -= (tau[l] + u[l] - (ln_z[l] - eps)) / (1.0 + u[l]);
        }
        u = maths::exp_start(&tau);
        let mut v = [0.0; LANES];
        for l in 0..LANES {
            v[l] = p * (y_sat[l] + u[l] / (1.0 - en[l])) / a.inv_ut[l];
        }
        let e = a.eval_start(&q.vc, &v, &[0.0; LANES]);
        let mut ratio = [1.0; LANES];
        for l in 0..LANES {
            if e.id[l] > 0.0 {
                ratio[l] = e.id[l] / q.input[l];
            }
        }
        let lr = maths::ln_start(&ratio);
        let mut out = [f64::NAN; LANES];
        for l in 0..LANES {
            if e.id[l] > 0.0 && e.d_vd[l] != 0.0 {
                out[l] = v[l] - lr[l] * e.id[l] / e.d_vd[l];
            }
        }
        out
    }

    /// [`WtaCircuit::cell_guess`] on every lane (same start, same steps, vectorised kernels).
    #[inline(always)]
    fn cell_guess_lanes(&self, k: usize, i: &Lanes, vc: &Lanes) -> Lanes {
        let a = &self.sink_fast[k];
        let ut = a.ut();
        let alpha = a.eta.max(1e-4) * a.inv_n * a.inv_ut;
        let mut h = [0.0; LANES];
        for l in 0..LANES {
            h[l] = -(0.5 * (vc[l] - a.vt0) * a.inv_n * a.inv_ut).abs();
        }
        let eh = maths::exp_start(&h);
        let lp = maths::ln_1p_start(&eh);
        let mut r = [0.0; LANES];
        let mut mr = [0.0; LANES];
        for l in 0..LANES {
            let hh = 0.5 * (vc[l] - a.vt0) * a.inv_n * a.inv_ut;
            let sp = hh.max(0.0) + lp[l];
            r[l] = i[l] / (a.is * sp * sp);
            mr[l] = -r[l];
        }
        let ln_r = maths::ln_start(&r);
        let l1 = maths::ln_1p_start(&mr);
        let mut v = [0.0; LANES];
        let mut live = [true; LANES];
        for l in 0..LANES {
            let v0 = if r[l] < 0.5 {
                -ut * l1[l]
            } else {
                ut + ln_r[l].max(0.0) / alpha
            };
            live[l] = v0.is_finite() && v0 > 0.0 && i[l] > 0.0;
            v[l] = if live[l] {
                v0.min(self.supply)
            } else {
                0.5 * self.supply
            };
        }
        for _ in 0..4 {
            let mut y = [0.0; LANES];
            for l in 0..LANES {
                y[l] = v[l] * a.inv_ut;
            }
            let e = maths::exp_m1_start(&y);
            let le = maths::ln_start(&e);
            let mut dy = [0.0; LANES];
            for l in 0..LANES {
                let g = alpha * v[l] + le[l] - v[l] * a.inv_ut - ln_r[l];
                let dg = v[l] * (alpha + a.inv_ut / e[l]);
                let d = (-g / dg).clamp(-5.0, 2.0);
                dy[l] = if live[l] { d } else { 0.0 };
            }
            let g = maths::exp_start(&dy);
            let mut any = false;
            for l in 0..LANES {
                if live[l] {
                    v[l] = (v[l] * g[l]).min(self.supply);
                    // As the scalar guess: a lane stops once its step is below 1e-2.
                    live[l] = dy[l].abs() >= 1e-2;
                    any |= live[l];
                }
            }
            if !any {
                break;
            }
        }
        for l in 0..LANES {
            v[l] = if i[l] <= 0.0 {
                0.0
            } else if v[l].is_finite() && v[l] > 0.0 {
                v[l].min(0.999 * self.supply)
            } else {
                0.5 * self.supply
            };
        }
        v
    }
}

impl SharedNodeCircuit for WtaCircuit {
    fn name(&self) -> &'static str {
        STAGE
    }

    fn common_node_name(&self) -> &'static str {
        "V_C"
    }

    fn line_node_prefix(&self) -> &'static str {
        "V_"
    }

    #[inline]
    fn lines(&self) -> usize {
        self.n
    }

    #[inline]
    fn supply(&self) -> f64 {
        self.supply
    }

    #[inline]
    fn common_min(&self) -> f64 {
        self.vc_min
    }

    #[inline]
    fn tolerance(&self) -> f64 {
        self.tolerance
    }

    #[inline]
    fn strategy(&self) -> DcStrategy {
        DcStrategy::Coupled {
            max_newton: self.max_newton,
        }
    }

    fn messages(&self) -> &'static CircuitMessages {
        &MESSAGES
    }

    fn temperature(&self) -> f64 {
        self.temperature
    }

    fn source(&self) -> &CurrentSource<Ekv> {
        &self.bias
    }

    #[inline]
    fn source_fast(&self) -> &CurrentSource<Mos> {
        &self.bias_fast
    }

    /// Sink A_k: gate V_C, drain V_k, source ground.
    #[inline]
    fn load(&self, k: usize, v_line: f64, v_common: f64) -> Branch {
        let e = self.sink_fast[k].eval(v_common, v_line, 0.0);
        Branch {
            current: e.id,
            d_line: e.d_vd,
            d_common: e.d_vg,
        }
    }

    #[inline]
    fn load_current(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        self.sink_fast[k].id(v_common, v_line, 0.0)
    }

    /// Output B_k: gate V_k, drain at the output voltage, source V_C.
    #[inline]
    fn output(&self, k: usize, v_line: f64, v_common: f64) -> Branch {
        let e = self.output_fast[k].eval(v_line, self.output_voltage, v_common);
        Branch {
            current: e.id,
            d_line: e.d_vg,
            d_common: e.d_vs,
        }
    }

    #[inline]
    fn output_current(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        self.output_fast[k].id(v_line, self.output_voltage, v_common)
    }

    #[inline(always)]
    fn load_lanes(&self, k: usize, v_line: &Lanes, v_common: &Lanes) -> BranchLanes {
        let e = self.sink_fast[k].eval_lanes(v_common, v_line, &[0.0; LANES]);
        BranchLanes {
            current: e.id,
            d_line: e.d_vd,
            d_common: e.d_vg,
        }
    }

    #[inline(always)]
    fn output_lanes(&self, k: usize, v_line: &Lanes, v_common: &Lanes) -> BranchLanes {
        let e = self.output_fast[k].eval_lanes(v_line, &[self.output_voltage; LANES], v_common);
        BranchLanes {
            current: e.id,
            d_line: e.d_vg,
            d_common: e.d_vs,
        }
    }

    /// [`SharedNodeCircuit::closed_form_start`] of every lane with the vectorised kernels: the
    /// same closed form and cell guesses; a line's output-law start is computed only when some
    /// lane uses it, its sink-law guess only when some lane needs it.
    #[inline(always)]
    fn closed_form_start_lanes(
        &self,
        inputs: &[Lanes],
        scratch: &mut [Lanes],
        lines: &mut [Lanes],
    ) -> Lanes {
        let n = self.n;
        let vmax = self.supply;
        let share = &mut scratch[..n];
        // `lines` holds each line's F^-1(I_k/I_S) until the line's start is written over it.
        let (mut vc, ln_ib) = self.closed_form_vc_lanes(inputs, share, lines);
        let ib = ln_ib.exp();
        // A clear winner's cell and V_C from the exact device laws (the closed form is
        // weak-inversion; a winning output transistor sits in moderate inversion).
        let winner = self.refine_winner_lanes(inputs, share, &mut vc);
        let mut queue = SaturatedCells::new();
        for k in 0..n {
            let b = &self.output_fast[k];
            let mut use_b = [false; LANES];
            let mut r = [0.0; LANES];
            for l in 0..LANES {
                use_b[l] = inputs[k][l] > 0.0 && share[k][l] > 1e-3;
                r[l] = share[k][l] * ib / b.is;
            }
            let mut need_sink = [true; LANES];
            // Lanes that start this line from its sink's law: all but its refined winner, and
            // beside no refined winner only the cells of no visible share.
            let mut want = [false; LANES];
            for l in 0..LANES {
                want[l] = winner[l].0 != k && (!use_b[l] || winner[l].0 != usize::MAX);
            }
            let (loser, far_side) = self.loser_start_lanes(k, &inputs[k], &vc, &want);
            for l in 0..LANES {
                if winner[l].0 == k {
                    use_b[l] = false;
                    lines[k][l] = winner[l].1;
                    need_sink[l] = false;
                } else if far_side[l] {
                    // Solved with the other queued cells (`lines[k][l]` is its F^-1 until then).
                    use_b[l] = false;
                    need_sink[l] = false;
                    if queue.push(k, l, inputs[k][l], vc[l], lines[k][l], loser[l]) {
                        queue.flush(self, lines);
                    }
                } else if loser[l].is_finite() && (!use_b[l] || winner[l].0 != usize::MAX) {
                    // Beside a refined winner every other cell starts from its sink's law.
                    use_b[l] = false;
                    lines[k][l] = loser[l];
                    need_sink[l] = false;
                }
            }
            if use_b.iter().any(|&u| u) {
                let x = ekv_f_inverse_lanes(&r);
                for l in 0..LANES {
                    let from_b = b.n() * (b.ut() * x[l] + vc[l]) + b.vt0
                        - b.eta * (self.output_voltage - vc[l]);
                    if use_b[l] && from_b.is_finite() && from_b > 0.0 {
                        lines[k][l] = from_b.min(0.999 * vmax);
                        need_sink[l] = false;
                    }
                }
            }
            if need_sink.iter().any(|&u| u) {
                let g = self.cell_guess_lanes(k, &inputs[k], &vc);
                for l in 0..LANES {
                    if need_sink[l] {
                        lines[k][l] = g[l];
                    }
                }
            }
        }
        queue.flush(self, lines);
        vc
    }

    /// V_C from the weak-inversion closed form; cells expected to carry a visible share of the
    /// bias start from their output transistor's law (the closed form makes V_C and these
    /// consistent with KCL at V_C), the others from their sink's law.
    #[inline]
    fn closed_form_start(&self, inputs: &[f64], scratch: &mut [f64], lines: &mut [f64]) -> f64 {
        let n = self.n;
        let vmax = self.supply;
        let (vc, ln_ib) = self.closed_form_vc(inputs, &mut scratch[..n]);
        let ib = ln_ib.exp();
        let (v, share) = (&mut lines[..n], &scratch[..n]);
        for k in 0..n {
            let from_b = if inputs[k] > 0.0 && share[k] > 1e-3 {
                self.cell_guess_from_output(k, share[k] * ib, vc)
            } else {
                f64::NAN
            };
            v[k] = if from_b.is_finite() && from_b > 0.0 {
                from_b.min(0.999 * vmax)
            } else {
                self.cell_guess(k, inputs[k], vc)
            };
        }
        vc
    }

    fn line_start(&self, k: usize, input: f64, v_common: f64) -> f64 {
        self.cell_guess(k, input, v_common)
    }

    fn capacitances(&self) -> (f64, f64) {
        (self.input_capacitance, self.common_capacitance)
    }

    fn kappa(&self) -> f64 {
        self.sink.first().map(|d| 1.0 / d.n).unwrap_or(1.0)
    }

    #[inline]
    fn load_noise_psd(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        mos_shot_psd(&self.sink_fast[k], v_common, v_line, 0.0)
    }

    #[inline]
    fn output_noise_psd(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        mos_shot_psd(&self.output_fast[k], v_line, self.output_voltage, v_common)
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use crate::device::{mismatch::sample_mismatch, presets, Polarity};

    /// A design of the generic 180 nm process: sinks and outputs NMOS 2 µm / 2 µm, ideal bias
    /// (also the cells of the k-winners tests).
    pub(crate) fn generic_design(n: usize, bias: f64) -> WtaDesign {
        let p = presets::preset("generic-180nm").unwrap();
        let t = Transistor {
            polarity: Polarity::Nmos,
            w: 2e-6,
            l: 2e-6,
        };
        WtaDesign::new(n, p, t, t, CurrentSource::Ideal { current: bias })
    }

    /// A die of [`generic_design`], every transistor drawn from the process's Pelgrom constants.
    fn die(n: usize, bias: f64, seed: u64) -> WtaCircuit {
        let d = generic_design(n, bias);
        let tech = d.process.nmos.clone();
        let mut rng = crate::rng::stream(seed, &[7]);
        WtaChip::sample(d, |t| sample_mismatch(&mut rng, &tech, t))
            .unwrap()
            .at(300.0)
            .unwrap()
    }

    /// The vectorised start puts every line on its sink's exact law at the start's V_C (the
    /// loser start, the saturation-side start of near-tied cells, the winner's step) on rows of
    /// near-tied inputs (0.3 % to 70 % apart) at the process's high gain (eta = 0.0017): the
    /// relative line residual `|I_A(V_C, V_k)/I_k - 1|` (full-accuracy EKV, Enz, Krummenacher,
    /// Vittoz 1995) stays under 4e-5 (measured 1.8e-5, a deep-triode line) and under 1.5e-5
    /// for lines above 4 U_T (measured 5.2e-6; before the saturation-side start, a saturated
    /// runner-up started 0.4 V low). Bounds: the measured values with a margin (common
    /// practice, no source).
    #[test]
    fn start_puts_near_tied_lines_on_their_sink_law() {
        let spread = [
            0.0, -0.003, -0.01, -0.02, -0.04, -0.08, -0.15, -0.3, -0.5, -0.7,
        ];
        let mut worst = (0.0f64, 0.0, 0.0);
        let mut worst_sat = (0.0f64, 0.0, 0.0);
        for seed in 1..4 {
            let c = die(10, 100e-9, seed);
            let mut x = vec![[0.0; LANES]; 10];
            for l in 0..LANES {
                let base = 20e-9 * (1.0 + 0.3 * l as f64);
                for k in 0..10 {
                    x[k][l] = base * (1.0 + spread[(k + 3 * l) % 10]);
                }
            }
            let (mut scratch, mut lines) = (vec![[0.0; LANES]; 10], vec![[0.0; LANES]; 10]);
            let vc = c.closed_form_start_lanes(&x, &mut scratch, &mut lines);
            for l in 0..LANES {
                for k in 0..10 {
                    let i = c.sink_fast[k].id(vc[l], lines[k][l], 0.0);
                    let r = (i / x[k][l] - 1.0).abs();
                    if r > worst.0 {
                        worst = (r, lines[k][l], x[k][l]);
                    }
                    if lines[k][l] > 4.0 * c.sink_fast[k].ut() && r > worst_sat.0 {
                        worst_sat = (r, lines[k][l], x[k][l]);
                    }
                }
            }
        }
        assert!(worst.0 <= 4e-5, "largest (residual, V_k, I_k): {worst:?}");
        assert!(worst_sat.0 <= 1.5e-5, "largest above 4 U_T: {worst_sat:?}");
    }
}
