//! Transient evaluation of a competition stage (DEVELOPERS.md model notes §4.3): node
//! capacitances turn the node equations of any [`SharedNodeCircuit`] (the current-mode WTA's
//! [`WtaCircuit`](super::wta::WtaCircuit), a diode-fed differential pair, ...) into an ODE, integrated here from a reset
//! state; optional shot noise makes it an SDE. The equations below are written for the WTA
//! (load of line k = sink A_k, output = B_k, source = the bias); every circuit's own branches
//! take their place.
//!
//! ## Equations
//!
//! With `C_in` on every input node V_k and `C_C` on the common node V_C (the design's
//! `input_capacitance` and `common_capacitance`):
//!
//! ```text
//! C_in dV_k/dt = I_in,k(V_k) - I_A,k(V_C, V_k)
//! C_C  dV_C/dt = Σ_k I_B,k(V_k, V_out, V_C) - I_bias(V_C)
//! ```
//!
//! The transistor currents are the EKV currents of the circuit's devices (C. Enz,
//! F. Krummenacher, E. Vittoz, 1995), the same ones the DC solve uses, so the steady state of
//! the ODE is the DC operating point (tested). Two compliance factors of ours keep the reset
//! transient physical (a DC solve never needs them): an input source delivers
//! `I_in,k = I_k (1 - e^{-(V_dd - V_k)/U_T})` (it cannot push its node above the supply), and an
//! *ideal* bias sinks `I_b (1 - e^{-V_C/U_T})` (it cannot pull V_C below ground); both are the
//! weak-inversion drain characteristic of a current-source transistor. At a DC operating point
//! they change the currents by the relative amounts e^{-(V_dd - V_k)/U_T} and e^{-V_C/U_T}
//! (1e-5 at V_C = 0.3 V): with an ideal bias the steady state is the DC point of a bias current
//! smaller by that factor. With a transistor bias (EKV in both solves) the two agree exactly.
//!
//! ## Integrator
//!
//! Backward Euler (L-stable, so the stiff common node is safe) with a damped Newton solve per
//! step on the arrowhead Jacobian (each V_k couples only to V_C): O(N) per Newton iteration,
//! no allocation. Step size control on the local error estimate of backward Euler,
//! `LTE ≈ (h/(h + h_prev)) |x_{n+1} - x_pred|` with the linear predictor from the last two
//! points (E. Hairer, G. Wanner, "Solving Ordinary Differential Equations II", Springer 1996,
//! §IV.8 for error estimation by comparison with an explicit predictor; the constant is from the
//! Taylor series of BE's local error `h^2 x''/2`): a step is accepted when
//! `max_k LTE_k / (atol + rtol |x_k|) <= 1`, and the next step is scaled by
//! `0.9 / sqrt(err)` (first-order method), limited to [0.2, 4]. A Newton failure halves the
//! step; a step below `min_step` is an error value saying where the run stopped.
//!
//! ## Initial state and end
//!
//! [`InitialState::Ground`] (default): every node at 0 V (a reset state), the inputs and the
//! bias switched on at t = 0. [`InitialState::CommonMode`]: the DC state of the circuit fed the
//! mean input on every line (the circuit sat equalised), then the actual inputs from t = 0.
//! [`InitialState::Dc`]: the DC state of the actual inputs (nothing moves; for checks).
//! Without a read-out time a noiseless run ends when the circuit has settled (every node's
//! relative KCL residual `|C dV/dt| / current scale` below `settle_tolerance`) or at `t_max`; a
//! noisy run (which never settles) ends by the *hold rule*: once the decision rule's decision
//! has been non-ambiguous with the same winner for `hold_time` (default
//! [`DEFAULT_HOLD_SCALES`] = 10 time scales), or at `t_max`. With a read-out time every run
//! ends exactly there.
//!
//! ## Outputs
//!
//! - **Decision time**: the first time after which the decision rule's decision is
//!   non-ambiguous with the same winner until the end of the run (winner share at or above
//!   `min_winner_share` and runner-up at or below `max_runner_up_share`, DEVELOPERS.md model notes §4.4),
//!   linearly interpolated inside the step where it last became so. `None` if the run ends
//!   without such a decision.
//! - **Energy per decision**: `V_dd ∫_0^{t_dec} (Σ_k I_in,k + Σ_k I_B,k) dt`, the current drawn
//!   from the supply by the input sources and by the output transistors (whose drain current
//!   is the bias branch's current: Σ I_B = I_bias in steady state), trapezoidal rule over the
//!   accepted steps. Currents drawn by the read-out or by bias generation are not included.
//! - **Time-limited decision**: the rule's decision at the read-out time.
//! - The decision time scales like `C U_T / (kappa I)` (DEVELOPERS.md model notes §4.3): [`TransientSummary`]
//!   gives that scale (`C_in`, the sink's kappa, the mean input) so callers can report the
//!   ratio.
//!
//! ## Noise (SDE)
//!
//! With [`NoiseOptions`], each step adds to the charge of each node a Gaussian increment
//! `sqrt(S h / 2) z` per white noise source of one-sided PSD S (a one-sided PSD S is a
//! two-sided intensity S/2; its integral over h has variance S h / 2), evaluated at the start
//! of the step: Euler–Maruyama for the noise on the implicit (backward Euler) drift
//! (P. Kloeden, E. Platen, "Numerical Solution of Stochastic Differential Equations",
//! Springer 1992, drift-implicit Euler scheme). Sources: the channel shot noise
//! `2 q (I_f + I_r)` of every sink, output and bias transistor ([`shot_noise_psd`]; R.
//! Sarpeshkar, T. Delbrück, C. Mead, IEEE Circuits & Devices 9(6), 1993), `2 q I_b` for an
//! ideal bias, and optionally `2 q I_k` on each input (the input current's own shot noise).
//!
//! Step control of noisy runs (unless `NoiseOptions::step` fixes the step, as reference runs
//! do): the step is chosen from the *drift* only, as in the adaptive Euler–Maruyama scheme of
//! H. Lamba, J. C. Mattingly, A. M. Stuart, "An adaptive Euler–Maruyama scheme for SDEs:
//! convergence and stability", IMA J. Numer. Anal. 27 (2007) 479–506: the drift rate of each
//! node over a step is its increment with the noise charge removed, `(Δx - q/C)/h`, and the
//! backward-Euler error estimate above is formed from two consecutive drift rates. A noisy step
//! is never rejected on that estimate (rejecting on the drawn increment would bias the path;
//! only a Newton failure halves the step); the estimate sets the *next* step, a function of the
//! path so far. Its tolerance adds the step's own noise spread `sqrt(Σ S h / 2) / C` per node
//! to `atol + rtol |x|` (a drift error below the step's noise increment is below the
//! Euler–Maruyama scheme's own strong error, order 1/2; a choice of ours). The step is capped at
//! `NoiseOptions::max_step_scales` time scales (default [`DEFAULT_NOISE_MAX_STEP_SCALES`] = 4),
//! which ties it to the nodes' noise bandwidth kappa I / (4 C U_T). The decision-time
//! distribution then matches runs with a fixed step of 1/50 time scale (two-sample
//! Kolmogorov–Smirnov at 1 %, tested). Flicker noise
//! is not integrated (a 1/f source needs a bank of filtered processes; not built yet).
//!
//! Numerical core: no I/O, no printing.

// Index loops run over parallel per-cell arrays.
#![allow(clippy::needless_range_loop)]

use rand::{Rng, RngCore};
use rand_distr::StandardNormal;
use thiserror::Error;

use super::circuit::SharedNodeCircuit;
use super::mos::Mos;
use super::source::CurrentSource;
use super::{
    dc, fill_shares, validate_inputs, CompetitionError, Decision, DecisionRule, InputSummary,
    StageSolution, Workspace,
};
use crate::physics::{thermal_voltage, ELEMENTARY_CHARGE};

const STAGE: &str = "current-mode WTA transient";

/// Where the transient starts (module docs).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum InitialState {
    /// Every node at 0 V; inputs and bias switched on at t = 0.
    #[default]
    Ground,
    /// The DC state for the mean input on every line; the actual inputs from t = 0.
    CommonMode,
    /// The DC state of the actual inputs.
    Dc,
}

/// Options of one transient run (every time in seconds, voltage in volts).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TransientOptions {
    /// Starting state.
    pub initial: InitialState,
    /// Decision rule for the decision time and the read-out decision.
    pub rule: DecisionRule,
    /// Read the decision at this time and end the run there; `None`: run until settled.
    pub read_time: Option<f64>,
    /// Hard end of the run; `None`: 1e4 time scales (C_in U_T / (kappa I_mean)).
    pub t_max: Option<f64>,
    /// Absolute local error tolerance per step, V.
    pub atol: f64,
    /// Relative local error tolerance per step.
    pub rtol: f64,
    /// Settled when every node's relative KCL residual is below this.
    pub settle_tolerance: f64,
    /// First step as a fraction of the time scale.
    pub first_step: f64,
    /// Smallest step as a fraction of the time scale; a step below it is an error.
    pub min_step: f64,
    /// Newton iterations per step before the step is halved.
    pub max_newton: usize,
    /// Newton converges when every update is below this, V.
    pub newton_vtol: f64,
    /// Record the waveform at every accepted step (allocates; for plots and the CLI).
    pub record_waveform: bool,
    /// Noisy runs without a read-out time end once the rule's decision has held, with the same
    /// winner, for this long, s; `None`: [`DEFAULT_HOLD_SCALES`] time scales
    /// (C_in U_T / (kappa I_mean)). Not used by noiseless runs (they end when settled).
    pub hold_time: Option<f64>,
}

/// Default hold time of a noisy decision, in time scales C_in U_T / (kappa I_mean): ten node
/// time constants, over which a node's noise has decorrelated (its autocorrelation falls as
/// e^{-t/tau}, to 5e-5 after ten), so a decision that holds that long is not a single noise
/// excursion across the threshold. A choice of ours (common practice, no source).
pub const DEFAULT_HOLD_SCALES: f64 = 10.0;

/// Default largest step of a noisy run, in time scales C_in U_T / (kappa I_mean) (module docs,
/// "Noise (SDE)"); chosen by measurement so the decision-time distribution matches a run with
/// steps of 1/50 time scale (tested in `tests/competition_transient.rs`; a choice of ours).
pub const DEFAULT_NOISE_MAX_STEP_SCALES: f64 = 4.0;

impl Default for TransientOptions {
    /// atol 0.1 mV and rtol 1e-4 (an output current moves by about 1 % per 0.1 mV/(n U_T) of
    /// its gate; decision times within 1 % of a 100x tighter run in the tests), settled at a relative KCL residual of 1e-7, first step 1e-3 and smallest step
    /// 1e-12 time scales, 12 Newton iterations of 1 nV: choices of ours.
    fn default() -> Self {
        TransientOptions {
            initial: InitialState::Ground,
            rule: DecisionRule::default(),
            read_time: None,
            t_max: None,
            atol: 1e-4,
            rtol: 1e-4,
            settle_tolerance: 1e-7,
            first_step: 1e-3,
            min_step: 1e-12,
            max_newton: 12,
            newton_vtol: 1e-9,
            record_waveform: false,
            hold_time: None,
        }
    }
}

/// Noise integrated as an SDE (module docs).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct NoiseOptions {
    /// Shot noise `2 q I_k` of each input current.
    pub input_shot: bool,
    /// Channel shot noise of every transistor (and `2 q I_b` of an ideal bias).
    pub device_shot: bool,
    /// Fixed step, s (for reference runs); `None`: the step control of the module docs.
    pub step: Option<f64>,
    /// Largest step of the step control, in time scales C_in U_T / (kappa I_mean).
    pub max_step_scales: f64,
}

impl Default for NoiseOptions {
    fn default() -> Self {
        NoiseOptions {
            input_shot: true,
            device_shot: true,
            step: None,
            max_step_scales: DEFAULT_NOISE_MAX_STEP_SCALES,
        }
    }
}

/// Errors of a transient run.
#[derive(Clone, Debug, PartialEq, Error)]
pub enum TransientError {
    /// The circuit or its inputs are invalid, or the DC solve for the initial state failed.
    #[error(transparent)]
    Stage(#[from] CompetitionError),
    /// An option is out of range.
    #[error("{STAGE}: option `{option}` = {value:e} is invalid: {reason}")]
    InvalidOption {
        option: &'static str,
        value: f64,
        reason: &'static str,
    },
    /// A step could not be completed even at the smallest step size.
    #[error("{STAGE}: the step at t = {time:.4e} s did not converge (step {step:.3e} s below the smallest allowed {min_step:.3e} s after {steps} accepted steps; largest Newton update {update:.3e} V) for {inputs}; loosen `atol`/`rtol`, lower `min_step`, or check the operating point with a DC solve")]
    StepFailed {
        time: f64,
        step: f64,
        min_step: f64,
        steps: usize,
        update: f64,
        inputs: InputSummary,
    },
}

/// Scalar results of one run (the node state at the end is in [`TransientWorkspace::solution`],
/// the waveform, when recorded, in [`TransientWorkspace::waveform`]).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TransientSummary {
    /// Time to decision, s (module docs); `None` if no decision held to the end of the run.
    pub decision_time: Option<f64>,
    /// The decision that held from `decision_time` to the end.
    pub decision: Option<Decision>,
    /// Energy per decision `V_dd ∫_0^{t_dec} I_supply dt`, J; `None` without a decision.
    pub energy_to_decision: Option<f64>,
    /// Energy drawn from the supply over the whole run, J.
    pub energy: f64,
    /// Decision read at the read-out time (when one was given).
    pub decision_at_read: Option<Decision>,
    /// Time at which the run ended, s.
    pub end_time: f64,
    /// The run ended because the circuit settled (not at `t_max` or the read-out time).
    pub settled: bool,
    /// A noisy run ended because its decision held for the hold time.
    pub held: bool,
    /// Largest relative KCL residual at the end (0 = exactly at a DC point).
    pub final_residual: f64,
    /// Time scale `C_in U_T / (kappa I_mean)`, s (DEVELOPERS.md model notes §4.3).
    pub time_scale: f64,
    /// Accepted steps.
    pub steps: usize,
    /// Rejected steps (error too large or Newton failure).
    pub rejected_steps: usize,
    /// Newton iterations over all steps.
    pub newton_iterations: usize,
}

impl TransientSummary {
    /// Decision time over the time scale (`t_dec / (C U_T / (kappa I))`).
    pub fn decision_time_in_scales(&self) -> Option<f64> {
        self.decision_time.map(|t| t / self.time_scale)
    }
}

/// One recorded point of the waveform.
#[derive(Clone, Debug, PartialEq)]
pub struct WaveformPoint {
    /// Time, s.
    pub time: f64,
    /// Node voltages `[V_0..V_{N-1}, V_C]`, V.
    pub voltages: Vec<f64>,
    /// Output currents, A.
    pub outputs: Vec<f64>,
}

/// Scratch space and results of [`simulate`], reused across runs (grows, never shrinks).
#[derive(Clone, Debug, Default)]
pub struct TransientWorkspace {
    /// Node voltages at the current time, V.
    x: Vec<f64>,
    /// Node voltages at the previous accepted step, V.
    x_prev: Vec<f64>,
    /// Node voltages of the step being solved, V.
    x_new: Vec<f64>,
    /// Noise charge of each node for the step, C.
    noise_q: Vec<f64>,
    /// Standard deviation of each node's noise charge for the step, C.
    noise_sd: Vec<f64>,
    /// Newton: diagonal entry of each line row (then its update).
    diag: Vec<f64>,
    /// Newton: common-node column entry of each line row.
    line_to_common: Vec<f64>,
    /// Newton: common-node row entry of each line column.
    common_to_line: Vec<f64>,
    /// Newton: residual of each line row.
    residual: Vec<f64>,
    /// Noisy runs: drift rate (V/s, noise charge removed) of each node over the last step.
    rate_prev: Vec<f64>,
    mean_inputs: Vec<f64>,
    dc_ws: Workspace,
    solution: StageSolution,
    waveform: Vec<WaveformPoint>,
}

impl TransientWorkspace {
    /// An empty workspace.
    pub fn new() -> TransientWorkspace {
        TransientWorkspace::default()
    }

    /// The state at the end of the last run: node voltages, output currents, shares.
    pub fn solution(&self) -> &StageSolution {
        &self.solution
    }

    /// The waveform of the last run (empty unless `record_waveform` was set).
    pub fn waveform(&self) -> &[WaveformPoint] {
        &self.waveform
    }

    fn prepare(&mut self, n: usize) {
        for v in [
            &mut self.x,
            &mut self.x_prev,
            &mut self.x_new,
            &mut self.noise_q,
            &mut self.noise_sd,
            &mut self.diag,
            &mut self.common_to_line,
            &mut self.line_to_common,
            &mut self.residual,
            &mut self.rate_prev,
        ] {
            v.clear();
            v.resize(n + 1, 0.0);
        }
        self.mean_inputs.clear();
        self.mean_inputs.resize(n, 0.0);
        self.solution.resize(n, n + 1);
        self.waveform.clear();
    }
}

/// The constant parts of one run.
struct Model<'a, C: SharedNodeCircuit + ?Sized> {
    n: usize,
    circuit: &'a C,
    inputs: &'a [f64],
    bias: CurrentSource<Mos>,
    vdd: f64,
    ut: f64,
    c_in: f64,
    c_c: f64,
}

impl<C: SharedNodeCircuit + ?Sized> Model<'_, C> {
    /// Input source current with its supply compliance, and its derivative in V_k.
    #[inline]
    fn input(&self, k: usize, vk: f64) -> (f64, f64) {
        let i = self.inputs[k];
        if self.circuit.input_compliance_in_load() {
            // The circuit's load already carries the source's compliance (DC and transient
            // share it; applying it here too would count it twice).
            return (i, 0.0);
        }
        let e = (-(self.vdd - vk) / self.ut).exp();
        (i * (1.0 - e), -i * e / self.ut)
    }

    /// Bias current (ideal with ground compliance, or the EKV transistor) and d/dV_C.
    #[inline]
    fn bias(&self, vc: f64) -> (f64, f64) {
        match self.bias {
            CurrentSource::Ideal { current: i } => {
                let e = (-vc / self.ut).exp();
                (i * (1.0 - e), i * e / self.ut)
            }
            CurrentSource::Transistor { .. } => self.bias.eval(vc),
        }
    }

    /// Output currents into `out`; returns (Σ I_in, Σ I_B) for the supply current.
    fn outputs(&self, x: &[f64], out: &mut [f64]) -> (f64, f64) {
        let vc = x[self.n];
        let mut s_in = 0.0;
        let mut s_b = 0.0;
        for k in 0..self.n {
            let ib = self.circuit.output_current(k, x[k], vc);
            out[k] = ib;
            s_b += ib;
            s_in += self.input(k, x[k]).0;
        }
        (s_in, s_b)
    }

    /// Largest relative KCL residual |C dV/dt| / (current scale of the node).
    fn residual(&self, x: &[f64]) -> f64 {
        let vc = x[self.n];
        let mut m: f64 = 0.0;
        let mut s = 0.0;
        for k in 0..self.n {
            let (iin, _) = self.input(k, x[k]);
            let ia = self.circuit.load_current(k, x[k], vc);
            let scale = iin.abs().max(self.circuit.load_scale(k, x[k], vc));
            if scale > 0.0 {
                m = m.max((iin - ia).abs() / scale);
            }
            s += self.circuit.output_current(k, x[k], vc);
        }
        let (ib, _) = self.bias(vc);
        let scale = s.abs().max(ib.abs());
        if scale > 0.0 {
            m = m.max((s - ib).abs() / scale);
        }
        m
    }
}

/// Run one transient of `circuit` fed `inputs` (amperes, one per cell). See the module docs for
/// the equations, the initial state, the outputs and the noise. Without a waveform request the
/// run does not allocate once `ws` has grown to the circuit's size. `noise` (options and the
/// caller's generator, e.g. a per-(chip, sample) stream of `rng::stream`) makes it an SDE.
pub fn simulate<C: SharedNodeCircuit + ?Sized>(
    circuit: &C,
    inputs: &[f64],
    opts: &TransientOptions,
    noise: Option<(&NoiseOptions, &mut dyn RngCore)>,
    ws: &mut TransientWorkspace,
) -> Result<TransientSummary, TransientError> {
    run(circuit, inputs, None, opts, noise, ws)
}

/// [`simulate`] from a given state: node voltages `[V_0..V_{N-1}, V_C]` at t = 0 (e.g. the
/// state a circuit with hysteresis kept from its previous decision); `opts.initial` is not used.
pub fn simulate_from<C: SharedNodeCircuit + ?Sized>(
    circuit: &C,
    inputs: &[f64],
    start: &[f64],
    opts: &TransientOptions,
    noise: Option<(&NoiseOptions, &mut dyn RngCore)>,
    ws: &mut TransientWorkspace,
) -> Result<TransientSummary, TransientError> {
    if start.len() != circuit.lines() + 1 || start.iter().any(|v| !v.is_finite()) {
        return Err(CompetitionError::WrongLength {
            stage: STAGE,
            what: "the starting state (finite node voltages)",
            expected: circuit.lines() + 1,
            got: start.len(),
        }
        .into());
    }
    run(circuit, inputs, Some(start), opts, noise, ws)
}

fn run<C: SharedNodeCircuit + ?Sized>(
    circuit: &C,
    inputs: &[f64],
    start: Option<&[f64]>,
    opts: &TransientOptions,
    mut noise: Option<(&NoiseOptions, &mut dyn RngCore)>,
    ws: &mut TransientWorkspace,
) -> Result<TransientSummary, TransientError> {
    let n = circuit.lines();
    validate_inputs(STAGE, n, inputs, "A", true)?;
    check_options(opts, noise.as_ref().map(|(o, _)| *o))?;
    if circuit.lines_driven() {
        return Err(CompetitionError::InvalidParameter {
            stage: STAGE,
            parameter: "input",
            value: f64::NAN,
            reason: "a transient needs current inputs into the line nodes (driven lines have no \
                     node equation)",
        }
        .into());
    }
    let (c_line, c_common) = circuit.capacitances();
    for (p, v) in [
        ("input_capacitance", c_line),
        ("common_capacitance", c_common),
    ] {
        if !(v.is_finite() && v > 0.0) {
            return Err(CompetitionError::InvalidParameter {
                stage: STAGE,
                parameter: p,
                value: v,
                reason: "a transient needs a capacitance > 0 on every node",
            }
            .into());
        }
    }
    let ut = thermal_voltage(circuit.temperature());
    let mean = inputs.iter().sum::<f64>() / n as f64;
    let kappa = circuit.kappa();
    let i_scale = if mean > 0.0 {
        mean
    } else {
        circuit.source().current_at(circuit.supply())
    };
    let time_scale = c_line * ut / (kappa * i_scale);
    if !(time_scale.is_finite() && time_scale > 0.0) {
        return Err(CompetitionError::InvalidParameter {
            stage: STAGE,
            parameter: "inputs",
            value: mean,
            reason: "the inputs and the bias are all zero: nothing sets a time scale",
        }
        .into());
    }

    ws.prepare(n);
    let bias = *circuit.source_fast();

    // Initial state.
    match opts.initial {
        _ if start.is_some() => {
            if let Some(s) = start {
                ws.x.copy_from_slice(s);
            }
        }
        InitialState::Ground => {}
        InitialState::CommonMode | InitialState::Dc => {
            let TransientWorkspace {
                mean_inputs,
                dc_ws,
                solution,
                x,
                ..
            } = ws;
            let src: &[f64] = if opts.initial == InitialState::Dc {
                inputs
            } else {
                mean_inputs.iter_mut().for_each(|m| *m = mean);
                mean_inputs
            };
            dc::solve(circuit, src, dc_ws, solution)?;
            x.copy_from_slice(&solution.node_voltages);
        }
    }

    let TransientWorkspace {
        x,
        x_prev,
        x_new,
        noise_q,
        noise_sd,
        diag,
        line_to_common,
        common_to_line,
        residual,
        rate_prev,
        solution,
        waveform,
        ..
    } = ws;
    let model = Model {
        n,
        circuit,
        inputs,
        bias,
        vdd: circuit.supply(),
        ut,
        c_in: c_line,
        c_c: c_common,
    };
    let rule = opts.rule;
    let t_end = match opts.read_time {
        Some(t) => t,
        None => opts.t_max.unwrap_or(1e4 * time_scale),
    };
    let min_step = opts.min_step * time_scale;
    // Noisy runs: a fixed step when asked, else the drift-controlled step capped at
    // `max_step_scales` time scales (module docs).
    let noise_fixed = noise.as_ref().and_then(|(o, _)| o.step);
    let noise_cap = noise.as_ref().map(|(o, _)| o.max_step_scales * time_scale);
    let end_on_hold = noise.is_some() && opts.read_time.is_none();
    let hold = opts.hold_time.unwrap_or(DEFAULT_HOLD_SCALES * time_scale);
    let cap = |h: f64| match (noise_fixed, noise_cap) {
        (Some(s), _) => s,
        (None, Some(c)) => h.min(c),
        _ => h,
    };

    let mut t = 0.0;
    let mut h = cap(opts.first_step * time_scale);
    let mut held = false; // a noisy run's decision held for `hold`
    let mut h_prev = 0.0;
    let mut steps = 0usize;
    let mut rejected = 0usize;
    let mut newton_total = 0usize;
    let mut settled = false;

    // Supply current and decision bookkeeping at the current point.
    let (mut s_in, mut s_b) = model.outputs(x, &mut solution.outputs);
    fill_shares(&solution.outputs, &mut solution.shares);
    let mut energy = 0.0;
    let mut cur = circuit.decide(&rule, &solution.shares);
    let mut margin = decision_margin(&rule, &cur);
    // Start of the current run of a held decision, and the energy up to it.
    let mut held_since: Option<(f64, f64, Decision)> = (!cur.ambiguous).then_some((0.0, 0.0, cur));
    if opts.record_waveform {
        waveform.push(WaveformPoint {
            time: 0.0,
            voltages: x.to_vec(),
            outputs: solution.outputs.clone(),
        });
    }
    if opts.read_time.is_none() && model.residual(x) <= opts.settle_tolerance {
        settled = true;
    }

    while !settled && !held && t < t_end {
        let mut last = false;
        if t + h >= t_end * (1.0 - 1e-12) {
            h = t_end - t;
            last = true;
        }
        // Noise charge increments for this step (drawn once per attempt).
        let noisy = if let Some((nopts, rng)) = noise.as_mut() {
            noise_charges(&model, x, h, nopts, &mut **rng, noise_q, noise_sd);
            true
        } else {
            false
        };
        // Newton starts from the linear predictor (previous two points), or from x.
        if h_prev > 0.0 && !noisy {
            for i in 0..=n {
                x_new[i] = x[i] + (h / h_prev) * (x[i] - x_prev[i]);
            }
        } else {
            x_new.copy_from_slice(x);
        }
        let (ok, iters, update) = newton_step(
            &model,
            x,
            if noisy { Some(&noise_q[..]) } else { None },
            h,
            opts,
            x_new,
            diag,
            common_to_line,
            line_to_common,
            residual,
        );
        newton_total += iters;
        if !ok {
            rejected += 1;
            h *= 0.5;
            if h < min_step {
                return Err(TransientError::StepFailed {
                    time: t,
                    step: h,
                    min_step,
                    steps,
                    update,
                    inputs: InputSummary::of(inputs),
                });
            }
            continue;
        }
        // Local error estimate (deterministic runs after the first step).
        let mut grow = 2.0;
        if noisy && noise_fixed.is_none() {
            // Drift part only (noise charge removed), never a rejection: the next step is a
            // function of the path so far, not of the coming increment (module docs).
            let mut err: f64 = 0.0;
            for i in 0..=n {
                let cap_i = if i < n { model.c_in } else { model.c_c };
                let rate = (x_new[i] - x[i] - noise_q[i] / cap_i) / h;
                if h_prev > 0.0 {
                    let lte = (rate - rate_prev[i]).abs() * h * h / (h + h_prev);
                    let tol = opts.atol + opts.rtol * x_new[i].abs() + noise_sd[i] / cap_i;
                    err = err.max(lte / tol);
                }
                rate_prev[i] = rate;
            }
            if h_prev > 0.0 {
                grow = if err > 0.0 {
                    (0.9 / err.sqrt()).clamp(0.2, 4.0)
                } else {
                    4.0
                };
            }
        }
        if !noisy && h_prev > 0.0 {
            let mut err: f64 = 0.0;
            for i in 0..=n {
                let pred = x[i] + h * (x[i] - x_prev[i]) / h_prev;
                let lte = (x_new[i] - pred).abs() * h / (h + h_prev);
                err = err.max(lte / (opts.atol + opts.rtol * x_new[i].abs()));
            }
            if err > 1.0 {
                rejected += 1;
                h *= (0.9 / err.sqrt()).max(0.2);
                if h < min_step {
                    return Err(TransientError::StepFailed {
                        time: t,
                        step: h,
                        min_step,
                        steps,
                        update: err,
                        inputs: InputSummary::of(inputs),
                    });
                }
                continue;
            }
            grow = if err > 0.0 {
                (0.9 / err.sqrt()).clamp(0.2, 4.0)
            } else {
                4.0
            };
        }
        // Accept.
        x_prev.copy_from_slice(x);
        x.copy_from_slice(x_new);
        let t_old = t;
        t = if last { t_end } else { t + h };
        steps += 1;
        h_prev = h;
        let (ni, nb) = model.outputs(x, &mut solution.outputs);
        fill_shares(&solution.outputs, &mut solution.shares);
        let e_step = 0.5 * (s_in + s_b + ni + nb) * (t - t_old) * model.vdd;
        let new = circuit.decide(&rule, &solution.shares);
        let new_margin = decision_margin(&rule, &new);
        let decided = !new.ambiguous;
        match held_since {
            Some((_, _, d)) if decided && d.winner == new.winner => {}
            _ if decided => {
                // Became decided inside this step: interpolate where the margin crossed 0.
                let frac = if cur.winner == new.winner && margin < 0.0 && new_margin > margin {
                    (-margin / (new_margin - margin)).clamp(0.0, 1.0)
                } else {
                    1.0
                };
                let tc = t_old + frac * (t - t_old);
                held_since = Some((tc, energy + frac * e_step, new));
            }
            _ => held_since = None,
        }
        energy += e_step;
        s_in = ni;
        s_b = nb;
        cur = new;
        margin = new_margin;
        if opts.record_waveform {
            waveform.push(WaveformPoint {
                time: t,
                voltages: x.to_vec(),
                outputs: solution.outputs.clone(),
            });
        }
        // Settling is checked once the error estimate lets the step grow at the largest rate
        // (a settling circuit), which saves its cost during the fast part of the transient.
        if opts.read_time.is_none()
            && !noisy
            && grow >= 4.0
            && model.residual(x) <= opts.settle_tolerance
        {
            settled = true;
        }
        if end_on_hold {
            if let Some((tc, _, _)) = held_since {
                held = t - tc >= hold * (1.0 - 1e-12);
            }
        }
        h = cap(h * grow);
    }

    let final_residual = model.residual(x);
    solution.node_voltages.copy_from_slice(x);
    solution.info = super::SolveInfo {
        iterations: newton_total,
        residual: final_residual,
        converged: settled,
        method: super::SolveMethod::Newton,
    };
    let decision_at_read = opts
        .read_time
        .map(|_| circuit.decide(&rule, &solution.shares));
    Ok(TransientSummary {
        decision_time: held_since.map(|(t, _, _)| t),
        decision: held_since.map(|(_, _, d)| d),
        energy_to_decision: held_since.map(|(_, e, _)| e),
        energy,
        decision_at_read,
        end_time: t,
        settled,
        held,
        final_residual,
        time_scale,
        steps,
        rejected_steps: rejected,
        newton_iterations: newton_total,
    })
}

/// How far a decision is inside the rule (> 0 decided, <= 0 ambiguous).
fn decision_margin(rule: &DecisionRule, d: &Decision) -> f64 {
    (d.winner_share - rule.min_winner_share).min(rule.max_runner_up_share - d.runner_up_share)
}

impl TransientOptions {
    /// Check every option (and the noise step, if noise is on); the error names the option.
    pub fn validate(&self, noise: Option<&NoiseOptions>) -> Result<(), TransientError> {
        check_options(self, noise)
    }
}

fn check_options(o: &TransientOptions, noise: Option<&NoiseOptions>) -> Result<(), TransientError> {
    let bad = |option, value, reason| {
        Err(TransientError::InvalidOption {
            option,
            value,
            reason,
        })
    };
    let pos = |v: f64| v.is_finite() && v > 0.0;
    if let Some(t) = o.read_time {
        if !pos(t) {
            return bad("read_time", t, "must be finite and > 0 s");
        }
    }
    if let Some(t) = o.t_max {
        if !pos(t) {
            return bad("t_max", t, "must be finite and > 0 s");
        }
    }
    for (name, v) in [
        ("atol", o.atol),
        ("rtol", o.rtol),
        ("settle_tolerance", o.settle_tolerance),
        ("first_step", o.first_step),
        ("min_step", o.min_step),
        ("newton_vtol", o.newton_vtol),
    ] {
        if !pos(v) {
            return bad(name, v, "must be finite and > 0");
        }
    }
    if o.max_newton == 0 {
        return bad("max_newton", 0.0, "must be at least 1");
    }
    for (name, v) in [
        ("rule.min_winner_share", o.rule.min_winner_share),
        ("rule.max_runner_up_share", o.rule.max_runner_up_share),
    ] {
        if !(0.0..=1.0).contains(&v) {
            return bad(name, v, "must be a share in [0, 1]");
        }
    }
    if let Some(t) = o.hold_time {
        if !pos(t) {
            return bad("hold_time", t, "must be finite and > 0 s");
        }
    }
    if let Some(nz) = noise {
        if let Some(s) = nz.step {
            if !pos(s) {
                return bad("noise.step", s, "must be finite and > 0 s");
            }
        }
        if !pos(nz.max_step_scales) {
            return bad(
                "noise.max_step_scales",
                nz.max_step_scales,
                "must be finite and > 0 (time scales)",
            );
        }
    }
    Ok(())
}

/// Noise charge increments (C) per node for a step of `h` at state `x` (module docs).
fn noise_charges<C: SharedNodeCircuit + ?Sized>(
    m: &Model<'_, C>,
    x: &[f64],
    h: f64,
    o: &NoiseOptions,
    rng: &mut dyn RngCore,
    q: &mut [f64],
    sd: &mut [f64],
) {
    let n = m.n;
    let vc = x[n];
    // Variance of the common node's charge drawn so far.
    let mut var_c = 0.0;
    let mut draw = |psd: f64, v: &mut f64| -> f64 {
        let z: f64 = rng.sample(StandardNormal);
        let s2 = 0.5 * psd.max(0.0) * h;
        *v += s2;
        s2.sqrt() * z
    };
    let mut qc = 0.0;
    for k in 0..n {
        // Variance of line k's charge drawn so far.
        let mut var = 0.0;
        let mut qk = 0.0;
        if o.input_shot {
            qk += draw(2.0 * ELEMENTARY_CHARGE * m.inputs[k], &mut var);
        }
        if o.device_shot {
            // Sink A_k (V_k to ground) and output B_k (V_out to V_C).
            qk += draw(m.circuit.load_noise_psd(k, x[k], vc), &mut var);
            qc += draw(m.circuit.output_noise_psd(k, x[k], vc), &mut var_c);
        }
        q[k] = qk;
        sd[k] = var.sqrt();
    }
    if o.device_shot {
        qc += match m.bias {
            CurrentSource::Ideal { current: i } => draw(2.0 * ELEMENTARY_CHARGE * i, &mut var_c),
            CurrentSource::Transistor {
                device: b,
                gate_voltage: vg,
            } => draw(super::circuit::mos_shot_psd(&b, vg, vc, 0.0), &mut var_c),
        };
    }
    q[n] = qc;
    sd[n] = var_c.sqrt();
}

/// One backward-Euler step from `x` of size `h` (plus noise charges): damped Newton on the
/// arrowhead system, starting from and solving into `x_new`. Returns (converged, iterations, last
/// largest update). Buffers: `a` the line rows' diagonal (then their updates), `b` the common
/// row's line entries, `c` the line rows' common entries, `r` the line residuals.
#[allow(clippy::too_many_arguments)]
fn newton_step<C: SharedNodeCircuit + ?Sized>(
    m: &Model<'_, C>,
    x: &[f64],
    noise_q: Option<&[f64]>,
    h: f64,
    opts: &TransientOptions,
    x_new: &mut [f64],
    a: &mut [f64],
    b: &mut [f64],
    c: &mut [f64],
    r: &mut [f64],
) -> (bool, usize, f64) {
    let n = m.n;
    let mut update = f64::INFINITY;
    for it in 1..=opts.max_newton {
        let vc = x_new[n];
        let mut s_b = 0.0;
        let mut e = m.c_c;
        for k in 0..n {
            let vk = x_new[k];
            let ea = m.circuit.load(k, vk, vc);
            let (iin, diin) = m.input(k, vk);
            let qn = noise_q.map_or(0.0, |q| q[k]);
            // R_k = C (v - v0) - h (I_in - I_A) - q.
            r[k] = m.c_in * (vk - x[k]) - h * (iin - ea.current) - qn;
            a[k] = m.c_in + h * (ea.d_line - diin);
            c[k] = h * ea.d_common;
            let eb = m.circuit.output(k, vk, vc);
            s_b += eb.current;
            b[k] = -h * eb.d_line;
            e -= h * eb.d_common;
        }
        let (ib, dib) = m.bias(vc);
        e += h * dib;
        let rc = m.c_c * (vc - x[n]) - h * (s_b - ib) - noise_q.map_or(0.0, |q| q[n]);
        // Eliminate the cells: (e - Σ b c / a) dvc = -R_C + Σ b R / a.
        let mut den = e;
        let mut rhs = -rc;
        for k in 0..n {
            den -= b[k] * c[k] / a[k];
            rhs += b[k] * r[k] / a[k];
        }
        let dvc = rhs / den;
        if !dvc.is_finite() {
            return (false, it, update);
        }
        let lim = 4.0 * m.ut;
        let mut big: f64 = dvc.abs();
        let mut scale: f64 = 1.0;
        if dvc.abs() > lim {
            scale = lim / dvc.abs();
        }
        for k in 0..n {
            let dv = (-r[k] - c[k] * dvc) / a[k];
            if !dv.is_finite() {
                return (false, it, update);
            }
            big = big.max(dv.abs());
            if dv.abs() * scale > lim {
                scale = lim / dv.abs();
            }
            a[k] = dv; // reuse as the update
        }
        for k in 0..n {
            x_new[k] += scale * a[k];
        }
        x_new[n] += scale * dvc;
        update = big;
        if big <= opts.newton_vtol {
            return (true, it, update);
        }
    }
    (false, opts.max_newton, update)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::device::{DeviceTech, DrainCoupling, Polarity, Process, Transistor};
    use crate::stages::competition::{CurrentSource, WtaChip, WtaCircuit, WtaDesign};

    fn process(eta: f64) -> Process {
        // Generic 0.18 µm-class numbers (from memory, not foundry data).
        let nmos = DeviceTech {
            vt0: 0.45,
            n: 1.3,
            mu_cox: 300e-6,
            drain_coupling: DrainCoupling::Eta(eta),
            a_vt_pair: 5e-9,
            a_beta_pair: 1e-8,
            vt0_tempco: -1.5e-3,
            beta_temp_exponent: -1.5,
            cox: 8.5e-3,
            kf: 1e-24,
        };
        Process {
            name: "generic-test".into(),
            vdd: 1.8,
            t_nom: 300.0,
            pmos: nmos.clone(),
            nmos,
        }
    }

    fn circuit(ib: f64) -> WtaCircuit {
        let t = Transistor {
            polarity: Polarity::Nmos,
            w: 2e-6,
            l: 1e-6,
        };
        let d = WtaDesign::new(3, process(0.01), t, t, CurrentSource::Ideal { current: ib });
        WtaChip::nominal(d).unwrap().at(300.0).unwrap()
    }

    /// Settles onto the DC operating point (the ODE's steady state is the KCL solution).
    #[test]
    fn settles_on_dc_point() {
        let c = circuit(100e-9);
        let inputs = [10e-9, 10.5e-9, 9e-9];
        let mut ws = TransientWorkspace::new();
        let s = simulate(&c, &inputs, &TransientOptions::default(), None, &mut ws).unwrap();
        assert!(s.settled, "{s:?}");
        let mut dc = StageSolution::for_stage(&c);
        crate::stages::competition::CompetitionStage::solve(
            &c,
            &inputs,
            &mut Workspace::new(),
            &mut dc,
        )
        .unwrap();
        for (a, b) in ws.solution().node_voltages.iter().zip(&dc.node_voltages) {
            assert!((a - b).abs() < 1e-6, "{a} vs {b}");
        }
        assert_eq!(s.decision.map(|d| d.winner), Some(1));
    }

    /// A step that cannot meet its tolerance above the smallest step is an error value saying
    /// where the run stopped, never a silent answer (DEVELOPERS.md invariant 4).
    #[test]
    fn failed_step_is_an_error() {
        let c = circuit(100e-9);
        let o = TransientOptions {
            atol: 1e-15,
            rtol: 1e-15,
            min_step: 1e-2,
            first_step: 2e-2,
            ..Default::default()
        };
        let e = simulate(
            &c,
            &[10e-9, 11e-9, 9e-9],
            &o,
            None,
            &mut TransientWorkspace::new(),
        )
        .unwrap_err();
        assert!(matches!(e, TransientError::StepFailed { .. }), "{e}");
        let msg = e.to_string();
        assert!(
            msg.contains("did not converge") && msg.contains("min_step"),
            "{msg}"
        );
    }

    /// A bad option is an error naming it.
    #[test]
    fn bad_options_are_named() {
        let c = circuit(100e-9);
        let o = TransientOptions {
            read_time: Some(-1.0),
            ..Default::default()
        };
        let e = simulate(&c, &[1e-9; 3], &o, None, &mut TransientWorkspace::new()).unwrap_err();
        assert!(e.to_string().contains("read_time"), "{e}");
        let o = TransientOptions {
            hold_time: Some(0.0),
            ..Default::default()
        };
        let e = o.validate(None).unwrap_err();
        assert!(e.to_string().contains("hold_time"), "{e}");
        let nz = NoiseOptions {
            max_step_scales: f64::NAN,
            ..Default::default()
        };
        let e = TransientOptions::default().validate(Some(&nz)).unwrap_err();
        assert!(e.to_string().contains("max_step_scales"), "{e}");
        let e = simulate(
            &c,
            &[1e-9, f64::NAN, 1e-9],
            &TransientOptions::default(),
            None,
            &mut TransientWorkspace::new(),
        )
        .unwrap_err();
        assert!(e.to_string().contains("input 1"), "{e}");
    }
}
