//! A test-only competition stage added through [`SharedNodeCircuit`] alone (this file plus one
//! `mod` line in `mod.rs`): the ideal exponential normaliser. It proves the extension point —
//! the generic DC solver, the transient and [`CompetitionStage`] work on a circuit that knows
//! nothing of them.
//!
//! Line k: the input I_k drains through an ideal exponential element `I_L,k = I_0 e^(V_k/U)`
//! (a diode law with ideality 1), and an ideal exponential output element
//! `I_O,k = I_0 e^((V_k - V_C)/U)` feeds the common node, drained by an ideal bias I_b. KCL at
//! the lines gives `e^(V_k/U) = I_k/I_0`, at the common node `e^(-V_C/U) Σ I_k = I_b`, so
//! `I_O,k = I_b I_k / Σ_j I_j`: the exact normaliser (the weak-inversion translinear
//! normaliser, C. Mead, "Analog VLSI and Neural Systems", 1989; S.-C. Liu et al., "Analog VLSI:
//! Circuits and Principles", 2002, with every device ideal).

use super::circuit::{Branch, CircuitMessages, DcStrategy, SharedNodeCircuit};
use super::mos::Mos;
use super::source::{CurrentSource, SourceKeys};
use super::CompetitionError;
use crate::device::Ekv;
use crate::physics::ELEMENTARY_CHARGE;

static MESSAGES: CircuitMessages = CircuitMessages {
    source_keys: SourceKeys {
        current: "bias",
        device: "bias.device",
        w: "bias.device.w",
        l: "bias.device.l",
        gate_voltage: "bias.gate_voltage",
        nmos_reason: "an NMOS",
        nmos_first: true,
    },
    below_reason: "V_C below its limit",
    below_fix: "lower the bias",
    above_reason: "V_C above the supply",
    above_fix: "raise the supply",
    line_reason: "a line above the supply",
    line_fix: "lower the inputs",
};

/// The ideal exponential normaliser (module docs).
pub struct IdealNormaliser {
    pub n: usize,
    /// Scale current I_0 of every element, A.
    pub i0: f64,
    /// Voltage scale U of the exponentials, V.
    pub u: f64,
    pub supply: f64,
    bias: CurrentSource<Ekv>,
    bias_fast: CurrentSource<Mos>,
}

impl IdealNormaliser {
    pub fn new(n: usize, bias: f64) -> IdealNormaliser {
        IdealNormaliser {
            n,
            i0: 1e-20,
            u: 0.025,
            supply: 3.0,
            bias: CurrentSource::Ideal { current: bias },
            bias_fast: CurrentSource::Ideal { current: bias },
        }
    }

    fn element(&self, v: f64) -> f64 {
        self.i0 * (v / self.u).exp()
    }
}

impl SharedNodeCircuit for IdealNormaliser {
    fn name(&self) -> &'static str {
        "ideal normaliser"
    }
    fn common_node_name(&self) -> &'static str {
        "V_C"
    }
    fn line_node_prefix(&self) -> &'static str {
        "V_"
    }
    fn lines(&self) -> usize {
        self.n
    }
    fn supply(&self) -> f64 {
        self.supply
    }
    fn common_min(&self) -> f64 {
        0.0
    }
    fn tolerance(&self) -> f64 {
        1e-10
    }
    fn strategy(&self) -> DcStrategy {
        DcStrategy::Coupled { max_newton: 60 }
    }
    fn messages(&self) -> &'static CircuitMessages {
        &MESSAGES
    }
    fn temperature(&self) -> f64 {
        300.0
    }
    fn source(&self) -> &CurrentSource<Ekv> {
        &self.bias
    }
    fn source_fast(&self) -> &CurrentSource<Mos> {
        &self.bias_fast
    }
    fn load(&self, _k: usize, v_line: f64, _v_common: f64) -> Branch {
        let i = self.element(v_line);
        Branch {
            current: i,
            d_line: i / self.u,
            d_common: 0.0,
        }
    }
    fn load_current(&self, _k: usize, v_line: f64, _v_common: f64) -> f64 {
        self.element(v_line)
    }
    fn output(&self, _k: usize, v_line: f64, v_common: f64) -> Branch {
        let i = self.element(v_line - v_common);
        Branch {
            current: i,
            d_line: i / self.u,
            d_common: -i / self.u,
        }
    }
    fn output_current(&self, _k: usize, v_line: f64, v_common: f64) -> f64 {
        self.element(v_line - v_common)
    }
    /// Lines at their exact voltages, the common node at 0 V: Newton has to find V_C.
    fn closed_form_start(&self, inputs: &[f64], _scratch: &mut [f64], lines: &mut [f64]) -> f64 {
        for (v, &i) in lines.iter_mut().zip(inputs) {
            *v = self.u * (i / self.i0).ln();
        }
        0.0
    }
    fn capacitances(&self) -> (f64, f64) {
        (50e-15, 200e-15)
    }
    fn kappa(&self) -> f64 {
        1.0
    }
    fn load_noise_psd(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        2.0 * ELEMENTARY_CHARGE * self.load_current(k, v_line, v_common)
    }
    fn output_noise_psd(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        2.0 * ELEMENTARY_CHARGE * self.output_current(k, v_line, v_common)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stages::competition::transient::{simulate, TransientOptions, TransientWorkspace};
    use crate::stages::competition::{CompetitionStage, SolveMethod, StageSolution, Workspace};

    /// The generic DC solver on the added stage reproduces `I_b I_k / Σ I_j` (the translinear
    /// normaliser's closed form, module docs) to 1e-9 relative, by Newton.
    #[test]
    fn dc_solve_is_the_normaliser() {
        let c = IdealNormaliser::new(4, 10e-9);
        let inputs = [5e-9, 7e-9, 6e-9, 2e-9];
        let mut out = StageSolution::for_stage(&c);
        c.solve(&inputs, &mut Workspace::new(), &mut out).unwrap();
        let sum: f64 = inputs.iter().sum();
        for (o, i) in out.outputs.iter().zip(inputs) {
            approx::assert_relative_eq!(*o, 10e-9 * i / sum, max_relative = 1e-9);
        }
        assert_eq!(out.info.method, SolveMethod::Newton);
        assert!(out.info.iterations > 1, "{:?}", out.info);
        // V_C = U ln(Σ I / I_b), from the same closed form.
        approx::assert_relative_eq!(
            out.node_voltages[4],
            0.025 * (sum / 10e-9_f64).ln(),
            max_relative = 1e-6
        );
        assert_eq!(c.node_name(4), "V_C");
        assert_eq!(c.node_name(1), "V_1");
    }

    /// The generic transient on the added stage settles onto its DC point (the ODE's steady
    /// state is the KCL solution): the line voltages and the shares agree (the transient's ideal
    /// bias has a ground-compliance factor, module docs of `transient`, which scales the
    /// outputs but not the shares of an exact normaliser).
    #[test]
    fn transient_settles_on_the_dc_point() {
        let c = IdealNormaliser::new(3, 10e-9);
        let inputs = [10e-9, 12e-9, 9e-9];
        let mut ws = TransientWorkspace::new();
        let opts = TransientOptions {
            initial: crate::stages::competition::transient::InitialState::CommonMode,
            ..Default::default()
        };
        let s = simulate(&c, &inputs, &opts, None, &mut ws).unwrap();
        assert!(s.settled, "{s:?}");
        let mut dc = StageSolution::for_stage(&c);
        c.solve(&inputs, &mut Workspace::new(), &mut dc).unwrap();
        for (a, b) in ws.solution().node_voltages[..3]
            .iter()
            .zip(&dc.node_voltages)
        {
            assert!((a - b).abs() < 1e-6, "{a} vs {b}");
        }
        for (a, b) in ws.solution().shares.iter().zip(&dc.shares) {
            assert!((a - b).abs() < 1e-6, "{a} vs {b}");
        }
        // Gain 1: shares I_k / Σ I (0.32, 0.39, 0.29), ambiguous under the default rule (winner
        // share at least 0.6, model notes §4.4), so no decision holds.
        approx::assert_relative_eq!(ws.solution().shares[1], 12.0 / 31.0, max_relative = 1e-6);
        assert_eq!(s.decision, None);
    }

    /// A bias the inputs cannot carry with V_C at or above ground is a compliance error naming
    /// the bias, never a silent answer (DEVELOPERS.md invariant 4).
    #[test]
    fn impossible_bias_is_an_error() {
        let c = IdealNormaliser::new(2, 1e-9);
        let mut out = StageSolution::for_stage(&c);
        let e = c
            .solve(&[1e-12, 1e-12], &mut Workspace::new(), &mut out)
            .unwrap_err();
        assert!(
            matches!(
                e,
                CompetitionError::Compliance {
                    parameter: "bias",
                    ..
                }
            ),
            "{e:?}"
        );
    }
}
