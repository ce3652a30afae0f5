//! Competition stages: current-mode WTA, multi-input differential pair, decisions.
//!
//! Every stage follows the design / chip / conditions split of the developers' guide:
//! a `*Design` holds the nominal parameters, a `*Chip` one sampled instance (a
//! [`MosMismatch`](crate::device::MosMismatch) per transistor), and `*Chip::at(temperature)`
//! gives the circuit ready to solve (one folded EKV device per transistor).
//!
//! Solving ([`CompetitionStage::solve`]) takes one input per class line and fills a
//! caller-owned [`StageSolution`] using a caller-owned [`Workspace`]; both are reused across
//! decisions, so the hot path does not allocate. A solve that does not converge, or whose
//! operating point the supply cannot carry, returns a [`CompetitionError`] saying how far it got:
//! never a silent answer.
//!
//! Numerical core: no I/O, no printing.

pub mod analysis;
pub mod cascade;
pub mod circuit;
mod common;
pub mod dc;
pub mod decision;
pub mod diffpair;
pub mod hysteretic;
#[cfg(test)]
mod ideal_normaliser;
pub mod kwta;
pub mod mos;
pub mod noise;
pub mod source;
pub mod transient;
pub mod wta;

use std::fmt;

use thiserror::Error;

pub use circuit::{Branch, BranchLanes, CircuitMessages, DcStrategy, SharedNodeCircuit};
pub use decision::{Decision, DecisionRule, TopK};
pub use diffpair::{DiffPairChip, DiffPairCircuit, DiffPairDesign, DiffPairInput};
pub use hysteretic::{HysteresisChip, HysteresisCircuit, HysteresisDesign};
pub use noise::{InputShotNoise, NoiseBandwidth};
pub use source::CurrentSource;
pub use wta::{WtaChip, WtaCircuit, WtaDesign};

/// Which algorithm produced a solution.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum SolveMethod {
    /// Nothing solved yet.
    #[default]
    None,
    /// Damped Newton on the full node set (arrowhead Jacobian for the WTA).
    Newton,
    /// Monotone bracketing solve (nested scalar solves).
    Bracketing,
}

/// How a solve went.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct SolveInfo {
    /// Iterations of the method that produced the answer (Newton steps, or outer bracketing
    /// evaluations); when the fallback ran, the Newton steps spent before it are included.
    pub iterations: usize,
    /// Largest relative KCL residual at the returned point, |sum of currents| / (current scale
    /// of that node) over every node.
    pub residual: f64,
    /// True when the returned point meets the tolerance (always true on `Ok`).
    pub converged: bool,
    /// The algorithm that produced the answer.
    pub method: SolveMethod,
}

/// The result of one DC solve, owned by the caller and reused.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct StageSolution {
    /// Output current of every class line, A.
    pub outputs: Vec<f64>,
    /// `outputs[k] / sum(outputs)`.
    pub shares: Vec<f64>,
    /// Node voltages, V (bulk = ground referred); the order is the stage's
    /// [`CompetitionStage::node_names`].
    pub node_voltages: Vec<f64>,
    /// Solver report.
    pub info: SolveInfo,
}

impl StageSolution {
    /// Buffers sized for a stage.
    pub fn for_stage<S: CompetitionStage + ?Sized>(stage: &S) -> StageSolution {
        StageSolution {
            outputs: vec![0.0; stage.n()],
            shares: vec![0.0; stage.n()],
            node_voltages: vec![0.0; stage.node_count()],
            info: SolveInfo::default(),
        }
    }

    /// Resize the buffers (allocates only when they grow).
    pub fn resize(&mut self, n: usize, nodes: usize) {
        self.outputs.resize(n, 0.0);
        self.shares.resize(n, 0.0);
        self.node_voltages.resize(nodes, 0.0);
    }

    /// Apply a decision rule to the shares.
    pub fn decide(&self, rule: &DecisionRule) -> Decision {
        rule.decide(&self.shares)
    }
}

/// Scratch space of the DC solver, reused across solves (grows on first use, never shrinks).
/// One entry per line in each buffer.
#[derive(Clone, Debug, Default)]
pub struct Workspace {
    /// Line voltages V_k being solved, V.
    pub(crate) line_voltage: Vec<f64>,
    /// dI_L,k/dV_k of each line's load (Newton), A/V.
    pub(crate) load_d_line: Vec<f64>,
    /// dI_L,k/dV_C of each line's load (Newton), A/V.
    pub(crate) load_d_common: Vec<f64>,
    /// Log-form line residual times the load current, `ln(I_L,k/I_k) I_L,k` (Newton), A.
    pub(crate) scaled_residual: Vec<f64>,
    /// Closed-form output shares of the start (and any scratch of the circuit's start).
    pub(crate) start_share: Vec<f64>,
    /// Lines the bracketing solve found clamped at the supply.
    pub(crate) clamped: Vec<bool>,
    /// The operating point a circuit that holds state ([`SharedNodeCircuit::carries_state`])
    /// reached in its last solve, `[V_0..V_{N-1}, V_C]`; empty = none yet (a power-up).
    pub(crate) state: Vec<f64>,
    /// The transient that settles such a circuit from its state.
    pub(crate) settle: Option<Box<transient::TransientWorkspace>>,
}

impl Workspace {
    /// An empty workspace.
    pub fn new() -> Workspace {
        Workspace::default()
    }

    /// The operating point kept by a circuit that holds state (empty: none, a power-up).
    pub fn state(&self) -> &[f64] {
        &self.state
    }

    /// Set the state a circuit that holds state starts its next solve from.
    pub fn set_state(&mut self, voltages: &[f64]) {
        self.state.clear();
        self.state.extend_from_slice(voltages);
    }

    /// Forget the state: the next solve of a circuit that holds state starts from a power-up.
    pub fn clear_state(&mut self) {
        self.state.clear();
    }

    pub(crate) fn ensure(&mut self, n: usize) {
        for b in [
            &mut self.line_voltage,
            &mut self.load_d_line,
            &mut self.load_d_common,
            &mut self.scaled_residual,
            &mut self.start_share,
        ] {
            if b.len() < n {
                b.resize(n, 0.0);
            }
        }
        if self.clamped.len() < n {
            self.clamped.resize(n, false);
        }
    }
}

/// Summary of an input vector for error messages (no allocation when built).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct InputSummary {
    pub n: usize,
    pub min: f64,
    pub max: f64,
    pub sum: f64,
    /// Index of the largest input.
    pub argmax: usize,
    /// The inputs are voltages (V); otherwise currents (A). A flag, not a string, keeps the
    /// errors that carry a summary small.
    pub volts: bool,
}

impl InputSummary {
    /// Summarise input currents `x`, A (non-finite entries propagate into the fields).
    pub fn of(x: &[f64]) -> InputSummary {
        Self::of_in(x, "A")
    }

    /// Summarise inputs `x` in the SI unit `unit` (`"V"` for voltages, otherwise currents).
    pub fn of_in(x: &[f64], unit: &str) -> InputSummary {
        let mut s = InputSummary {
            n: x.len(),
            min: f64::INFINITY,
            max: f64::NEG_INFINITY,
            sum: 0.0,
            argmax: 0,
            volts: unit == "V",
        };
        for (i, &v) in x.iter().enumerate() {
            s.min = s.min.min(v);
            if v > s.max {
                s.max = v;
                s.argmax = i;
            }
            s.sum += v;
        }
        s
    }
}

impl fmt::Display for InputSummary {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let unit = if self.volts { "V" } else { "A" };
        let q = |v: f64| crate::units::format_si(v, unit, 5);
        write!(
            f,
            "{} inputs, min {}, max {} (input {}), sum {}",
            self.n,
            q(self.min),
            q(self.max),
            self.argmax,
            q(self.sum)
        )
    }
}

/// Errors of the competition stages.
#[derive(Clone, Debug, PartialEq, Error)]
pub enum CompetitionError {
    /// A design parameter is out of its valid range.
    #[error("{stage}: parameter `{parameter}` = {value:e} is invalid: {reason}")]
    InvalidParameter {
        stage: &'static str,
        parameter: &'static str,
        value: f64,
        reason: &'static str,
    },
    /// The number of per-transistor mismatch draws does not match the design.
    #[error("{stage}: {what} has {got} entries, the design needs {expected}")]
    WrongLength {
        stage: &'static str,
        what: &'static str,
        expected: usize,
        got: usize,
    },
    /// An input is negative or not finite.
    #[error("{stage}: input {index} is {value:e} {unit}; inputs must be finite{}", if *.nonnegative { " and >= 0" } else { "" })]
    InvalidInput {
        stage: &'static str,
        index: usize,
        value: f64,
        unit: &'static str,
        nonnegative: bool,
    },
    /// No operating point within the supply: a bias or input the circuit cannot carry.
    #[error(
        "{stage}: the {parameter} cannot be carried within the supply: {reason} ({inputs}); {fix}"
    )]
    Compliance {
        stage: &'static str,
        parameter: &'static str,
        reason: &'static str,
        fix: &'static str,
        inputs: InputSummary,
    },
    /// The solver stopped without meeting its tolerance.
    #[error("{stage}: DC solve did not converge after {iterations} iterations (relative KCL residual {residual:.3e}, tolerance {tolerance:.1e}) for {inputs}")]
    NotConverged {
        stage: &'static str,
        iterations: usize,
        residual: f64,
        tolerance: f64,
        inputs: InputSummary,
    },
}

/// A competition stage evaluated at its conditions, ready to solve.
pub trait CompetitionStage {
    /// Number of class lines (inputs = outputs).
    fn n(&self) -> usize;

    /// Number of node voltages reported in [`StageSolution::node_voltages`].
    fn node_count(&self) -> usize;

    /// Name of node `i` (e.g. `"V_3"`, `"V_C"`), for reports.
    fn node_name(&self, i: usize) -> String;

    /// Short name of the stage for messages.
    fn stage_name(&self) -> &'static str;

    /// Unit of the inputs: `"A"` for currents, `"V"` for voltages.
    fn input_unit(&self) -> &'static str;

    /// DC operating point for `inputs` (one per class line). Fills `out` (resized if needed;
    /// no allocation when it already has the right size) using `ws` as scratch.
    fn solve(
        &self,
        inputs: &[f64],
        ws: &mut Workspace,
        out: &mut StageSolution,
    ) -> Result<(), CompetitionError>;
}

/// Every shared-node circuit is a competition stage: its DC solve is the generic one
/// ([`dc::solve`]).
impl<C: SharedNodeCircuit> CompetitionStage for C {
    fn n(&self) -> usize {
        self.lines()
    }

    fn node_count(&self) -> usize {
        self.lines() + 1
    }

    fn node_name(&self, i: usize) -> String {
        if i == self.lines() {
            self.common_node_name().to_string()
        } else {
            format!("{}{i}", self.line_node_prefix())
        }
    }

    fn stage_name(&self) -> &'static str {
        SharedNodeCircuit::name(self)
    }

    fn input_unit(&self) -> &'static str {
        SharedNodeCircuit::inputs_unit(self)
    }

    #[inline]
    fn solve(
        &self,
        inputs: &[f64],
        ws: &mut Workspace,
        out: &mut StageSolution,
    ) -> Result<(), CompetitionError> {
        dc::solve(self, inputs, ws, out)
    }
}

/// Fill `shares` from `outputs`; all-zero outputs give equal shares.
pub(crate) fn fill_shares(outputs: &[f64], shares: &mut [f64]) {
    let sum: f64 = outputs.iter().sum();
    if sum > 0.0 && sum.is_finite() {
        for (s, o) in shares.iter_mut().zip(outputs) {
            *s = o / sum;
        }
    } else {
        let n = shares.len().max(1) as f64;
        for s in shares.iter_mut() {
            *s = 1.0 / n;
        }
    }
}

/// Check input count and that every input is finite (and non-negative when required).
pub(crate) fn validate_inputs(
    stage: &'static str,
    n: usize,
    inputs: &[f64],
    unit: &'static str,
    nonnegative: bool,
) -> Result<(), CompetitionError> {
    if inputs.len() != n {
        return Err(CompetitionError::WrongLength {
            stage,
            what: "the input vector",
            expected: n,
            got: inputs.len(),
        });
    }
    for (index, &value) in inputs.iter().enumerate() {
        if !value.is_finite() || (nonnegative && value < 0.0) {
            return Err(CompetitionError::InvalidInput {
                stage,
                index,
                value,
                unit,
                nonnegative,
            });
        }
    }
    Ok(())
}

/// Check a design value: finite and strictly positive.
pub(crate) fn positive(
    stage: &'static str,
    parameter: &'static str,
    value: f64,
) -> Result<(), CompetitionError> {
    if value.is_finite() && value > 0.0 {
        Ok(())
    } else {
        Err(CompetitionError::InvalidParameter {
            stage,
            parameter,
            value,
            reason: "must be finite and > 0",
        })
    }
}

/// One sampled competition stage of either kind (design plus every transistor's mismatch), for
/// code that picks the stage at run time and needs the chip itself, not only its evaluation
/// (e.g. netlist export).
// One chip per die, built once per chip (not a hot path): the variants' sizes do not matter.
#[allow(clippy::large_enum_variant)]
#[derive(Clone, Debug, PartialEq)]
pub enum CompetitionChip {
    Wta(WtaChip),
    DiffPair(DiffPairChip),
    Hysteretic(HysteresisChip),
    /// k-winners WTA ([`kwta`]).
    KWinners(kwta::KWinnersChip),
    /// Tree of small WTAs ([`cascade`]).
    Cascade(cascade::CascadeChip),
    /// Ranking by repeated maximum on one WTA ([`cascade`]).
    Ranking(cascade::RankingChip),
}

impl CompetitionChip {
    /// Number of class lines.
    pub fn n(&self) -> usize {
        match self {
            CompetitionChip::Wta(c) => c.design.n,
            CompetitionChip::DiffPair(c) => c.design.n,
            CompetitionChip::Hysteretic(c) => c.design.wta.n,
            CompetitionChip::KWinners(c) => c.design.wta.n,
            CompetitionChip::Cascade(c) => c.design.classes,
            CompetitionChip::Ranking(c) => c.design.wta.n,
        }
    }

    /// The chip at a temperature (K), ready to solve.
    pub fn at(&self, temperature: f64) -> Result<CompetitionCircuit, CompetitionError> {
        Ok(match self {
            CompetitionChip::Wta(c) => CompetitionCircuit::Wta(c.at(temperature)?),
            CompetitionChip::DiffPair(c) => CompetitionCircuit::DiffPair(c.at(temperature)?),
            CompetitionChip::Hysteretic(c) => CompetitionCircuit::Hysteretic(c.at(temperature)?),
            CompetitionChip::KWinners(c) => CompetitionCircuit::KWinners(c.at(temperature)?),
            CompetitionChip::Cascade(c) => CompetitionCircuit::Cascade(c.at(temperature)?),
            CompetitionChip::Ranking(c) => CompetitionCircuit::Ranking(c.at(temperature)?),
        })
    }
}

/// Any competition stage evaluated at its conditions (for code that picks the stage at run
/// time, e.g. from an experiment file). A ranking circuit's [`CompetitionStage`] view is its
/// first round (the full WTA, every cell competing); its k rounds are
/// [`cascade::RankingCircuit::rank`].
#[allow(clippy::large_enum_variant)]
#[derive(Clone, Debug, PartialEq)]
pub enum CompetitionCircuit {
    Wta(WtaCircuit),
    DiffPair(DiffPairCircuit),
    Hysteretic(HysteresisCircuit),
    KWinners(kwta::KWinnersCircuit),
    Cascade(cascade::CascadeCircuit),
    Ranking(cascade::RankingCircuit),
}

impl CompetitionStage for CompetitionCircuit {
    fn n(&self) -> usize {
        match self {
            CompetitionCircuit::Wta(c) => c.n(),
            CompetitionCircuit::DiffPair(c) => c.n(),
            CompetitionCircuit::Hysteretic(c) => c.n(),
            CompetitionCircuit::KWinners(c) => c.n(),
            CompetitionCircuit::Cascade(c) => c.n(),
            CompetitionCircuit::Ranking(c) => c.full().n(),
        }
    }

    fn node_count(&self) -> usize {
        match self {
            CompetitionCircuit::Wta(c) => c.node_count(),
            CompetitionCircuit::DiffPair(c) => c.node_count(),
            CompetitionCircuit::Hysteretic(c) => c.node_count(),
            CompetitionCircuit::KWinners(c) => c.node_count(),
            CompetitionCircuit::Cascade(c) => c.node_count(),
            CompetitionCircuit::Ranking(c) => c.full().node_count(),
        }
    }

    fn node_name(&self, i: usize) -> String {
        match self {
            CompetitionCircuit::Wta(c) => c.node_name(i),
            CompetitionCircuit::DiffPair(c) => c.node_name(i),
            CompetitionCircuit::Hysteretic(c) => c.node_name(i),
            CompetitionCircuit::KWinners(c) => c.node_name(i),
            CompetitionCircuit::Cascade(c) => c.node_name(i),
            CompetitionCircuit::Ranking(c) => c.full().node_name(i),
        }
    }

    fn stage_name(&self) -> &'static str {
        match self {
            CompetitionCircuit::Wta(c) => c.stage_name(),
            CompetitionCircuit::DiffPair(c) => c.stage_name(),
            CompetitionCircuit::Hysteretic(c) => c.stage_name(),
            CompetitionCircuit::KWinners(c) => c.stage_name(),
            CompetitionCircuit::Cascade(c) => c.stage_name(),
            CompetitionCircuit::Ranking(c) => c.full().stage_name(),
        }
    }

    fn input_unit(&self) -> &'static str {
        match self {
            CompetitionCircuit::Wta(c) => c.input_unit(),
            CompetitionCircuit::DiffPair(c) => c.input_unit(),
            CompetitionCircuit::Hysteretic(c) => c.input_unit(),
            CompetitionCircuit::KWinners(c) => c.input_unit(),
            CompetitionCircuit::Cascade(c) => c.input_unit(),
            CompetitionCircuit::Ranking(c) => c.full().input_unit(),
        }
    }

    fn solve(
        &self,
        inputs: &[f64],
        ws: &mut Workspace,
        out: &mut StageSolution,
    ) -> Result<(), CompetitionError> {
        match self {
            CompetitionCircuit::Wta(c) => c.solve(inputs, ws, out),
            CompetitionCircuit::DiffPair(c) => c.solve(inputs, ws, out),
            CompetitionCircuit::Hysteretic(c) => c.solve(inputs, ws, out),
            CompetitionCircuit::KWinners(c) => c.solve(inputs, ws, out),
            CompetitionCircuit::Cascade(c) => c.solve(inputs, ws, out),
            CompetitionCircuit::Ranking(c) => c.full().solve(inputs, ws, out),
        }
    }
}

#[cfg(test)]
mod summary_tests {
    use super::InputSummary;

    /// An input summary in a message shows quantities with their unit and an SI prefix
    /// (`format_si`), not raw exponents ("9.0000e-9").
    #[test]
    fn input_summary_shows_units() {
        let s = InputSummary::of(&[1e-9, 9e-9]).to_string();
        assert_eq!(s, "2 inputs, min 1 nA, max 9 nA (input 1), sum 10 nA");
        let v = InputSummary::of_in(&[0.5, 0.7], "V").to_string();
        assert!(v.contains("max 700 mV"), "{v}");
        assert!(!s.contains("e-9") && !v.contains("e-"), "{s} / {v}");
    }
}
