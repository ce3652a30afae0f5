//! Multi-input differential pair: a voltage-mode soft WTA.
//!
//! N NMOS transistors share their source (node V_S); transistor i has its gate at V_i and its
//! drain at a fixed output voltage; a tail (an ideal current I_b, or an NMOS with its gate at a
//! bias voltage, drain V_S, source ground) drains V_S. Every bulk is at ground (body effect via
//! the bulk-referred EKV model). In weak-inversion saturation
//! `I_i = I_b e^(kappa V_i/U_T) / Σ_j e^(kappa V_j/U_T)`: a softmax with temperature U_T/kappa;
//! for N = 2, `I_1 - I_2 = I_b tanh(kappa (V_1 - V_2)/(2 U_T))` (C. Mead, "Analog VLSI and Neural
//! Systems", 1989; S.-C. Liu et al., "Analog VLSI: Circuits and Principles", 2002).
//!
//! Inputs are gate voltages, or currents converted to gate voltages by a diode-connected NMOS
//! (gate = drain = V_i, source ground: then the pair is a plain normaliser, `I_i ∝ I_in,i` in weak
//! inversion) or by a resistor (`V_i = V_ref + R I_in,i`: a softmax with gain `kappa R / U_T`).
//!
//! The circuit implements [`SharedNodeCircuit`] (line i = gate node V_Gi, its load the input
//! diode, its output the pair transistor, the source the tail) with the lines-first strategy of
//! the generic DC solver ([`super::dc`]): each diode's gate voltage by a monotone 1-D solve (or
//! the driven gate voltage), then the common source V_S by a monotone scalar solve of
//! `ln Σ I_i(V_S) = ln I_tail(V_S)` (the left side falls and the right side rises with V_S),
//! started from the weak-inversion closed form.

// Index loops run over parallel per-input arrays.
#![allow(clippy::needless_range_loop)]

use crate::device::{DrainCoupling, Ekv, MosMismatch, Process, Transistor};
use crate::solvers::{solve_monotone, ScalarError, ScalarTolerance};

use super::circuit::{
    mos_shot_psd, node_currents, Branch, CircuitMessages, DcStrategy, SharedNodeCircuit,
};
use super::common::{
    at_least_two, check_count, check_mismatch, draw_n, ekv_f_inverse, finite, nmos, nonnegative,
    not_converged, Devices,
};
use super::mos::Mos;
use super::source::{CurrentSource, SourceKeys};
use super::{positive, CompetitionError, InputSummary};

const STAGE: &str = "multi-input differential pair";

/// Why every transistor must be an NMOS.
const NMOS_REASON: &str = "this differential pair is built from NMOS transistors";

/// Config keys of the tail, for error messages.
const TAIL_KEYS: SourceKeys = SourceKeys {
    current: "tail current",
    device: "tail.device",
    w: "tail.device.w",
    l: "tail.device.l",
    gate_voltage: "tail.gate_voltage",
    nmos_reason: NMOS_REASON,
    nmos_first: true,
};

/// What the solve says when V_S has no solution within the supply (the line texts are those of
/// the input diodes, which [`DiffPairCircuit`]'s line solve reports itself).
static MESSAGES: CircuitMessages = CircuitMessages {
    source_keys: TAIL_KEYS,
    below_reason: "the common source would have to fall below ground to carry the tail current",
    below_fix: "raise the input (gate) voltages or lower the tail current",
    above_reason: "the common source would have to rise above the supply",
    above_fix: "lower the input (gate) voltages or raise the supply",
    line_reason: "an input diode would need a gate voltage above the supply",
    line_fix: "widen the input diodes or lower the input currents",
};

/// Relative KCL tolerance of the DC solve.
pub const DIFFPAIR_RELATIVE_TOLERANCE: f64 = 1e-10;

/// How the inputs reach the gates.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum DiffPairInput {
    /// Inputs are the gate voltages, V.
    Voltage,
    /// Inputs are currents (A) into diode-connected NMOS `device` (gate = drain, source ground).
    Diode { device: Transistor },
    /// Inputs are currents (A) through a resistor: `V_i = reference + resistance * I_i`.
    Resistor { resistance: f64, reference: f64 },
}

/// Nominal design of a multi-input differential pair.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct DiffPairDesign {
    /// Number of inputs, at least 2.
    pub n: usize,
    pub process: Process,
    /// The N pair transistors.
    pub pair: Transistor,
    pub tail: CurrentSource,
    pub input: DiffPairInput,
    /// Supply, V (upper limit of every node).
    pub supply: f64,
    /// Drain voltage of the pair transistors, V.
    pub output_voltage: f64,
    /// Overrides the process drain coupling of every transistor.
    pub drain_coupling: Option<DrainCoupling>,
    /// Capacitance on the common source node, F (for transient evaluation).
    pub source_capacitance: f64,
    /// Capacitance on each gate node, F (for transient evaluation with current inputs).
    pub input_capacitance: f64,
}

impl DiffPairDesign {
    /// Supply and output voltage at the process V_dd, process drain coupling, 50 fF on gates and
    /// 200 fF on the common source (placeholders of ours; set them from your layout).
    pub fn new(
        n: usize,
        process: Process,
        pair: Transistor,
        tail: CurrentSource,
        input: DiffPairInput,
    ) -> DiffPairDesign {
        let vdd = process.vdd;
        DiffPairDesign {
            n,
            process,
            pair,
            tail,
            input,
            supply: vdd,
            output_voltage: vdd,
            drain_coupling: None,
            source_capacitance: 200e-15,
            input_capacitance: 50e-15,
        }
    }

    /// Check every parameter; the error names the first bad one.
    pub fn validate(&self) -> Result<(), CompetitionError> {
        at_least_two(STAGE, self.n, "a competition needs at least 2 inputs")?;
        nmos(STAGE, "pair", &self.pair, NMOS_REASON)?;
        positive(STAGE, "pair.w", self.pair.w)?;
        positive(STAGE, "pair.l", self.pair.l)?;
        positive(STAGE, "supply", self.supply)?;
        nonnegative(STAGE, "output_voltage", self.output_voltage)?;
        self.tail.validate(STAGE, &TAIL_KEYS)?;
        match self.input {
            DiffPairInput::Voltage => {}
            DiffPairInput::Diode { device } => {
                nmos(STAGE, "input.device", &device, NMOS_REASON)?;
                positive(STAGE, "input.device.w", device.w)?;
                positive(STAGE, "input.device.l", device.l)?;
            }
            DiffPairInput::Resistor {
                resistance,
                reference,
            } => {
                positive(STAGE, "input.resistance", resistance)?;
                finite(STAGE, "input.reference", reference)?;
            }
        }
        nonnegative(STAGE, "source_capacitance", self.source_capacitance)?;
        nonnegative(STAGE, "input_capacitance", self.input_capacitance)
    }

    /// Number of input diodes (N with diode inputs, else 0).
    pub fn diode_count(&self) -> usize {
        match self.input {
            DiffPairInput::Diode { .. } => self.n,
            _ => 0,
        }
    }
}

/// One sampled differential-pair chip.
#[derive(Clone, Debug, PartialEq)]
pub struct DiffPairChip {
    pub design: DiffPairDesign,
    /// Mismatch of the N pair transistors.
    pub pair: Vec<MosMismatch>,
    /// Mismatch of the N input diodes (empty unless the input is `Diode`).
    pub diodes: Vec<MosMismatch>,
    /// Mismatch of the tail transistor (ignored for an ideal tail).
    pub tail: MosMismatch,
}

impl DiffPairChip {
    /// A chip without mismatch.
    pub fn nominal(design: DiffPairDesign) -> Result<DiffPairChip, CompetitionError> {
        let (n, nd) = (design.n, design.diode_count());
        DiffPairChip::from_mismatch(
            design,
            vec![MosMismatch::default(); n],
            vec![MosMismatch::default(); nd],
            MosMismatch::default(),
        )
    }

    /// A chip from given draws (N pair transistors, N diodes or none, one tail).
    pub fn from_mismatch(
        design: DiffPairDesign,
        pair: Vec<MosMismatch>,
        diodes: Vec<MosMismatch>,
        tail: MosMismatch,
    ) -> Result<DiffPairChip, CompetitionError> {
        design.validate()?;
        check_count(STAGE, "pair mismatch", design.n, pair.len())?;
        check_count(STAGE, "diode mismatch", design.diode_count(), diodes.len())?;
        check_mismatch(
            STAGE,
            pair.iter().chain(&diodes).chain(std::iter::once(&tail)),
        )?;
        Ok(DiffPairChip {
            design,
            pair,
            diodes,
            tail,
        })
    }

    /// Sample a chip with `draw` per transistor in a fixed order: pair 0..N-1, then the diodes
    /// 0..N-1 (diode inputs only), then the tail transistor (transistor tail only).
    pub fn sample<F>(design: DiffPairDesign, mut draw: F) -> Result<DiffPairChip, CompetitionError>
    where
        F: FnMut(&Transistor) -> MosMismatch,
    {
        design.validate()?;
        let pair = draw_n(design.n, &design.pair, &mut draw);
        let diodes = match design.input {
            DiffPairInput::Diode { device } => draw_n(design.n, &device, &mut draw),
            _ => Vec::new(),
        };
        let tail = design.tail.draw(&mut draw);
        DiffPairChip::from_mismatch(design, pair, diodes, tail)
    }

    /// The chip at a temperature (K), ready to solve.
    pub fn at(&self, temperature: f64) -> Result<DiffPairCircuit, CompetitionError> {
        positive(STAGE, "temperature", temperature)?;
        let d = &self.design;
        let devices = Devices::new(&d.process, d.drain_coupling, temperature);
        let pair = devices.each(&d.pair, &self.pair);
        let diodes = match d.input {
            DiffPairInput::Diode { device } => devices.each(&device, &self.diodes),
            _ => Vec::new(),
        };
        let tail_desc = d.tail.at(&devices, self.tail);
        Ok(DiffPairCircuit {
            n: d.n,
            pair_fast: pair.iter().map(Mos::new).collect(),
            diode_fast: diodes.iter().map(Mos::new).collect(),
            pair,
            diodes,
            tail: tail_desc.fast(),
            tail_desc,
            input: d.input,
            supply: d.supply,
            output_voltage: d.output_voltage,
            vs_min: 0.0,
            temperature,
            input_capacitance: d.input_capacitance,
            source_capacitance: d.source_capacitance,
            tolerance: DIFFPAIR_RELATIVE_TOLERANCE,
        })
    }
}

/// A differential-pair chip at a temperature, ready to solve.
#[derive(Clone, Debug, PartialEq)]
pub struct DiffPairCircuit {
    n: usize,
    pair: Vec<Ekv>,
    diodes: Vec<Ekv>,
    pair_fast: Vec<Mos>,
    diode_fast: Vec<Mos>,
    tail: CurrentSource<Mos>,
    tail_desc: CurrentSource<Ekv>,
    input: DiffPairInput,
    /// Supply, V.
    pub supply: f64,
    /// Drain voltage of the pair, V.
    pub output_voltage: f64,
    /// Lowest common-source voltage (ground), V.
    pub vs_min: f64,
    /// Temperature, K.
    pub temperature: f64,
    /// Gate node capacitance, F (transient with diode inputs).
    pub input_capacitance: f64,
    /// Common source capacitance, F.
    pub source_capacitance: f64,
    /// Relative KCL tolerance.
    pub tolerance: f64,
}

impl DiffPairCircuit {
    /// Pair transistor i.
    pub fn pair(&self, i: usize) -> Option<&Ekv> {
        self.pair.get(i)
    }

    /// Input diode i (diode inputs only).
    pub fn diode(&self, i: usize) -> Option<&Ekv> {
        self.diodes.get(i)
    }

    /// The tail (ideal current or evaluated transistor with its gate voltage).
    pub fn tail(&self) -> &CurrentSource<Ekv> {
        &self.tail_desc
    }

    /// How inputs reach the gates.
    pub fn input(&self) -> &DiffPairInput {
        &self.input
    }

    /// Tail current at a common-source voltage.
    pub fn tail_current(&self, vs: f64) -> f64 {
        self.tail.eval(vs).0
    }

    /// Gate voltage of a diode carrying `i` amperes (monotone 1-D solve).
    fn diode_voltage(&self, k: usize, i: f64, inputs: &[f64]) -> Result<f64, CompetitionError> {
        if i <= 0.0 {
            return Ok(0.0);
        }
        let m = &self.diode_fast[k];
        let eta = m.eta;
        let x0 = (m.n() * m.ut() * ekv_f_inverse(i / m.is) + m.vt0) / (1.0 + eta);
        let f = |v: f64| {
            let e = m.eval(v, v, 0.0);
            if e.id > 0.0 {
                ((e.id / i).ln(), (e.d_vg + e.d_vd) / e.id)
            } else {
                (f64::NEG_INFINITY, f64::INFINITY)
            }
        };
        let tol = ScalarTolerance {
            ftol: 0.1 * self.tolerance,
            xtol: 0.0,
            max_iter: 300,
        };
        match solve_monotone(f, 0.0, self.supply, x0, true, tol) {
            Ok(r) => Ok(r.x),
            Err(ScalarError::NotBracketed { below: false, .. }) => {
                Err(CompetitionError::Compliance {
                    stage: STAGE,
                    parameter: "inputs",
                    reason: MESSAGES.line_reason,
                    fix: MESSAGES.line_fix,
                    inputs: InputSummary::of_in(inputs, self.inputs_unit()),
                })
            }
            Err(ScalarError::NotBracketed { f, .. })
            | Err(ScalarError::NoConvergence { f, .. }) => Err(not_converged(
                STAGE,
                tol.max_iter,
                f.exp_m1().abs(),
                self.tolerance,
                InputSummary::of_in(inputs, self.inputs_unit()),
            )),
        }
    }

    /// Weak-inversion closed-form start for V_S.
    fn closed_form_vs(&self, gates: &[f64]) -> f64 {
        let vout = self.output_voltage;
        let mut max_e = f64::NEG_INFINITY;
        for (m, &vg) in self.pair_fast.iter().zip(gates) {
            max_e = max_e.max(m.is.ln() + (vg - m.vt0 + m.eta * vout) * m.inv_n * m.inv_ut);
        }
        let mut s = 0.0;
        for (m, &vg) in self.pair_fast.iter().zip(gates) {
            s += (m.is.ln() + (vg - m.vt0 + m.eta * vout) * m.inv_n * m.inv_ut - max_e).exp();
        }
        let ln_ib = self.tail.ln_weak_current();
        let m0 = &self.pair_fast[0];
        let slope = (1.0 + m0.eta * m0.inv_n) * m0.inv_ut;
        let vs = (max_e + s.ln() - ln_ib) / slope;
        if vs.is_finite() {
            vs.clamp(self.vs_min, self.supply)
        } else {
            0.5 * (self.vs_min + self.supply)
        }
    }

    /// Net current (A) into each node for node voltages `[V_G0..V_G{N-1}, V_S]` and the
    /// inputs: with diode inputs entry i is `I_in,i - I_diode,i`, otherwise 0 (the gate is
    /// driven); entry N is `Σ I_i - I_tail`. Zero at a DC solution; with the node capacitances
    /// it gives the right-hand side of the ODE. Returns `None` on a length mismatch.
    pub fn node_currents(&self, inputs: &[f64], voltages: &[f64], out: &mut [f64]) -> Option<()> {
        node_currents(self, inputs, voltages, out)
    }

    /// Relative KCL residual at the common source for gate voltages and V_S.
    pub fn source_residual(&self, gates: &[f64], vs: f64) -> f64 {
        let s: f64 = self
            .pair_fast
            .iter()
            .zip(gates)
            .map(|(m, &vg)| m.id(vg, self.output_voltage, vs))
            .sum();
        let it = self.tail.eval(vs).0;
        (s - it) / it
    }
}

impl SharedNodeCircuit for DiffPairCircuit {
    fn name(&self) -> &'static str {
        STAGE
    }

    fn common_node_name(&self) -> &'static str {
        "V_S"
    }

    fn line_node_prefix(&self) -> &'static str {
        "V_G"
    }

    fn inputs_unit(&self) -> &'static str {
        match self.input {
            DiffPairInput::Voltage => "V",
            _ => "A",
        }
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
        self.vs_min
    }

    #[inline]
    fn tolerance(&self) -> f64 {
        self.tolerance
    }

    fn strategy(&self) -> DcStrategy {
        DcStrategy::LinesFirst
    }

    fn messages(&self) -> &'static CircuitMessages {
        &MESSAGES
    }

    fn temperature(&self) -> f64 {
        self.temperature
    }

    fn source(&self) -> &CurrentSource<Ekv> {
        &self.tail_desc
    }

    #[inline]
    fn source_fast(&self) -> &CurrentSource<Mos> {
        &self.tail
    }

    /// Input diode i (gate = drain = V_Gi, source ground); no current for driven gates.
    #[inline]
    fn load(&self, k: usize, v_line: f64, _v_common: f64) -> Branch {
        match self.diode_fast.get(k) {
            Some(m) => {
                let e = m.eval(v_line, v_line, 0.0);
                Branch {
                    current: e.id,
                    d_line: e.d_vg + e.d_vd,
                    d_common: 0.0,
                }
            }
            None => Branch::default(),
        }
    }

    #[inline]
    fn load_current(&self, k: usize, v_line: f64, _v_common: f64) -> f64 {
        self.diode_fast
            .get(k)
            .map_or(0.0, |m| m.id(v_line, v_line, 0.0))
    }

    /// Pair transistor i: gate V_Gi, drain at the output voltage, source V_S.
    #[inline]
    fn output(&self, k: usize, v_line: f64, v_common: f64) -> Branch {
        let e = self.pair_fast[k].eval(v_line, self.output_voltage, v_common);
        Branch {
            current: e.id,
            d_line: e.d_vg,
            d_common: e.d_vs,
        }
    }

    #[inline]
    fn output_current(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        self.pair_fast[k].id(v_line, self.output_voltage, v_common)
    }

    /// The weak-inversion closed form of V_S for the solved gate voltages in `lines`.
    fn closed_form_start(&self, _inputs: &[f64], _scratch: &mut [f64], lines: &mut [f64]) -> f64 {
        self.closed_form_vs(lines)
    }

    /// The gate voltage: the input itself, through the resistor, or the diode's solve.
    fn line_voltage(&self, k: usize, input: f64, inputs: &[f64]) -> Result<f64, CompetitionError> {
        match self.input {
            DiffPairInput::Voltage => Ok(input),
            DiffPairInput::Resistor {
                resistance,
                reference,
            } => Ok(reference + resistance * input),
            DiffPairInput::Diode { .. } => self.diode_voltage(k, input, inputs),
        }
    }

    fn lines_driven(&self) -> bool {
        !matches!(self.input, DiffPairInput::Diode { .. })
    }

    fn capacitances(&self) -> (f64, f64) {
        (self.input_capacitance, self.source_capacitance)
    }

    fn kappa(&self) -> f64 {
        self.diodes
            .first()
            .or(self.pair.first())
            .map(|d| 1.0 / d.n)
            .unwrap_or(1.0)
    }

    #[inline]
    fn load_noise_psd(&self, k: usize, v_line: f64, _v_common: f64) -> f64 {
        self.diode_fast
            .get(k)
            .map_or(0.0, |m| mos_shot_psd(m, v_line, v_line, 0.0))
    }

    #[inline]
    fn output_noise_psd(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        mos_shot_psd(&self.pair_fast[k], v_line, self.output_voltage, v_common)
    }
}
